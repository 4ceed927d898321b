"""Dataset aggregation over a sweep of segmentations per image: ODS, OIS and covering Best.

A *sweep* gives each image several segmentations indexed by one parameter shared by the
dataset (the levels of a hierarchy, a list of region counts, or boundary-map thresholds).

- **ODS** (optimal dataset scale): one parameter value for the whole dataset.
- **OIS** (optimal image scale): the best parameter value for each image.
- **Best** (covering only): each human region takes its best overlap over all levels.

For boundaries, counts are pooled over images before P/R/F are formed; for the covering,
numerators and denominators are pooled; PRI and VoI are averaged over images
(Arbelaez et al. 2011, Section 3; the pooling details are described from memory of the
benchmark's code).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from imgcut.metrics.boundary import BoundaryCounts, f_measure
from imgcut.metrics.region import RegionScores

__all__ = ["BoundarySummary", "RegionSummary", "summarize_boundaries", "summarize_regions"]


@dataclass(frozen=True)
class BoundarySummary:
    """Boundary precision/recall over a dataset and a parameter sweep.

    Attributes
    ----------
    precision, recall, f : ndarray, shape (n_params,)
        Dataset curve: counts pooled over images at each parameter value.
    ods_f, ods_precision, ods_recall : float
        At the parameter value with the best pooled F.
    ods_index : int
        That parameter index.
    ois_f, ois_precision, ois_recall : float
        Pooled counts after choosing, for each image, the parameter with its best F.
    ois_index : ndarray of int, shape (n_images,)
    """

    precision: np.ndarray
    recall: np.ndarray
    f: np.ndarray
    ods_f: float
    ods_precision: float
    ods_recall: float
    ods_index: int
    ois_f: float
    ois_precision: float
    ois_recall: float
    ois_index: np.ndarray


@dataclass(frozen=True)
class RegionSummary:
    """Region measures over a dataset and a parameter sweep.

    Attributes
    ----------
    covering, pri, voi : ndarray, shape (n_params,)
        Dataset value at each parameter (covering pooled, PRI and VoI image means).
    covering_ods, covering_ois, covering_best : float
    pri_ods, pri_ois, voi_ods, voi_ois : float
        PRI is maximised and VoI minimised.
    covering_ods_index, pri_ods_index, voi_ods_index : int
    """

    covering: np.ndarray
    pri: np.ndarray
    voi: np.ndarray
    covering_ods: float
    covering_ois: float
    covering_best: float
    pri_ods: float
    pri_ois: float
    voi_ods: float
    voi_ois: float
    covering_ods_index: int
    pri_ods_index: int
    voi_ods_index: int


def _check_grid(grid: Sequence[Sequence[object]], what: str) -> int:
    if len(grid) == 0:
        raise ValueError(f"{what}: no images to aggregate")
    sizes = {len(row) for row in grid}
    if len(sizes) != 1 or 0 in sizes:
        raise ValueError(
            f"{what}: every image needs the same, non-zero number of sweep entries, "
            f"got {sorted(sizes)}"
        )
    return sizes.pop()


def summarize_boundaries(counts: Sequence[Sequence[BoundaryCounts]]) -> BoundarySummary:
    """ODS and OIS boundary scores from per-image, per-parameter counts.

    Parameters
    ----------
    counts : sequence (n_images) of sequence (n_params) of BoundaryCounts

    Returns
    -------
    BoundarySummary

    Raises
    ------
    ValueError
        If there are no images or the images have different numbers of parameters.

    Notes
    -----
    ODS: :math:`P_t = \\sum_i TP^M_{i,t} / \\sum_i M_{i,t}`,
    :math:`R_t = \\sum_i TP^G_{i,t} / \\sum_i G_{i,t}`, report :math:`\\max_t F(P_t, R_t)`.
    OIS: :math:`t_i = \\arg\\max_t F_{i,t}`, then pool the counts at :math:`t_i`.
    The benchmark also interpolates between neighbouring thresholds (from memory); this
    does not, so with a coarse sweep ODS can be slightly lower.

    Examples
    --------
    >>> c = [[BoundaryCounts(5, 10, 5, 10), BoundaryCounts(8, 10, 8, 10)]]
    >>> round(summarize_boundaries(c).ods_f, 6)
    0.8
    """
    _check_grid(counts, "summarize_boundaries")
    arr = np.array(
        [[(c.matched_machine, c.machine, c.matched_human, c.human) for c in row] for row in counts],
        dtype=np.float64,
    )  # (n_images, n_params, 4)

    def prf(a: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        p = np.divide(a[..., 0], a[..., 1], out=np.ones(a.shape[:-1]), where=a[..., 1] > 0)
        r = np.divide(a[..., 2], a[..., 3], out=np.ones(a.shape[:-1]), where=a[..., 3] > 0)
        return p, r, np.asarray(f_measure(p, r))

    p, r, f = prf(arr.sum(axis=0))
    ods = int(np.argmax(f))
    _, _, f_img = prf(arr)
    best = np.argmax(f_img, axis=1)
    pooled = arr[np.arange(arr.shape[0]), best].sum(axis=0)
    po, ro, fo = prf(pooled)
    return BoundarySummary(
        precision=p,
        recall=r,
        f=f,
        ods_f=float(f[ods]),
        ods_precision=float(p[ods]),
        ods_recall=float(r[ods]),
        ods_index=ods,
        ois_f=float(fo),
        ois_precision=float(po),
        ois_recall=float(ro),
        ois_index=best,
    )


def summarize_regions(scores: Sequence[Sequence[RegionScores]]) -> RegionSummary:
    """ODS, OIS and Best region measures from per-image, per-parameter scores.

    Parameters
    ----------
    scores : sequence (n_images) of sequence (n_params) of RegionScores
        Each image's entries must be scored against the same humans.

    Returns
    -------
    RegionSummary

    Raises
    ------
    ValueError
        If there are no images or the images have different numbers of parameters.

    Notes
    -----
    Covering ODS: :math:`\\max_t \\sum_i num_{i,t} / \\sum_i den_{i,t}`; OIS pools each
    image's best level; Best gives every human region R its best overlap over all
    levels and segments, :math:`\\sum_R |R| \\max_t \\max_{R'} O(R, R') / \\sum_R |R|`
    (Arbelaez et al. 2011, Table 2 reports ODS, OIS and Best).

    Examples
    --------
    >>> import numpy as np
    >>> from imgcut.metrics.region import region_scores
    >>> g = np.array([[1, 1, 2, 2]])
    >>> sweep = [region_scores(np.ones((1, 4), int), g), region_scores(g, g)]
    >>> summarize_regions([sweep]).covering_ods
    1.0
    """
    _check_grid(scores, "summarize_regions")
    num = np.array([[s.covering_overlap_sum for s in row] for row in scores])
    den = np.array([[s.covering_area for s in row] for row in scores])
    pri = np.array([[s.pri for s in row] for row in scores])
    voi = np.array([[s.voi.total for s in row] for row in scores])
    cov_curve = num.sum(axis=0) / den.sum(axis=0)
    img_cov = num / den
    ois_pick = np.argmax(img_cov, axis=1)
    rows = np.arange(num.shape[0])
    best_num = best_den = 0.0
    for row in scores:
        best = np.max(np.stack([s.gt_region_best_overlap for s in row]), axis=0)
        best_num += float(np.dot(row[0].gt_region_area, best))
        best_den += float(row[0].gt_region_area.sum())
    pri_curve, voi_curve = pri.mean(axis=0), voi.mean(axis=0)
    return RegionSummary(
        covering=cov_curve,
        pri=pri_curve,
        voi=voi_curve,
        covering_ods=float(cov_curve.max()),
        covering_ois=float(num[rows, ois_pick].sum() / den[rows, ois_pick].sum()),
        covering_best=best_num / best_den,
        pri_ods=float(pri_curve.max()),
        pri_ois=float(pri.max(axis=1).mean()),
        voi_ods=float(voi_curve.min()),
        voi_ois=float(voi.min(axis=1).mean()),
        covering_ods_index=int(np.argmax(cov_curve)),
        pri_ods_index=int(np.argmax(pri_curve)),
        voi_ods_index=int(np.argmin(voi_curve)),
    )
