"""Instance measures for objects such as nuclei: IoU matching, P/R/F1, splits and merges."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment

from imgcut.metrics._labels import as_labels, contingency

__all__ = ["InstanceScores", "instance_scores"]


@dataclass(frozen=True)
class InstanceScores:
    """Object-level scores of a predicted instance label image against a true one.

    Arrays are indexed like ``thresholds``.

    Attributes
    ----------
    thresholds : ndarray of float
        IoU thresholds; a pair counts as a match when IoU >= threshold.
    true_positives, false_positives, false_negatives : ndarray of int
        Matched pairs, unmatched predicted objects, unmatched true objects.
    precision, recall, f1 : ndarray of float
        TP / (TP + FP), TP / (TP + FN), 2TP / (2TP + FP + FN); 1 when both sides are empty.
    mean_iou : ndarray of float
        Mean IoU of the matched pairs (NaN when there is none).
    n_predicted, n_true : int
        Objects (non-zero labels) in each image.
    n_split : int
        True objects that hold the majority of two or more predicted objects.
    n_merged : int
        Predicted objects that hold the majority of two or more true objects.
    """

    thresholds: np.ndarray
    true_positives: np.ndarray
    false_positives: np.ndarray
    false_negatives: np.ndarray
    precision: np.ndarray
    recall: np.ndarray
    f1: np.ndarray
    mean_iou: np.ndarray
    n_predicted: int
    n_true: int
    n_split: int
    n_merged: int


def _match(iou_rows, iou_cols, iou, n_pred, n_true, threshold):
    """One-to-one matching maximising total IoU among pairs with IoU >= threshold."""
    keep = iou >= threshold
    r, c, v = iou_rows[keep], iou_cols[keep], iou[keep]
    if r.size == 0:
        return np.empty(0)
    ur, ri = np.unique(r, return_inverse=True)
    uc, ci = np.unique(c, return_inverse=True)
    if ur.size == r.size and uc.size == c.size:
        return v  # already one-to-one (always so when threshold > 0.5)
    weight = np.zeros((ur.size, uc.size))
    weight[ri, ci] = v
    # Kuhn 1955 / Munkres 1957: maximum-weight assignment on IoU
    a, b = linear_sum_assignment(weight, maximize=True)
    got = weight[a, b]
    return got[got >= threshold]


def instance_scores(
    predicted: object,
    ground_truth: object,
    *,
    thresholds: Sequence[float] | float = 0.5,
) -> InstanceScores:
    """Match predicted objects to true objects one-to-one by IoU and count the outcome.

    Parameters
    ----------
    predicted : array_like of int, shape (H, W)
        Instance label image; 0 = background, each other label one object.
    ground_truth : array_like of int, shape (H, W)
        True instance labels; 0 = background.
    thresholds : float or sequence of float, default 0.5
        IoU thresholds in (0, 1]; scores are returned for each.

    Returns
    -------
    InstanceScores

    Raises
    ------
    ValueError
        If an input is not a 2-D label image, the shapes differ, or a threshold is
        outside (0, 1].

    Notes
    -----
    IoU(P, T) = |P ∩ T| / |P ∪ T| (Jaccard 1912). At each threshold t, the pairs with
    IoU >= t are matched one-to-one to maximise the total IoU (Hungarian method,
    ``scipy.optimize.linear_sum_assignment``); for t > 0.5 every object has at most one
    such partner, so the matching is unique. Precision, recall and F1 follow from the
    matched (TP), unmatched predicted (FP) and unmatched true (FN) objects, as in the
    nucleus-segmentation evaluations of Caicedo et al. (2019).

    Split and merge counts do not depend on t. A predicted object *belongs* to the true
    object that holds more than half of its pixels (if any); a true object is **split**
    when two or more predicted objects belong to it. Symmetrically, a predicted object
    is a **merge** when two or more true objects have more than half of their pixels in
    it. (Our definition; majority-overlap rules of this kind are common practice.)

    References
    ----------
    .. [1] J. C. Caicedo et al., "Evaluation of Deep Learning Strategies for Nucleus
       Segmentation in Fluorescence Images", Cytometry A 95(9):952-965, 2019.
    .. [2] H. W. Kuhn, "The Hungarian method for the assignment problem", Naval Research
       Logistics Quarterly 2:83-97, 1955.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.zeros((4, 8), int); t[:, :3] = 1; t[:, 5:] = 2
    >>> p = np.ones((4, 8), int)  # one object spanning both nuclei: IoU 12/32 each
    >>> s = instance_scores(p, t)
    >>> int(s.true_positives[0]), int(s.n_merged)
    (0, 1)
    """
    pred = as_labels(predicted, "predicted")
    true = as_labels(ground_truth, "ground_truth")
    if pred.shape != true.shape:
        raise ValueError(f"ground_truth has shape {true.shape}, expected {pred.shape}")
    ts = np.atleast_1d(np.asarray(thresholds, dtype=np.float64))
    if ts.ndim != 1 or ts.size == 0 or np.any(~(ts > 0) | (ts > 1)):
        raise ValueError(f"thresholds must be IoU values in (0, 1], got {thresholds!r}")
    t = contingency(pred, true)
    n_pred = int(np.count_nonzero(t.row_labels))
    n_true = int(np.count_nonzero(t.col_labels))
    obj = (t.row_labels[t.rows] != 0) & (t.col_labels[t.cols] != 0)
    rows, cols, cnt = t.rows[obj], t.cols[obj], t.count[obj]
    area_p, area_t = t.row_sizes[rows], t.col_sizes[cols]
    iou = cnt / (area_p + area_t - cnt)
    # Majority rule for splits and merges (see Notes).
    pred_in_true = cnt * 2 > area_p
    true_in_pred = cnt * 2 > area_t
    n_split = int(np.sum(np.bincount(cols[pred_in_true], minlength=t.col_sizes.size) >= 2))
    n_merged = int(np.sum(np.bincount(rows[true_in_pred], minlength=t.row_sizes.size) >= 2))
    tp, miou = [], []
    for th in ts:
        matched = _match(rows, cols, iou, n_pred, n_true, th)
        tp.append(matched.size)
        miou.append(float(matched.mean()) if matched.size else float("nan"))
    tp_a = np.asarray(tp, dtype=np.int64)
    fp = n_pred - tp_a
    fn = n_true - tp_a

    def ratio(num, den):
        return np.divide(num, den, out=np.ones(num.shape), where=den > 0)

    return InstanceScores(
        thresholds=ts,
        true_positives=tp_a,
        false_positives=fp,
        false_negatives=fn,
        precision=ratio(tp_a.astype(float), (tp_a + fp).astype(float)),
        recall=ratio(tp_a.astype(float), (tp_a + fn).astype(float)),
        f1=ratio(2.0 * tp_a, (2 * tp_a + fp + fn).astype(float)),
        mean_iou=np.asarray(miou),
        n_predicted=n_pred,
        n_true=n_true,
        n_split=n_split,
        n_merged=n_merged,
    )
