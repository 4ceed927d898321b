"""Tests of imgcut.metrics.instance: IoU matching, P/R/F1, splits and merges."""

from __future__ import annotations

import numpy as np
import pytest

from imgcut.metrics import instance_scores


def _blobs():
    t = np.zeros((20, 30), int)
    t[2:8, 2:8] = 1
    t[2:8, 12:18] = 2
    t[12:18, 2:8] = 3
    t[12:18, 20:28] = 4
    return t


def test_identity():
    t = _blobs()
    s = instance_scores(t, t, thresholds=[0.5, 0.9, 1.0])
    assert s.true_positives.tolist() == [4, 4, 4]
    assert s.precision.tolist() == s.recall.tolist() == s.f1.tolist() == [1.0, 1.0, 1.0]
    assert s.mean_iou.tolist() == [1.0, 1.0, 1.0]
    assert (s.n_split, s.n_merged) == (0, 0)


def test_hand_counted_case():
    # Hand count: object 1 exact; object 2 cut in two halves (a split, neither half has
    # IoU >= 0.5: 18/36 = 0.5 exactly, so each half matches at 0.5 - only one can);
    # objects 3 and 4 covered by one predicted object (a merge, IoU 36/(36+48) < 0.5);
    # plus one spurious object. 4 true, 5 predicted.
    t = _blobs()
    p = np.zeros_like(t)
    p[2:8, 2:8] = 1
    p[2:8, 12:15] = 2
    p[2:8, 15:18] = 3
    p[12:18, 2:28] = 4
    p[0, 29] = 5
    s = instance_scores(p, t, thresholds=[0.5, 0.6])
    assert (s.n_true, s.n_predicted) == (4, 5)
    assert s.true_positives.tolist() == [2, 1]  # at 0.5 a half of object 2 matches
    assert s.false_positives.tolist() == [3, 4]
    assert s.false_negatives.tolist() == [2, 3]
    assert s.precision[0] == pytest.approx(2 / 5)
    assert s.recall[0] == pytest.approx(2 / 4)
    assert s.f1[0] == pytest.approx(2 * 2 / (2 * 2 + 3 + 2))
    assert s.mean_iou[0] == pytest.approx((1.0 + 0.5) / 2)
    assert (s.n_split, s.n_merged) == (1, 1)


def test_hungarian_prefers_total_iou_at_low_threshold():
    # Reference: scipy.optimize.linear_sum_assignment maximises total IoU; at threshold
    # 0.3 predicted object A overlaps both true objects, B only the second one.
    t = np.zeros((1, 10), int)
    t[0, 0:4] = 1
    t[0, 4:8] = 2
    p = np.zeros_like(t)
    p[0, 1:6] = 1  # IoU with 1: 3/6 = 0.5, with 2: 2/7
    p[0, 6:10] = 2  # IoU with 2: 2/6 = 0.333
    s = instance_scores(p, t, thresholds=0.3)
    assert s.true_positives.tolist() == [2]
    assert s.mean_iou[0] == pytest.approx((0.5 + 1 / 3) / 2)


def test_empty_images():
    z = np.zeros((5, 5), int)
    s = instance_scores(z, z)
    assert s.precision.tolist() == [1.0] and s.recall.tolist() == [1.0]
    assert np.isnan(s.mean_iou[0])
    s = instance_scores(z, _blobs()[:5, :5])
    assert s.recall.tolist() == [0.0] and s.f1.tolist() == [0.0]


@pytest.mark.parametrize("th", [0.0, 1.5, [], [[0.5]]])
def test_bad_thresholds(th):
    with pytest.raises(ValueError, match="thresholds"):
        instance_scores(_blobs(), _blobs(), thresholds=th)


def test_shape_mismatch():
    with pytest.raises(ValueError, match="shape"):
        instance_scores(np.zeros((3, 3), int), np.zeros((3, 4), int))
