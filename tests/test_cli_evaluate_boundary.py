"""Tests of `imgcut evaluate --method` (auto, boundary, recursive, kway) and `--levels`."""

from __future__ import annotations

import csv

import numpy as np
import pytest
import scipy.io as sio
from PIL import Image
from typer.testing import CliRunner

from imgcut import evaluation
from imgcut.cli import app
from imgcut.presets import get_preset

COLOURS = np.array([[0, 0, 0], [200, 40, 30], [30, 180, 60], [40, 60, 220]], float)


def _truth(k: int, shape=(40, 56)) -> np.ndarray:
    lab = np.ones(shape, np.int32)
    lab[:, shape[1] // 2 + k :] = 2
    lab[shape[0] // 2 :, : shape[1] // 3] = 3
    return lab


@pytest.fixture
def colour_ds(tmp_path):
    """Two colour PNGs of three blocks, .mat ground truth with one human each."""
    root = tmp_path / "ds"
    (root / "images").mkdir(parents=True)
    (root / "groundTruth").mkdir()
    rng = np.random.default_rng(0)
    for i in range(2):
        lab = _truth(i)
        img = np.clip(COLOURS[lab] + rng.normal(0, 6, (*lab.shape, 3)), 0, 255)
        Image.fromarray(img.astype(np.uint8)).save(root / "images" / f"{i}.png")
        cells = np.empty((1, 1), dtype=object)
        cells[0, 0] = {"Segmentation": lab.astype(np.uint16)}
        sio.savemat(root / "groundTruth" / f"{i}.mat", {"groundTruth": cells})
    return root


def _run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def test_default_method_on_colour_is_boundary(colour_ds, tmp_path):
    out = tmp_path / "rep"
    r = _run("evaluate", colour_ds, "--out", out, "-q")
    assert r.exit_code == 0, r.output
    assert r.stdout.startswith("2 images: covering ODS")
    assert "method boundary: 3-channel colour image" in r.stdout
    sweep = get_preset("photo").level_sweep
    assert "Levels swept: " + ", ".join(f"{t:g}" for t in sweep) in r.stdout
    md = (out / "summary.md").read_text()
    assert "- method: `boundary` (asked `auto`): 3-channel colour image" in md
    rows = list(csv.DictReader((out / "per_image.csv").open()))
    assert len(rows) == 2 * len(sweep)
    for name in ("0", "1"):
        n = [int(r["regions"]) for r in rows if r["image"] == name]
        assert n == sorted(n, reverse=True) and n[0] > n[-1]  # levels up, regions down


def test_boundary_levels_and_regions(colour_ds, tmp_path):
    r = _run(
        "evaluate", colour_ds, "--out", tmp_path / "a", "--method", "boundary",
        "--levels", "0.9,0.2,0.5", "-q",
    )  # fmt: skip
    assert r.exit_code == 0, r.output
    assert "Levels swept: 0.2, 0.5, 0.9" in r.stdout
    assert "method boundary was asked for" in (tmp_path / "a" / "summary.md").read_text()
    r = _run("evaluate", colour_ds, "--out", tmp_path / "b", "--regions", "3,1,2", "-q")
    assert r.exit_code == 0, r.output
    assert "method boundary" in r.stdout and "Region counts swept: 1, 2, 3" in r.stdout
    rows = list(csv.DictReader((tmp_path / "b" / "per_image.csv").open()))
    assert [int(r["regions"]) for r in rows if r["image"] == "0"] == [1, 2, 3]


def test_recursive_is_passed_on(colour_ds, tmp_path, monkeypatch):
    seen = []

    def fake(image, counts, **options):
        seen.append(options)
        return [_truth(0, image.shape[:2]) for _ in counts]

    monkeypatch.setattr(evaluation, "segment_sweep", fake)
    r = _run("evaluate", colour_ds, "--out", tmp_path / "r", "--method", "recursive", "-q")
    assert r.exit_code == 0, r.output
    # the method is passed explicitly (the library's own default is "auto")
    assert seen == [{"method": "recursive"}] * 2 and "method recursive was asked for" in r.stdout
    assert "Region counts swept: 2, 3, 4, 6, 8, 12, 16, 24, 32" in r.stdout
    r = _run("evaluate", colour_ds, "--out", tmp_path / "k", "--method", "kway", "-q")
    assert r.exit_code == 0 and seen[-1] == {"method": "kway"}


def test_levels_on_a_grey_dataset_is_a_usage_error(tmp_path):
    root = tmp_path / "grey"
    (root / "images").mkdir(parents=True)
    (root / "groundTruth").mkdir()
    lab = _truth(0)
    Image.fromarray((lab * 60).astype(np.uint8)).save(root / "images" / "g.png")
    cells = np.empty((1, 1), dtype=object)
    cells[0, 0] = {"Segmentation": lab.astype(np.uint16)}
    sio.savemat(root / "groundTruth" / "g.mat", {"groundTruth": cells})
    r = _run("evaluate", root, "--out", tmp_path / "r", "--levels", "0.5")
    assert r.exit_code == 2, r.output
    assert "auto picks recursive here (grey image" in r.stderr


@pytest.mark.parametrize(
    ("extra", "needle"),
    [
        (["--method", "greedy"], "--method must be one of auto, recursive, kway, boundary"),
        (["--levels", "a"], "--levels"),
        (["--levels", "-1"], "--levels"),
        (["--levels", "0.5", "--regions", "3"], "--regions (region counts) or --levels"),
        (["--levels", "0.5", "--method", "kway"], "--levels applies to --method boundary"),
        (["--method", "boundary", "--mode", "objects"], "applies to regions mode"),
    ],
)
def test_usage_errors(colour_ds, tmp_path, extra, needle):
    r = _run("evaluate", colour_ds, "--out", tmp_path / "r", *extra)
    assert r.exit_code == 2, r.output
    err = r.stderr.strip()
    assert err.count("\n") == 0 and "imgcut evaluate: error:" in err and needle in err
