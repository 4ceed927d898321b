"""Tests of the `imgcut evaluate` and `imgcut score` commands."""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.io as sio
from PIL import Image
from typer.testing import CliRunner

from imgcut import evaluation
from imgcut.cli import app


def _scene(k: int, shape=(40, 60)) -> np.ndarray:
    lab = np.ones(shape, np.int32)
    lab[:, shape[1] // 2 + k :] = 2
    lab[shape[0] // 2 :, : shape[1] // 3] = 3
    return lab


@pytest.fixture
def bsds(tmp_path):
    root = tmp_path / "ds"
    (root / "images").mkdir(parents=True)
    (root / "groundTruth").mkdir()
    for i in range(2):
        lab = _scene(i)
        Image.fromarray((lab * 60).astype(np.uint8)).save(root / "images" / f"{i}.jpg")
        cells = np.empty((1, 2), dtype=object)
        cells[0, 0] = {"Segmentation": lab.astype(np.uint16)}
        cells[0, 1] = {"Segmentation": _scene(i + 1).astype(np.uint16)}
        sio.savemat(root / "groundTruth" / f"{i}.mat", {"groundTruth": cells})
    return root


@pytest.fixture
def stub_segmenter(monkeypatch):
    def fake(image, counts, **options):
        return [_scene(0, image.shape[:2]) for _ in counts]

    monkeypatch.setattr(evaluation, "segment_sweep", fake)


def _run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def _one_line_error(result, code, *needles):
    assert result.exit_code == code, result.output
    err = result.stderr.strip()
    assert err.count("\n") == 0 and "Traceback" not in err
    for n in needles:
        assert n in err
    return err


def test_evaluate_writes_report(bsds, tmp_path, stub_segmenter):
    out = tmp_path / "rep"
    r = _run("evaluate", bsds, "--out", out, "--regions", "2,4", "--quiet")
    assert r.exit_code == 0, r.output
    assert "covering ODS" in r.stdout and "summary.md" in r.stdout
    for name in ("per_image.csv", "summary.csv", "summary.md", "boundary_pr.png"):
        assert (out / name).is_file()


def test_evaluate_failed_image_exit_1_report_written(bsds, tmp_path, stub_segmenter):
    (bsds / "images" / "1.jpg").write_bytes(b"junk")
    out = tmp_path / "rep"
    r = _run("evaluate", bsds, "--out", out, "--regions", "2")
    assert r.exit_code == 1
    assert "1: failed, skipped" in r.stderr and "Traceback" not in r.output
    assert (out / "failures.csv").is_file() and (out / "summary.md").is_file()


def test_evaluate_limit(bsds, tmp_path, stub_segmenter):
    r = _run("evaluate", bsds, "--out", tmp_path / "r", "--regions", "2", "--limit", "1", "-q")
    assert r.exit_code == 0 and r.stdout.startswith("1 images")


@pytest.mark.parametrize(
    ("extra", "needle"),
    [
        (["--regions", "0,2"], "--regions"),
        (["--regions", "a"], "--regions"),
        (["--mode", "pixels"], "--mode"),
        (["--method", "greedy"], "--method"),
        (["--iou", "1.5"], "--iou"),
        (["--max-dist", "0"], "--max-dist"),
        (["--limit", "0"], "--limit"),
        (["--jobs", "0"], "--jobs"),
    ],
)
def test_evaluate_usage_errors(bsds, tmp_path, extra, needle):
    r = _run("evaluate", bsds, "--out", tmp_path / "r", *extra)
    _one_line_error(r, 2, "imgcut evaluate: error:", needle)


def test_evaluate_needs_out(bsds):
    _one_line_error(_run("evaluate", bsds), 2, "--out")


def test_evaluate_bad_folder(tmp_path):
    r = _run("evaluate", tmp_path / "nothing", "--out", tmp_path / "r")
    _one_line_error(r, 2, "nothing", "no such folder")
    (tmp_path / "empty").mkdir()
    r = _run("evaluate", tmp_path / "empty", "--out", tmp_path / "r")
    _one_line_error(r, 2, "empty", "expected images/")


def test_score_prints_measures_and_json(tmp_path):
    g = _scene(0).astype(np.uint16)
    Image.fromarray(g).save(tmp_path / "s.png")
    cells = np.empty((1, 2), dtype=object)
    cells[0, 0] = {"Segmentation": g}
    cells[0, 1] = {"Segmentation": _scene(2).astype(np.uint16)}
    sio.savemat(tmp_path / "gt.mat", {"groundTruth": cells})
    r = _run("score", tmp_path / "s.png", tmp_path / "gt.mat")
    assert r.exit_code == 0 and "covering" in r.stdout and "boundary_f" in r.stdout
    r = _run("score", tmp_path / "s.png", tmp_path / "s.png", "--json")
    d = json.loads(r.stdout)
    assert d["covering"] == 1.0 and d["voi"] == 0.0 and d["boundary_f"] == 1.0
    r = _run("score", tmp_path / "s.png", tmp_path / "s.png", "--objects", "--json")
    d = json.loads(r.stdout)
    assert d["f1"] == [1.0] * 5 and d["n_true"] == 3


def test_score_npy_and_several_ground_truths(tmp_path):
    g = _scene(0)
    np.save(tmp_path / "s.npy", g)
    Image.fromarray(g.astype(np.uint8)).save(tmp_path / "a.png")
    Image.fromarray(_scene(3).astype(np.uint8)).save(tmp_path / "b.png")
    r = _run("score", tmp_path / "s.npy", tmp_path / "a.png", tmp_path / "b.png", "--json")
    assert r.exit_code == 0 and json.loads(r.stdout)["n_humans"] == 2


def test_score_errors(tmp_path):
    Image.fromarray(_scene(0).astype(np.uint8)).save(tmp_path / "s.png")
    Image.fromarray(np.ones((5, 5), np.uint8)).save(tmp_path / "small.png")
    (tmp_path / "junk.png").write_bytes(b"xx")
    r = _run("score", tmp_path / "s.png", tmp_path / "missing.mat")
    _one_line_error(r, 2, "missing.mat", "no such file")
    r = _run("score", tmp_path / "s.png", tmp_path / "small.png")
    _one_line_error(r, 1, "small.png", "shape")
    r = _run("score", tmp_path / "junk.png", tmp_path / "s.png")
    _one_line_error(r, 1, "junk.png")
    r = _run("score", tmp_path / "s.png", tmp_path / "s.png", "--iou", "x")
    _one_line_error(r, 2, "--iou")
