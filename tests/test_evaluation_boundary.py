"""Tests of imgcut.evaluation with the boundary (region hierarchy) method and method choice."""

from __future__ import annotations

import csv
import importlib.util
from pathlib import Path

import numpy as np
import pytest
import scipy.io as sio
from PIL import Image
from sklearn.metrics import rand_score

import imgcut.hierarchy
from imgcut import evaluation
from imgcut.evaluation import (
    boundary_sweep,
    evaluate_dataset,
    resolve_method,
    write_report,
)
from imgcut.presets import get_preset

PHOTO_SWEEP = tuple(get_preset("photo").level_sweep)
# colours of regions 1..3 (0 unused), far apart in every channel
COLOURS = np.array([[0, 0, 0], [200, 40, 30], [30, 180, 60], [40, 60, 220]], float)


def _truth(k: int, shape=(40, 56)) -> np.ndarray:
    lab = np.ones(shape, np.int32)
    lab[:, shape[1] // 2 + k :] = 2
    lab[shape[0] // 2 :, : shape[1] // 3] = 3
    return lab


def _image(lab: np.ndarray, seed: int, grey: bool = False) -> np.ndarray:
    rng = np.random.default_rng(seed)
    img = np.clip(COLOURS[lab] + rng.normal(0, 6, (*lab.shape, 3)), 0, 255).astype(np.uint8)
    return img.mean(axis=2).astype(np.uint8) if grey else img


def _make_colour(root: Path, n: int = 2, grey: tuple[int, ...] = ()) -> Path:
    """BSDS-layout dataset: PNG images (lossless) and .mat ground truth with two humans."""
    (root / "images").mkdir(parents=True)
    (root / "groundTruth").mkdir()
    for i in range(n):
        lab = _truth(i)
        Image.fromarray(_image(lab, i, grey=i in grey)).save(root / "images" / f"{i}.png")
        cells = np.empty((1, 2), dtype=object)
        cells[0, 0] = {"Segmentation": lab.astype(np.uint16)}
        cells[0, 1] = {"Segmentation": _truth(i + 1).astype(np.uint16)}
        sio.savemat(root / "groundTruth" / f"{i}.mat", {"groundTruth": cells})
    return root


def _is_refinement(fine: np.ndarray, coarse: np.ndarray) -> bool:
    """Every region of ``fine`` lies inside one region of ``coarse`` (nested partitions)."""
    pairs = np.unique(np.stack([fine.ravel(), coarse.ravel()]), axis=1)
    return pairs.shape[1] == np.unique(fine).size


def _covering(seg: np.ndarray, human: np.ndarray) -> float:
    """Covering of ``human`` by ``seg`` written from its definition (Arbelaez et al. 2011,
    eq. 11): (1/N) sum over human regions R of |R| max over machine regions R' of
    |R ∩ R'| / |R ∪ R'|; a direct loop, independent of imgcut.metrics."""
    total = 0.0
    for r in np.unique(human):
        a = human == r
        best = max((a & (seg == s)).sum() / (a | (seg == s)).sum() for s in np.unique(seg[a]))
        total += a.sum() * best
    return total / human.size


def test_boundary_sweep_levels_are_nested_and_monotone():
    img = _image(_truth(0), 0)
    labs = boundary_sweep(img, PHOTO_SWEEP)
    counts = [int(np.unique(lab).size) for lab in labs]
    # thresholds of one ultrametric: regions can only merge as the level rises
    assert all(a >= b for a, b in zip(counts, counts[1:], strict=False))
    assert all(_is_refinement(f, c) for f, c in zip(labs, labs[1:], strict=False))
    by_count = boundary_sweep(img, (1, 2, 3), by="regions")
    assert [int(lab.max()) for lab in by_count] == [1, 2, 3]
    with pytest.raises(ValueError, match="by must be"):
        boundary_sweep(img, (0.5,), by="count")


def test_resolve_method_follows_segment():
    # same rule and sentence as imgcut.runner.choose_method (what `imgcut segment` runs)
    assert resolve_method("auto", (40, 56, 3))[0] == "boundary"
    used, why = resolve_method("auto", (40, 56))
    assert used == "recursive" and "grey" in why
    assert resolve_method("auto", (40, 56, 3), {"radius": 3})[0] == "recursive"
    assert resolve_method("kway", (40, 56, 3))[0] == "kway"
    with pytest.raises(ValueError, match="method must be one of auto, recursive, kway"):
        resolve_method("greedy", (4, 4))


def test_auto_on_colour_runs_boundary_over_the_preset_sweep(tmp_path, monkeypatch):
    root = _make_colour(tmp_path / "ds")
    calls = []
    real = imgcut.hierarchy.image_hierarchy

    def counting(image, **kw):
        calls.append(image.shape)
        return real(image, **kw)

    monkeypatch.setattr(imgcut.hierarchy, "image_hierarchy", counting)
    res = evaluate_dataset(root)
    assert len(calls) == 2  # one hierarchy per image gives its whole sweep
    assert res.method == "boundary" and res.sweep == "level"
    assert res.options["method"]["asked"] == "auto"
    assert "3-channel colour" in res.method_reason and "first image, 0" in res.method_reason
    assert res.counts == PHOTO_SWEEP
    for im in res.images:
        assert im.counts == PHOTO_SWEEP
        assert all(a >= b for a, b in zip(im.n_regions, im.n_regions[1:], strict=False))
        # the blocks, then one; the photo preset's hierarchy ensemble (imgcut.ensemble) keeps
        # a 115-px corner piece of image 0 up to level 0.31, and its learned boundary strength
        # (imgcut.boundary_model) leaves a faint ridge a few pixels beside a perfect step, so
        # the sweep's first level (0.3) may hold one or two extra pieces
        assert 3 <= im.n_regions[0] <= 5 and im.n_regions[-1] == 1
        assert im.n_regions[PHOTO_SWEEP.index(0.5)] == 3
        labs = [im.label_image(k) for k in range(len(PHOTO_SWEEP))]
        assert all(_is_refinement(f, c) for f, c in zip(labs, labs[1:], strict=False))
    # the scores are those of the stored label images: covering against its definition,
    # PRI against scikit-learn's Rand index (mean over the two humans, Unnikrishnan et al.)
    truths = {0: (_truth(0), _truth(1)), 1: (_truth(1), _truth(2))}
    for i, im in enumerate(res.images):
        for k in (0, len(PHOTO_SWEEP) // 2, len(PHOTO_SWEEP) - 1):
            lab, sc = im.label_image(k), im.scores[k].region
            hs = truths[i]
            cov = sum(_covering(lab, h) * h.size for h in hs) / sum(h.size for h in hs)
            assert sc.covering == pytest.approx(cov, abs=1e-12)
            pri = np.mean([rand_score(h.ravel(), lab.ravel()) for h in hs])
            assert sc.pri == pytest.approx(pri, abs=1e-12)
    # three well-separated colour blocks: some level of the sweep recovers them closely
    assert res.regions.covering_ois > 0.9


def test_boundary_by_region_counts(tmp_path):
    root = _make_colour(tmp_path / "ds", n=1)
    res = evaluate_dataset(root, method="boundary", counts=(1, 2, 3))
    assert res.sweep == "regions" and res.counts == (1, 2, 3)
    assert res.images[0].n_regions == (1, 2, 3)
    assert res.options["method"] == {
        "asked": "boundary",
        "used": "boundary",
        "reason": "method boundary was asked for",
    }


def test_explicit_levels_and_the_report(tmp_path):
    root = _make_colour(tmp_path / "ds")
    levels = (0.2, 0.5, 0.9)
    res = evaluate_dataset(root, method="boundary", levels=levels)
    assert res.counts == levels
    files = write_report(res, tmp_path / "rep", n_examples=1)
    assert {"summary.md", "per_image.csv", "summary.csv", "boundary_pr.png"} <= {
        p.name for p in files
    }
    md = (tmp_path / "rep" / "summary.md").read_text()
    assert "- method: `boundary`: method boundary was asked for" in md
    assert "hierarchy levels swept" in md and "0.2, 0.5, 0.9" in md
    rows = list(csv.DictReader((tmp_path / "rep" / "per_image.csv").open()))
    assert len(rows) == 2 * 3 and {r["method"] for r in rows} == {"boundary"}
    assert [float(r["level"]) for r in rows[:3]] == list(levels)
    summary = list(csv.DictReader((tmp_path / "rep" / "summary.csv").open()))
    cov = next(r for r in summary if r["measure"] == "covering")
    k = levels.index(float(cov["ODS_level"]))
    assert float(cov["ODS_mean_regions"]) == np.mean([im.n_regions[k] for im in res.images])


def test_auto_on_grey_runs_recursive_and_kway_is_passed_on(tmp_path, monkeypatch):
    root = _make_colour(tmp_path / "ds", n=1, grey=(0,))
    calls = []

    def fake(image, counts, **options):
        calls.append(options)
        return [_truth(0, image.shape[:2]) for _ in counts]

    monkeypatch.setattr(evaluation, "segment_sweep", fake)
    res = evaluate_dataset(root, counts=(2, 3))
    assert res.method == "recursive" and "grey image" in res.method_reason
    assert calls[-1] == {"method": "recursive"}
    res = evaluate_dataset(root, counts=(2, 3), method="kway")
    assert res.method == "kway" and calls[-1] == {"method": "kway"}
    # older callers put the method in segment_options
    res = evaluate_dataset(root, counts=(2,), segment_options={"method": "kway"})
    assert res.method == "kway" and calls[-1] == {"method": "kway"}


def test_mixed_dataset_keeps_one_method_and_warns(tmp_path):
    root = _make_colour(tmp_path / "ds", n=2, grey=(1,))
    res = evaluate_dataset(root, levels=(0.3, 0.6))
    assert res.method == "boundary"
    assert not res.images[0].warnings
    assert any("would pick recursive" in w for w in res.images[1].warnings)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"method": "greedy"}, "method must be one of"),
        ({"counts": (2,), "levels": (0.5,)}, "not both"),
        ({"method": "recursive", "levels": (0.5,)}, "levels .* apply to method boundary"),
        ({"method": "boundary", "segment_options": {"radius": 3}}, "radius not used by"),
        ({"levels": (float("nan"),)}, "finite"),
        ({"mode": "objects", "method": "boundary"}, "applies to regions mode"),
    ],
)
def test_bad_method_options(tmp_path, kwargs, match):
    root = _make_colour(tmp_path / "ds", n=1)
    with pytest.raises(ValueError, match=match):
        evaluate_dataset(root, **kwargs)


