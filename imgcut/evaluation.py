"""Score segmentations against human ground truth: one image, human agreement, whole datasets.

The library side of ``imgcut score`` and ``imgcut evaluate``: the command line only parses
options, shows progress and prints. Report files (CSV, Markdown, PNG plots) are written by
:func:`write_report`.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
from skimage.morphology import thin

from imgcut.groundtruth import GroundTruth
from imgcut.metrics import (
    DEFAULT_MAX_DIST,
    BoundaryCounts,
    RegionScores,
    boundary_counts,
    label_boundaries,
    region_scores,
)

__all__ = [
    "HumanAgreement",
    "ImageScore",
    "human_agreement",
    "human_boundaries",
    "score_image",
]


@dataclass(frozen=True)
class ImageScore:
    """Region and boundary scores of one segmentation against one image's humans."""

    region: RegionScores
    boundary: BoundaryCounts

    def as_dict(self) -> dict[str, float | int]:
        """Flat name → value mapping (for CSV rows and JSON)."""
        r, b = self.region, self.boundary
        return {
            "covering": r.covering,
            "pri": r.pri,
            "voi": r.voi.total,
            "voi_false_splits": r.voi.false_splits,
            "voi_false_merges": r.voi.false_merges,
            "boundary_precision": b.precision,
            "boundary_recall": b.recall,
            "boundary_f": b.f,
            "boundary_matched_machine": b.matched_machine,
            "boundary_machine": b.machine,
            "boundary_matched_human": b.matched_human,
            "boundary_human": b.human,
            "n_humans": r.n_humans,
        }


def human_boundaries(truth: GroundTruth) -> tuple[np.ndarray, ...]:
    """The humans' boundary maps: stored ones, else thinned :func:`label_boundaries`.

    On BSDS500 both agree exactly (checked in the tests).
    """
    if truth.boundaries is not None:
        return truth.boundaries
    return tuple(thin(label_boundaries(s)) for s in truth.segmentations)


def score_image(
    segmentation: object,
    truth: GroundTruth,
    *,
    max_dist: float = DEFAULT_MAX_DIST,
    boundaries: tuple[np.ndarray, ...] | None = None,
) -> ImageScore:
    """Score one segmentation against the human segmentations of its image.

    Parameters
    ----------
    segmentation : array_like of int, shape (H, W)
        Label image (0 = no region).
    truth : GroundTruth
        The humans.
    max_dist : float, default 0.0075
        Boundary match tolerance as a fraction of the image diagonal.
    boundaries : tuple of ndarray, optional
        Precomputed :func:`human_boundaries` (saves time over a sweep).

    Returns
    -------
    ImageScore

    Raises
    ------
    ValueError
        If the segmentation is not a 2-D label image of the humans' shape.

    Examples
    --------
    >>> import numpy as np
    >>> g = np.zeros((30, 40), np.int32); g[:, 20:] = 1
    >>> s = score_image(g, GroundTruth((g, g)))
    >>> (s.region.covering, s.boundary.f)
    (1.0, 1.0)
    """
    region = region_scores(segmentation, truth.segmentations)
    seg = np.asarray(segmentation)
    bnd = boundaries if boundaries is not None else human_boundaries(truth)
    counts = boundary_counts(label_boundaries(seg), bnd, max_dist=max_dist)
    return ImageScore(region, counts)


@dataclass(frozen=True)
class HumanAgreement:
    """Leave-one-out agreement of humans with each other over a set of images.

    Attributes
    ----------
    covering : float
        Pooled over images (and humans) by region area.
    pri, voi, voi_false_splits, voi_false_merges : float
        Mean over images of the mean over that image's humans.
    boundary_precision, boundary_recall, boundary_f : float
        From counts pooled over all images and humans.
    n_images, n_comparisons : int
        Images used, and (image, held-out human) pairs.
    """

    covering: float
    pri: float
    voi: float
    voi_false_splits: float
    voi_false_merges: float
    boundary_precision: float
    boundary_recall: float
    boundary_f: float
    n_images: int
    n_comparisons: int


def human_agreement(
    truths: Iterable[GroundTruth], *, max_dist: float = DEFAULT_MAX_DIST
) -> HumanAgreement:
    """Score each human against the other humans of the same image (leave one out).

    Parameters
    ----------
    truths : iterable of GroundTruth
        Images with at least two humans (images with one are skipped).
    max_dist : float, default 0.0075
        Boundary match tolerance as a fraction of the image diagonal.

    Returns
    -------
    HumanAgreement

    Raises
    ------
    ValueError
        If no image has two or more humans.

    Notes
    -----
    Each human's segmentation (and boundary map) plays the machine and is scored with
    :func:`score_image` against the remaining humans; this is how human performance is
    reported for the Berkeley benchmark (Martin et al. 2001; Arbelaez et al. 2011,
    Table 2, row "Human"; our description is from memory).

    Examples
    --------
    >>> import numpy as np
    >>> g = np.zeros((30, 40), np.int32); g[:, 20:] = 1
    >>> round(human_agreement([GroundTruth((g, g, g))]).covering, 6)
    1.0
    """
    cov_num = cov_den = 0.0
    pri, voi, fs, fm = [], [], [], []
    total = BoundaryCounts(0, 0, 0, 0)
    n_comp = 0
    for truth in truths:
        k = truth.n_humans
        if k < 2:
            continue
        bnd = human_boundaries(truth)
        img_pri, img_voi, img_fs, img_fm = [], [], [], []
        for h in range(k):
            others = [s for j, s in enumerate(truth.segmentations) if j != h]
            r = region_scores(truth.segmentations[h], others)
            c = boundary_counts(bnd[h], [b for j, b in enumerate(bnd) if j != h], max_dist=max_dist)
            cov_num += r.covering_overlap_sum
            cov_den += r.covering_area
            img_pri.append(r.pri)
            img_voi.append(r.voi.total)
            img_fs.append(r.voi.false_splits)
            img_fm.append(r.voi.false_merges)
            total = total + c
            n_comp += 1
        pri.append(np.mean(img_pri))
        voi.append(np.mean(img_voi))
        fs.append(np.mean(img_fs))
        fm.append(np.mean(img_fm))
    if not pri:
        raise ValueError("human_agreement needs images with at least two human segmentations")
    return HumanAgreement(
        covering=cov_num / cov_den,
        pri=float(np.mean(pri)),
        voi=float(np.mean(voi)),
        voi_false_splits=float(np.mean(fs)),
        voi_false_merges=float(np.mean(fm)),
        boundary_precision=total.precision,
        boundary_recall=total.recall,
        boundary_f=total.f,
        n_images=len(pri),
        n_comparisons=n_comp,
    )
