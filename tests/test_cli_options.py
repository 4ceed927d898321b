"""Tests of ``imgcut.cli._options``: shared parsers and one-line usage errors of every command.

A value typer cannot convert must give one line ``imgcut COMMAND: error: ...`` naming the option
and the problem, exit status 2, and neither the usage text, a boxed panel nor a traceback.
"""

from __future__ import annotations

import numpy as np
import pytest
from PIL import Image
from typer.testing import CliRunner

from imgcut.cli import app
from imgcut.cli._options import (
    UsageProblem,
    gib,
    parse_channel,
    parse_plane,
    parse_regions,
    segment_options,
)


@pytest.fixture
def image(tmp_path):
    img = np.zeros((8, 10), np.uint8)
    img[:, 5:] = 200
    Image.fromarray(img).save(tmp_path / "two.png")
    return tmp_path / "two.png"


def assert_one_line_usage_error(result, command: str, *fragments: str) -> None:
    assert result.exit_code == 2, (result.exit_code, result.output)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith(f"imgcut {command}: error: "), lines[0]
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])
    for noise in ("Usage:", "╭", "Traceback", "Try '"):
        assert noise not in result.output, result.output
    assert result.stdout == ""


@pytest.mark.parametrize(
    "args, fragments",
    [
        (["--radius", "abc"], ["--radius must be a number, got 'abc'"]),
        (["-r", "wide"], ["--radius must be a number, got 'wide'"]),
        (["--tol", "x"], ["--tol must be a number, got 'x'"]),
        (["--tol=1e-x"], ["--tol must be a number, got '1e-x'"]),
        (["--seed", "1.5"], ["--seed must be a whole number, got '1.5'"]),
        (["--maxiter", "lots"], ["--maxiter must be a whole number, got 'lots'"]),
        (["--min-area", "3.5"], ["--min-area must be a whole number, got '3.5'"]),
        (["--max-ncut", "low"], ["--max-ncut must be a number, got 'low'"]),
        (["--fill", "half"], ["--fill must be a number, got 'half'"]),
        (["--memory-budget", "4G"], ["--memory-budget must be a number, got '4G'"]),
        (["--max-pixels", "1e6"], ["--max-pixels must be a whole number, got '1e6'"]),
        (["--radius"], ["--radius", "requires an argument"]),
        (["--no-such-flag"], ["--no-such-flag"]),
    ],
)
def test_segment_malformed_values(image, args, fragments):
    result = CliRunner().invoke(app, ["segment", str(image), *args])
    assert_one_line_usage_error(result, "segment", *fragments)
    assert not (image.parent / "two.json").exists()


@pytest.mark.parametrize(
    "args, fragments",
    [
        (["--seed", "1.5"], ["--seed must be a whole number, got '1.5'"]),
        (["--radius", "abc"], ["--radius must be a number, got 'abc'"]),
        (["--workers", "two"], ["--workers must be a whole number, got 'two'"]),
        (["-j", "0"], ["--workers", "got '0'"]),
        (["--tol", "x"], ["--tol must be a number"]),
    ],
)
def test_batch_malformed_values(image, tmp_path, args, fragments):
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["batch", str(image.parent), "--out", str(out), *args])
    assert_one_line_usage_error(result, "batch", *fragments)
    assert not out.exists()


@pytest.mark.parametrize(
    "args, fragments",
    [
        (["--jobs", "x"], ["--jobs must be a whole number, got 'x'"]),
        (["--limit", "1.5"], ["--limit must be a whole number, got '1.5'"]),
        (["--max-dist", "far"], ["--max-dist must be a number, got 'far'"]),
    ],
)
def test_evaluate_malformed_values(tmp_path, args, fragments):
    result = CliRunner().invoke(app, ["evaluate", str(tmp_path), "--out", "r", *args])
    assert_one_line_usage_error(result, "evaluate", *fragments)


def test_score_malformed_value(tmp_path):
    result = CliRunner().invoke(app, ["score", "a.png", "b.png", "--max-dist", "q"])
    assert_one_line_usage_error(result, "score", "--max-dist must be a number, got 'q'")


def test_help_and_bare_command_still_show_help():
    runner = CliRunner()
    assert runner.invoke(app, ["segment", "--help"]).exit_code == 0
    bare = runner.invoke(app, ["segment"])
    assert "Usage" in bare.output and "error:" not in bare.output


def test_parsers():
    assert parse_regions("auto") is None and parse_regions(" 5 ") == 5
    assert parse_plane("MAX") == "max" and parse_plane("2") == 2 and parse_plane(None) is None
    assert parse_channel("0,2") == (0, 2) and parse_channel(None) is None
    assert gib(1) == 2**30 and gib(None) is None
    for bad, parse in (("0", parse_regions), ("x", parse_regions), ("-1", parse_plane)):
        with pytest.raises(UsageProblem):
            parse(bad)


def test_segment_options_name_the_flag():
    assert segment_options({"regions": "3", "radius": 2.0}).n_regions == 3
    with pytest.raises(UsageProblem, match="^--radius must be > 0"):
        segment_options({"radius": -1.0})


@pytest.mark.parametrize(
    "args, fragment",
    [(["segmnt", "x.png"], "No such command 'segmnt'"), (["--bogus"], "No such option: --bogus")],
)
def test_unknown_command_or_root_option_is_one_line(args, fragment):
    result = CliRunner().invoke(app, args)
    assert result.exit_code == 2
    assert result.stderr.strip().splitlines() == [result.stderr.strip()]
    assert result.stderr.startswith("imgcut: error: ") and fragment in result.stderr
    assert "Usage:" not in result.output and "╭" not in result.output