def test_parallel_jobs_give_the_same_boundary_scores(tmp_path):
    root = _make_colour(tmp_path / "ds")
    one = evaluate_dataset(root, levels=(0.3, 0.6))
    two = evaluate_dataset(root, levels=(0.3, 0.6), jobs=2)
    assert two.method == one.method == "boundary"
    assert two.regions.covering_ods == one.regions.covering_ods
    assert two.boundaries.ods_f == one.boundaries.ods_f


@pytest.mark.slow
def test_bsds_val_image_matches_the_benchmark_script(shared_data):
    """One BSDS500 val image scored by `evaluate` and by benchmarks/bench_bsds.py agree."""
    path = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_bsds.py"
    spec = importlib.util.spec_from_file_location("bench_bsds_for_test", path)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    if not (bench.DATA / "val").is_dir():
        pytest.skip(f"the benchmark script reads {bench.DATA}, which is absent")
    preset = get_preset("photo")
    levels = (preset.default_level, PHOTO_SWEEP[0], PHOTO_SWEEP[-1])
    res = evaluate_dataset(
        shared_data / "bsds500" / "val", method="boundary", levels=levels, limit=1
    )
    im = res.images[0]
    ref = bench._score("val", im.name, preset, ("imgcut",))["region"]["imgcut"]
    for j, t in enumerate(levels):
        overlap, area, pri, voi, n = ref[PHOTO_SWEEP.index(t)]
        sc = im.scores[j].region
        assert sc.covering == pytest.approx(overlap / area, abs=1e-9)
        assert sc.pri == pytest.approx(pri, abs=1e-9)
        assert sc.voi.total == pytest.approx(voi, abs=1e-9)
        assert im.n_regions[j] == n
