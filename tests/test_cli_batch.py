"""Tests of the ``imgcut batch`` command: options, exit codes, progress lines, Dask."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest
import typer
from PIL import Image
from typer.testing import CliRunner

from imgcut.batch import read_summary
from imgcut.cli import app

runner = CliRunner()


def _folder(root: Path, n: int = 3, *, bad: bool = False) -> Path:
    src = root / "in"
    (src / "sub").mkdir(parents=True)
    rng = np.random.default_rng(0)
    for i in range(n):
        img = np.full((12, 16), 30.0)
        img[:, 8:] = 200
        img += rng.uniform(0, 8, img.shape)
        where = src / "sub" if i % 2 else src
        Image.fromarray(img.astype(np.uint8)).save(where / f"f{i}.png")
    if bad:
        (src / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 10)
    return src


FAST = ["-k", "2", "--radius", "2"]


def test_segment_options_are_shared_not_copied():
    """Every segmentation option of `segment` exists in `batch` with the same flags and default."""
    command = typer.main.get_command(app)
    seg = {p.name: p for p in command.commands["segment"].params}
    bat = {p.name: p for p in command.commands["batch"].params}
    own_to_segment = {"image", "out", "overwrite", "quiet", "as_json", "debug"}
    for name, param in seg.items():
        if name in own_to_segment:
            continue
        assert name in bat, f"batch lacks segment's {param.opts}"
        assert bat[name].opts == param.opts and bat[name].default == param.default
        assert getattr(bat[name], "help", None) == getattr(param, "help", None)
    for flag in ("--channel", "--plane", "--mode", "--regions"):
        assert any(flag in p.opts for p in bat.values())


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["nowhere", "--out", "o"], "does not exist or is not a folder"),
        (["{src}", "--out", "o", "-k", "0"], "--regions must be a count"),
        (["{src}", "--out", "o", "--radius", "-1"], "--radius must be > 0"),
        (["{src}", "--out", "o", "--glob", "/abs/*.tif"], "relative to the input folder"),
        (["{src}", "--out", "o", "--glob", "*.tiff"], "no images found"),
    ],
)
def test_usage_errors_exit_2_with_one_line(tmp_path, monkeypatch, args, message):
    src = _folder(tmp_path, 1)
    monkeypatch.chdir(tmp_path)
    result = runner.invoke(app, ["batch", *[a.format(src=src) for a in args]])
    assert result.exit_code == 2, result.output
    assert message in result.output
    assert not (tmp_path / "o" / "summary.csv").exists()


def test_workers_below_one_is_a_usage_error(tmp_path):
    result = runner.invoke(app, ["batch", str(_folder(tmp_path, 1)), "--out", "o", "-j", "0"])
    assert result.exit_code == 2


def test_missing_dask_is_one_clear_line(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed → ImportError
    src = _folder(tmp_path, 1)
    result = runner.invoke(
        app, ["batch", str(src), "--out", str(tmp_path / "o"), "--scheduler", "tcp://x:1"]
    )
    assert result.exit_code == 2
    assert "needs dask.distributed" in result.output and "pip install" in result.output
    assert "Traceback" not in result.output


def test_plain_progress_lines_summary_and_exit_code(tmp_path):
    src = _folder(tmp_path, 3, bad=True)
    out = tmp_path / "out"
    result = runner.invoke(app, ["batch", str(src), "--out", str(out), *FAST, "-j", "2"])
    assert result.exit_code == 1, result.output  # one image failed
    lines = result.output.splitlines()
    assert lines[0] == "batch: 4 images"  # not a terminal: plain lines, no bar
    assert sum(line.startswith("[") and "/4] done" in line for line in lines) == 3
    assert any("/4] failed  broken.png" in line for line in lines)
    assert "3 done, 0 already up to date, 1 failed" in lines[-1]
    rows = {r.path: r for r in read_summary(out)}
    assert rows["broken.png"].status == "failed" and rows["sub/f1.png"].regions == 2

    again = runner.invoke(app, ["batch", str(src), "--out", str(out), *FAST, "--quiet"])
    assert again.exit_code == 1
    assert again.output.splitlines()[-1].startswith("0 done, 3 already up to date, 1 failed")
    assert len(again.output.splitlines()) == 1  # quiet: the final line only


@pytest.mark.slow
def test_dask_cluster_gives_the_same_files_as_local_workers(tmp_path):
    distributed = pytest.importorskip("distributed")
    src = _folder(tmp_path, 3)
    local = runner.invoke(app, ["batch", str(src), "--out", str(tmp_path / "local"), *FAST])
    assert local.exit_code == 0, local.output
    with distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=False,
        protocol="tcp",
        host="127.0.0.1",
        dashboard_address=None,
    ) as cluster:
        remote = runner.invoke(
            app,
            [
                "batch",
                str(src),
                "--out",
                str(tmp_path / "dask"),
                *FAST,
                "--scheduler",
                cluster.scheduler_address,
            ],
        )
    assert remote.exit_code == 0, remote.output
    names = sorted(
        p.relative_to(tmp_path / "local").as_posix() for p in (tmp_path / "local").rglob("f*.*")
    )
    assert len(names) == 3 * 4
    for name in names:
        a, b = tmp_path / "local" / name, tmp_path / "dask" / name
        if name.endswith(".json"):
            ra, rb = json.loads(a.read_text()), json.loads(b.read_text())
            assert ra["result"] == rb["result"] and ra["input"]["sha256"] == rb["input"]["sha256"]
            assert ra["options_fingerprint"] == rb["options_fingerprint"]
            assert rb["run"]["worker"].startswith("tcp://127.0.0.1:")
        else:  # labels, overlay, region table: byte for byte
            assert a.read_bytes() == b.read_bytes(), name
    record = json.loads((tmp_path / "dask" / "batch.json").read_text())
    assert record["scheduler"].startswith("tcp://127.0.0.1:") and record["done"] == 3


def test_progress_bar_on_a_terminal_counts_done_failed_remaining():
    import io

    from imgcut.batch import BatchProgress, ImageResult
    from imgcut.cli.batch_cmd import _Progress

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    screen = Terminal()
    with _Progress(quiet=False, stream=screen) as view:
        assert view.live
        view(BatchProgress(4, 0, 0, 0))
        view(BatchProgress(4, 0, 1, 0, ImageResult("0.tif", "skipped")))
        view(BatchProgress(4, 1, 1, 0, ImageResult("a.tif", "done", seconds=1.0)))
        view(BatchProgress(4, 1, 1, 1, ImageResult("b.tif", "failed", "b.tif: bad [bold]x")))
    text = screen.getvalue()
    assert "1 done" in text and "1 failed" in text and "1 remaining" in text
    assert "1 image already up to date" in text and "1 up to date" in text
    assert "2/3" in text  # the bar counts the images being computed, not the skipped one
    assert "b.tif: bad [bold]x" in text  # messages are printed literally, not as markup


def test_plain_lines_count_skipped_images_once(capsys):
    from imgcut.batch import BatchProgress, ImageResult
    from imgcut.cli.batch_cmd import _Progress

    with _Progress(quiet=False) as view:  # captured stdout is not a terminal
        view(BatchProgress(3, 0, 0, 0))
        for i in range(3):
            view(BatchProgress(3, 0, i + 1, 0, ImageResult(f"{i}.tif", "skipped")))
    assert capsys.readouterr().out.splitlines() == [
        "batch: 3 images",
        "3 images already up to date (skipped)",
    ]


def test_channel_option_reaches_every_image(tmp_path):
    import tifffile

    src = tmp_path / "in"
    src.mkdir()
    left_right = np.full((12, 16), 100, np.uint16)
    left_right[:, 8:] = 3000
    top_bottom = np.full((12, 16), 100, np.uint16)
    top_bottom[6:] = 3000
    for i in range(2):
        tifffile.imwrite(
            src / f"two{i}.tif",
            np.stack([left_right, top_bottom]),
            imagej=True,
            metadata={"axes": "CYX"},
        )
    out = tmp_path / "out"
    result = runner.invoke(app, ["batch", str(src), "--out", str(out), *FAST, "--channel", "1"])
    assert result.exit_code == 0, result.output
    for i in range(2):
        labels = np.asarray(Image.open(out / f"two{i}.labels.png"))
        # Channel 1 is split top/bottom; channel 0 would have split left/right.
        assert labels[0, 0] == labels[0, -1] == 1 and labels[-1, 0] == 2
        assert json.loads((out / f"two{i}.json").read_text())["options"]["channel"] == [1]


def test_objects_mode_fills_the_objects_column(tmp_path):
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "scripts"))
    try:
        from make_sample_images import make_nuclei  # our own synthetic nuclei generator
    finally:
        sys.path.pop(0)
    import tifffile

    src = tmp_path / "in"
    src.mkdir()
    image, truth = make_nuclei(seed=3, shape=(96, 96), n=5)
    tifffile.imwrite(src / "field.tif", image)
    out = tmp_path / "out"
    result = runner.invoke(app, ["batch", str(src), "--out", str(out), "--mode", "objects"])
    assert result.exit_code == 0, result.output
    [row] = read_summary(out)
    labels = np.asarray(Image.open(out / "field.labels.png"))
    assert row.objects == labels.max() >= 1  # one label per object, background 0
    assert (labels == 0).any()
    assert json.loads((out / "field.json").read_text())["options"]["mode"] == "objects"


def test_unreachable_scheduler_is_one_line_exit_1(tmp_path, monkeypatch):
    pytest.importorskip("distributed")
    import imgcut.batch

    def refuse(*args, **kwargs):
        raise OSError("Timed out trying to connect to tcp://127.0.0.1:9 after 30 s")

    monkeypatch.setattr(imgcut.batch, "_import_distributed", lambda: (refuse, None))
    src = _folder(tmp_path, 1)
    result = runner.invoke(
        app, ["batch", str(src), "--out", str(tmp_path / "o"), "--scheduler", "tcp://127.0.0.1:9"]
    )
    assert result.exit_code == 1
    assert result.output.strip().endswith(
        "Timed out trying to connect to tcp://127.0.0.1:9 after 30 s"
    )
    assert "Traceback" not in result.output


def test_scale_is_part_of_the_batch_fingerprint(tmp_path):
    src = _folder(tmp_path, 1)
    out = tmp_path / "out"
    kway = [*FAST, "--method", "kway", "-j", "1", "--no-gallery"]
    first = runner.invoke(app, ["batch", str(src), "--out", str(out), *kway, "--scale", "single"])
    assert first.exit_code == 0, first.output
    same = runner.invoke(app, ["batch", str(src), "--out", str(out), *kway, "--scale", "single"])
    assert "0 done, 1 already up to date" in same.output
    other = runner.invoke(app, ["batch", str(src), "--out", str(out), *kway, "--scale", "multi"])
    assert "1 done, 0 already up to date" in other.output, other.output
    record = json.loads((out / "f0.json").read_text())
    assert record["options"]["scale"] == "multi"
    refused = runner.invoke(app, ["batch", str(src), "--out", str(out), "--scale", "multi"])
    assert refused.exit_code == 2 and "--scale multi needs" in refused.output
