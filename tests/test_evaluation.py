"""Tests of imgcut.evaluation: one image, human agreement, dataset runs and reports."""

from __future__ import annotations

import csv

import numpy as np
import pytest
import scipy.io as sio
from PIL import Image

from imgcut import evaluation
from imgcut.evaluation import (
    evaluate_dataset,
    human_agreement,
    score_image,
    segment_sweep,
    summarize_instances,
    write_report,
)
from imgcut.groundtruth import GroundTruth, GroundTruthError
from imgcut.metrics import instance_scores


def _scene(k: int, shape=(40, 60)) -> np.ndarray:
    lab = np.ones(shape, np.int32)
    lab[:, shape[1] // 2 + k :] = 2
    lab[shape[0] // 2 :, : shape[1] // 3] = 3
    return lab


def _make_bsds(root, n=3):
    (root / "images").mkdir(parents=True)
    (root / "groundTruth").mkdir()
    for i in range(n):
        lab = _scene(i)
        img = (lab * 60).astype(np.uint8)
        Image.fromarray(np.stack([img] * 3, -1)).save(root / "images" / f"{i}.jpg")
        cells = np.empty((1, 2), dtype=object)
        cells[0, 0] = {"Segmentation": lab.astype(np.uint16)}
        cells[0, 1] = {"Segmentation": _scene(i + 1).astype(np.uint16)}
        sio.savemat(root / "groundTruth" / f"{i}.mat", {"groundTruth": cells})
    return root


def _make_masks(root, n=2):
    (root / "images").mkdir(parents=True)
    (root / "masks").mkdir()
    for i in range(n):
        lab = np.zeros((30, 40), np.uint16)
        lab[3:10, 3:10] = 1
        lab[15:25, 20 + i : 30 + i] = 2
        Image.fromarray((lab > 0).astype(np.uint8) * 200).save(root / "images" / f"f{i}.png")
        Image.fromarray(lab).save(root / "masks" / f"f{i}.png")
    return root


def truth_sweep(image, counts):
    """Stub segmenter (module level: picklable for --jobs): coarse to exact."""
    lab = _scene(0, image.shape[:2])
    return [np.where(lab == 3, 1, lab) if c < 3 else lab for c in counts]


def test_score_image_identity():
    g = _scene(0)
    s = score_image(g, GroundTruth((g, g)))
    assert (s.region.covering, s.region.pri, s.region.voi.total, s.boundary.f) == (1, 1, 0, 1)
    assert s.as_dict()["n_humans"] == 2


def test_human_agreement_synthetic():
    a = human_agreement([GroundTruth((_scene(0), _scene(0))), GroundTruth((_scene(1),))])
    assert a.n_images == 1 and a.n_comparisons == 2 and a.covering == 1.0
    with pytest.raises(ValueError, match="at least two"):
        human_agreement([GroundTruth((_scene(0),))])


def test_evaluate_bsds_layout_with_stub(tmp_path):
    root = _make_bsds(tmp_path / "ds")
    seen = []
    res = evaluate_dataset(
        root, counts=(2, 3), sweep_segmenter=truth_sweep, progress=lambda n, e: seen.append(n)
    )
    assert res.mode == "regions" and len(res.images) == 3 and not res.failures
    assert seen == ["0", "1", "2"]
    # Image 0's stub at 3 regions equals human 1 exactly: per-image OIS picks level 1.
    assert res.regions.covering_ods_index == 1
    assert res.images[0].scores[1].region.covering > res.images[0].scores[0].region.covering
    assert res.boundaries.ois_f >= res.boundaries.ods_f
    assert res.regions.covering_best >= res.regions.covering_ois >= res.regions.covering_ods


def test_warnings_are_recorded_per_image(tmp_path):
    import warnings

    from imgcut._errors import EigenConvergenceWarning

    root = _make_bsds(tmp_path / "ds", n=2)

    def noisy(image, counts):
        warnings.warn("residual 3e-5 above tol", EigenConvergenceWarning, stacklevel=1)
        warnings.warn("residual 3e-5 above tol", EigenConvergenceWarning, stacklevel=1)
        return truth_sweep(image, counts)

    res = evaluate_dataset(root, counts=(2,), sweep_segmenter=noisy)
    assert res.images[0].warnings == ["EigenConvergenceWarning: residual 3e-5 above tol"]
    write_report(res, tmp_path / "rep")
    assert "## Warnings" in (tmp_path / "rep" / "summary.md").read_text()


def test_label_images_are_kept_compressed(tmp_path):
    root = _make_bsds(tmp_path / "ds", n=1)
    res = evaluate_dataset(root, counts=(2, 3), sweep_segmenter=truth_sweep)
    im = res.images[0]
    assert np.array_equal(im.label_image(1), _scene(0))
    assert im.label_image(0).dtype == np.int32 and im.label_image(0).max() == 2
    assert sum(len(p[0]) for p in im.packed_labels) < _scene(0).nbytes


def test_failed_image_is_reported_and_skipped(tmp_path):
    root = _make_bsds(tmp_path / "ds")
    (root / "images" / "1.jpg").write_bytes(b"broken")
    res = evaluate_dataset(root, counts=(2,), sweep_segmenter=truth_sweep, limit=3)
    assert [i.name for i in res.images] == ["0", "2"]
    assert len(res.failures) == 1 and res.failures[0][0] == "1"
    assert "\n" not in res.failures[0][1]


def test_limit_and_bad_options(tmp_path):
    root = _make_bsds(tmp_path / "ds")
    res = evaluate_dataset(root, counts=(2,), sweep_segmenter=truth_sweep, limit=1)
    assert len(res.images) == 1
    with pytest.raises(ValueError, match="mode"):
        evaluate_dataset(root, mode="pixels")
    with pytest.raises(ValueError, match="counts"):
        evaluate_dataset(root, counts=(0,))
    with pytest.raises(GroundTruthError, match="not a folder"):
        evaluate_dataset(tmp_path / "missing")


def test_every_image_failing_raises(tmp_path):
    root = _make_bsds(tmp_path / "ds", n=1)

    def boom(image, counts):
        raise RuntimeError("solver exploded")

    with pytest.raises(ValueError, match="every image failed.*solver exploded"):
        evaluate_dataset(root, sweep_segmenter=boom)


def test_default_segmenter_is_used_and_hookable(tmp_path, monkeypatch):
    root = _make_bsds(tmp_path / "ds", n=1)
    calls = []

    def fake(image, counts, **options):
        calls.append((tuple(counts), options))
        return truth_sweep(image, counts)

    monkeypatch.setattr(evaluation, "segment_sweep", fake)
    evaluate_dataset(root, counts=(2, 4), segment_options={"radius": 3})
    assert calls == [((2, 4), {"radius": 3, "method": "recursive"})]


def test_parallel_jobs_give_the_same_scores(tmp_path):
    root = _make_bsds(tmp_path / "ds")
    one = evaluate_dataset(root, counts=(2, 3), sweep_segmenter=truth_sweep)
    two = evaluate_dataset(root, counts=(2, 3), sweep_segmenter=truth_sweep, jobs=2)
    assert [i.name for i in two.images] == [i.name for i in one.images]
    assert two.regions.covering_ods == one.regions.covering_ods
    assert two.boundaries.ods_f == one.boundaries.ods_f


def test_objects_mode_on_masks_layout(tmp_path):
    root = _make_masks(tmp_path / "nuc")

    from imgcut.groundtruth import read_label_image

    truths = {p.stem: read_label_image(p) for p in (root / "masks").iterdir()}
    order = iter(sorted(truths))
    res = evaluate_dataset(root, object_segmenter=lambda im: truths[next(order)])
    assert res.mode == "objects"
    assert res.instances.f1.tolist() == [1.0] * 5
    assert res.instances.n_true == 4


def test_summarize_instances_pools_counts():
    t = _scene(0)
    a = instance_scores(t, t, thresholds=[0.5])
    b = instance_scores(np.zeros_like(t), t, thresholds=[0.5])
    s = summarize_instances([a, b])
    assert s.true_positives.tolist() == [3] and s.false_negatives.tolist() == [3]
    assert s.recall.tolist() == [0.5] and s.mean_iou.tolist() == [1.0]


def test_write_report_regions(tmp_path):
    root = _make_bsds(tmp_path / "ds")
    (root / "images" / "2.jpg").write_bytes(b"broken")
    res = evaluate_dataset(root, counts=(2, 3), sweep_segmenter=truth_sweep)
    files = write_report(res, tmp_path / "report", n_examples=1)
    names = {p.name for p in files}
    assert {"per_image.csv", "summary.csv", "summary.md", "failures.csv"} <= names
    assert {"boundary_pr.png", "covering_hist.png"} <= names
    assert any(n.startswith("overlay_best_") for n in names)
    rows = list(csv.DictReader((tmp_path / "report" / "per_image.csv").open()))
    assert len(rows) == 2 * 2 and {r["image"] for r in rows} == {"0", "1"}
    md = (tmp_path / "report" / "summary.md").read_text()
    assert "covering" in md and "Failed images" in md and "`2`" in md
    for p in files:
        assert p.stat().st_size > 0


def test_write_report_objects(tmp_path):
    root = _make_masks(tmp_path / "nuc")
    res = evaluate_dataset(root, object_segmenter=lambda im: (im > 0).astype(np.int32))
    files = write_report(res, tmp_path / "rep")
    names = {p.name for p in files}
    assert {"per_image.csv", "summary.csv", "summary.md", "f1_hist.png"} <= names
    rows = list(csv.DictReader((tmp_path / "rep" / "summary.csv").open()))
    assert [float(r["iou_threshold"]) for r in rows] == [0.5, 0.6, 0.7, 0.8, 0.9]


@pytest.mark.slow
def test_segment_sweep_with_the_real_pipeline():
    img = np.zeros((24, 32))
    img[:, 16:] = 1.0
    img[12:, :8] = 0.5
    levels = segment_sweep(img, (1, 2, 3))
    assert len(levels) == 3 and all(lab.shape == img.shape for lab in levels)
    assert [int(lab.max()) for lab in levels] == [1, 2, 3]


def test_docstring_examples_run():
    import doctest

    import imgcut.evaluation as ev
    import imgcut.groundtruth as gt

    for mod in (ev, gt):
        assert doctest.testmod(mod, optionflags=doctest.ELLIPSIS).failed == 0
