"""Score segmentations against human ground truth: one image, human agreement, whole datasets.

The library side of ``imgcut score`` and ``imgcut evaluate``: the command line only parses
options, shows progress and prints. Datasets are segmented with the region methods of
``imgcut segment`` (``auto``, ``recursive``, ``kway``, ``boundary``), each image's sweep from
one run or one region hierarchy. Report files (CSV, Markdown, PNG plots) are written by
:func:`write_report`.
"""

from __future__ import annotations

import os
import time
import warnings
import zlib
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from skimage.morphology import thin

from imgcut.groundtruth import Dataset, DatasetItem, GroundTruth, find_dataset, read_ground_truth
from imgcut.metrics import (
    DEFAULT_MAX_DIST,
    BoundaryCounts,
    BoundarySummary,
    InstanceScores,
    RegionScores,
    RegionSummary,
    boundary_counts,
    instance_scores,
    label_boundaries,
    region_scores,
    summarize_boundaries,
    summarize_regions,
)

__all__ = [
    "DEFAULT_SWEEP",
    "EVALUATION_METHODS",
    "DEFAULT_IOU_THRESHOLDS",
    "MODES",
    "EvaluationResult",
    "HumanAgreement",
    "ImageResult",
    "ImageScore",
    "InstanceSummary",
    "evaluate_dataset",
    "human_agreement",
    "boundary_sweep",
    "human_boundaries",
    "resolve_method",
    "score_image",
    "segment_objects_labels",
    "segment_sweep",
    "summarize_instances",
    "write_report",
]

#: Region counts swept by default (levels of the recursive-cut hierarchy).
DEFAULT_SWEEP = (2, 3, 4, 6, 8, 12, 16, 24, 32)
#: IoU thresholds of the instance measures by default.
DEFAULT_IOU_THRESHOLDS = (0.5, 0.6, 0.7, 0.8, 0.9)
#: Evaluation modes: region/boundary measures over a sweep, or instance measures.
MODES = ("auto", "regions", "objects")
#: Region methods of a regions-mode evaluation, as for ``imgcut segment --method``: ``auto``
#: (``boundary`` for 3-channel colour images, else ``recursive``; resolved by
#: :func:`imgcut.runner.choose_method`), recursive or k-way normalized cuts, or the region
#: hierarchy of :func:`imgcut.hierarchy.image_hierarchy`.
EVALUATION_METHODS = ("auto", "recursive", "kway", "boundary")
#: Segmentation options the boundary method uses (it builds no pixel graph).
BOUNDARY_OPTIONS = ("seed", "preset")

#: A region segmenter: (image, region counts) -> one label image per count.
SweepSegmenter = Callable[[np.ndarray, Sequence[int]], Sequence[np.ndarray]]
#: An object segmenter: image -> instance label image (0 = background).
ObjectSegmenter = Callable[[np.ndarray], np.ndarray]


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


# ---------------------------------------------------------------------------- segmenters


def segment_sweep(image: np.ndarray, counts: Sequence[int], **options: Any) -> list[np.ndarray]:
    """Segment once and read the label images at several region counts.

    With ``method="recursive"`` (the default of :func:`imgcut.segment`) one run with
    ``n_regions = max(counts)`` gives the whole hierarchy, and each count is read with
    ``Segmentation.labels_at`` (clamped to the levels the run reached). With
    ``method="kway"`` the image is segmented once per count.

    Parameters
    ----------
    image : ndarray
        Image as read.
    counts : sequence of int
        Region counts (>= 1).
    **options
        Passed to :func:`imgcut.segment`.

    Returns
    -------
    list of ndarray of int32
        One label image per count.
    """
    from imgcut import segment

    options = {"method": "recursive", **options}  # explicit: segment's default is "auto"
    if options["method"] == "kway":
        return [segment(image, n_regions=int(k), **options).labels for k in counts]
    seg = segment(image, n_regions=int(max(counts)), **options)
    top = int(seg.levels)
    return [seg.labels_at(min(int(k), top)) for k in counts]


def boundary_sweep(
    image: np.ndarray,
    sweep: Sequence[float],
    *,
    by: str = "level",
    preset: str = "photo",
    seed: int | None = 0,
) -> list[np.ndarray]:
    """Build one region hierarchy and read a label image at every entry of a sweep.

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, C)
        Image as read.
    sweep : sequence of float
        Hierarchy levels (``by="level"``) or region counts (``by="regions"``).
    by : {"level", "regions"}, default "level"
        ``"level"``: ``RegionHierarchy.labels_at(t)`` for each level ``t``; ``"regions"``:
        ``RegionHierarchy.labels_with(n)`` for each count ``n`` (the nearest level the
        hierarchy has).
    preset : str, default "photo"
        Preset of :func:`imgcut.hierarchy.image_hierarchy` (:mod:`imgcut.presets`).
    seed : int or None, default 0
        Seed of the hierarchy (textons, eigensolver).

    Returns
    -------
    list of ndarray of int32
        One label image per sweep entry.

    Raises
    ------
    ValueError
        For an unknown ``by`` or preset, or an invalid image.

    Notes
    -----
    The hierarchy is computed once, so every label image of the sweep is a thresholding of
    the same ultrametric: the segmentations are nested (each region at a higher level is a
    union of regions at a lower one), and ODS / OIS are chosen within one nested family, as
    in the benchmark protocol of Arbelaez et al. (2011), Sec. 3 (from memory) and
    ``benchmarks/bench_bsds.py``.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((30, 40, 3)); img[:, 20:] = (0.9, 0.2, 0.1)
    >>> [int(lab.max()) for lab in boundary_sweep(img, (0.5, 1.0))]
    [2, 1]
    """
    from imgcut.hierarchy import image_hierarchy

    if by not in ("level", "regions"):
        raise ValueError(f"by must be 'level' or 'regions'; got {by!r}")
    hierarchy = image_hierarchy(image, preset=preset, seed=seed)
    if by == "level":
        return [hierarchy.labels_at(float(t)) for t in sweep]
    return [hierarchy.labels_with(int(n)) for n in sweep]


def resolve_method(
    method: str, shape: tuple[int, ...], segment_options: dict[str, Any] | None = None
) -> tuple[str, str]:
    """The region method an evaluation runs on images of ``shape``, and why.

    The same rule as ``imgcut segment`` (:func:`imgcut.runner.choose_method`): ``"auto"``
    picks ``"boundary"`` for a 3-channel colour image unless an option only the pixel-graph
    methods use is set, and ``"recursive"`` otherwise.

    Parameters
    ----------
    method : {"auto", "recursive", "kway", "boundary"}
    shape : tuple of int
        Image shape ``(H, W)`` or ``(H, W, C)``.
    segment_options : dict, optional
        Options of :func:`imgcut.segment` (graph options keep ``auto`` on ``recursive``).

    Returns
    -------
    method : str
        ``"recursive"``, ``"kway"`` or ``"boundary"``.
    reason : str
        One sentence for the report.

    Raises
    ------
    ValueError
        For an unknown method.

    Examples
    --------
    >>> resolve_method("auto", (321, 481, 3))[0]
    'boundary'
    >>> resolve_method("auto", (64, 64))[0]
    'recursive'
    >>> resolve_method("auto", (64, 64, 3), {"radius": 3})[0]
    'recursive'
    """
    import dataclasses

    from imgcut.runner import SegmentOptions, choose_method

    if method not in EVALUATION_METHODS:
        raise ValueError(f"method must be one of {', '.join(EVALUATION_METHODS)}; got {method!r}")
    names = {f.name for f in dataclasses.fields(SegmentOptions)}
    known = {k: v for k, v in (segment_options or {}).items() if k in names and k != "method"}
    try:
        opts = SegmentOptions(method=method, **known)
    except (TypeError, ValueError):  # options the library call will judge; rule without them
        opts = SegmentOptions(method=method)
    return choose_method(opts, tuple(shape))


def segment_objects_labels(image: np.ndarray, **options: Any) -> np.ndarray:
    """Object labels from :func:`imgcut.objects.segment_objects` (the objects-mode hook).

    Replace it by passing ``object_segmenter=`` to :func:`evaluate_dataset`.
    """
    from imgcut.objects import segment_objects

    return segment_objects(image, **options).labels


# ---------------------------------------------------------------------------- one image


@dataclass
class ImageResult:
    """Scores of one dataset image.

    Attributes
    ----------
    name : str
    counts : tuple of int or float
        The sweep entries (regions mode; empty in objects mode): requested region counts,
        or hierarchy levels when the evaluation's ``sweep`` is ``"level"``.
    n_regions : tuple of int
        Regions actually present at each sweep entry (objects found, in objects mode).
    scores : list of ImageScore
        One per sweep entry (regions mode).
    instance : InstanceScores or None
        Objects mode.
    seconds : float
        Segmentation plus scoring time.
    warnings : list of str
        Warnings raised while segmenting and scoring this image (one line each),
        recorded instead of printed so that they can be reported per image.

    The label images scored (one per sweep entry, or one in objects mode) are kept
    zlib-compressed (label images shrink 20-100×, so a 100-image sweep stays small);
    :meth:`label_image` returns one.
    """

    name: str
    counts: tuple[float, ...]
    n_regions: tuple[int, ...]
    scores: list[ImageScore] = field(default_factory=list)
    instance: InstanceScores | None = None
    seconds: float = 0.0
    warnings: list[str] = field(default_factory=list)
    packed_labels: list[tuple[bytes, str, tuple[int, ...]]] = field(default_factory=list)

    def store_labels(self, labels: Sequence[np.ndarray]) -> None:
        """Keep compressed copies of the label images (smallest fitting unsigned type)."""
        self.packed_labels = []
        for lab in labels:
            arr = np.asarray(lab)
            small = arr.astype(np.uint16) if arr.min() >= 0 and arr.max() < 65536 else arr
            self.packed_labels.append(
                (
                    zlib.compress(np.ascontiguousarray(small).tobytes(), 1),
                    small.dtype.str,
                    arr.shape,
                )
            )

    def label_image(self, index: int = 0) -> np.ndarray:
        """The label image of sweep entry ``index`` (objects mode: 0), as int32."""
        data, dtype, shape = self.packed_labels[index]
        return np.frombuffer(zlib.decompress(data), dtype=dtype).reshape(shape).astype(np.int32)


def _read_pixels(path: Path) -> np.ndarray:
    from imgcut.io import read_image

    return read_image(path).pixels


def _first_shape(items: Sequence[DatasetItem]) -> tuple[str, tuple[int, ...]] | None:
    """Name and shape of the first readable image (None when none reads)."""
    for item in items:
        try:
            return item.name, tuple(_read_pixels(item.image).shape)
        except Exception:  # noqa: BLE001 - an unreadable image fails later, on its own
            continue
    return None


def _evaluate_item(*args: Any) -> ImageResult:
    """Score one item, recording the warnings it raises on the result."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = _evaluate_item_inner(*args)
    seen: dict[str, None] = {}
    for w in caught:
        seen.setdefault(f"{w.category.__name__}: {' '.join(str(w.message).split())}")
    res.warnings = list(seen)
    return res


def _evaluate_item_inner(
    item: DatasetItem,
    mode: str,
    counts: tuple[float, ...],
    segment_options: dict[str, Any],
    max_dist: float,
    iou_thresholds: tuple[float, ...],
    sweep_segmenter: SweepSegmenter | None,
    object_segmenter: ObjectSegmenter | None,
    method: tuple[str, str, str] = ("recursive", "recursive", ""),
    sweep: str = "regions",
) -> ImageResult:
    t0 = time.perf_counter()
    image = _read_pixels(item.image)
    truth = read_ground_truth(item.truth)
    if truth.shape != image.shape[:2]:
        raise ValueError(
            f"{item.truth}: ground truth shape {truth.shape} differs from the image "
            f"{image.shape[:2]}"
        )
    if mode == "objects":
        fn = object_segmenter or (lambda im: segment_objects_labels(im, **segment_options))
        labels = np.asarray(fn(image))
        inst = instance_scores(labels, truth.segmentations[0], thresholds=iou_thresholds)
        res = ImageResult(item.name, (), (inst.n_predicted,), instance=inst)
        res.store_labels([labels])
        res.seconds = time.perf_counter() - t0
        return res
    asked, used, _ = method
    if sweep_segmenter is not None:
        fn_sweep = sweep_segmenter
    elif used == "boundary":
        from imgcut.runner import BOUNDARY_PRESET

        opts = {"preset": BOUNDARY_PRESET}
        opts.update({k: v for k, v in segment_options.items() if k in BOUNDARY_OPTIONS})
        fn_sweep = lambda im, c: boundary_sweep(im, c, by=sweep, **opts)  # noqa: E731
    else:
        opts = {**segment_options, "method": used}
        fn_sweep = lambda im, c: segment_sweep(im, c, **opts)  # noqa: E731
    if asked == "auto" and sweep_segmenter is None:
        own, why = resolve_method("auto", image.shape, segment_options)
        if own != used:  # one method for the dataset, so that ODS/OIS compare like with like
            warnings.warn(
                f"method auto would pick {own} for this image ({why}); the dataset is "
                f"evaluated with {used}, chosen from its first image",
                RuntimeWarning,
                stacklevel=2,
            )
    levels = [np.asarray(lab) for lab in fn_sweep(image, counts)]
    if len(levels) != len(counts):
        raise ValueError(f"segmenter returned {len(levels)} label images for {len(counts)} counts")
    bnd = human_boundaries(truth)
    scores = [score_image(lab, truth, max_dist=max_dist, boundaries=bnd) for lab in levels]
    n_reg = tuple(int(np.unique(lab[lab > 0]).size) for lab in levels)
    res = ImageResult(item.name, counts, n_reg, scores=scores)
    res.store_labels(levels)
    res.seconds = time.perf_counter() - t0
    return res


# ---------------------------------------------------------------------------- datasets


@dataclass(frozen=True)
class InstanceSummary:
    """Instance measures pooled over a dataset (objects mode), one entry per threshold."""

    thresholds: np.ndarray
    precision: np.ndarray
    recall: np.ndarray
    f1: np.ndarray
    mean_iou: np.ndarray
    true_positives: np.ndarray
    false_positives: np.ndarray
    false_negatives: np.ndarray
    n_split: int
    n_merged: int
    n_true: int
    n_predicted: int


def summarize_instances(scores: Sequence[InstanceScores]) -> InstanceSummary:
    """Pool per-image instance counts over a dataset (TP, FP, FN summed per threshold).

    Mean IoU is weighted by each image's matches. Raises ``ValueError`` when empty or
    when images used different thresholds.
    """
    if not scores:
        raise ValueError("summarize_instances: no images to aggregate")
    th = scores[0].thresholds
    if any(not np.array_equal(s.thresholds, th) for s in scores):
        raise ValueError("summarize_instances: images were scored at different thresholds")
    tp = np.sum([s.true_positives for s in scores], axis=0)
    fp = np.sum([s.false_positives for s in scores], axis=0)
    fn = np.sum([s.false_negatives for s in scores], axis=0)
    iou_sum = np.sum([np.nan_to_num(s.mean_iou) * s.true_positives for s in scores], axis=0)

    def ratio(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        return np.divide(a, b, out=np.ones(a.shape), where=b > 0)

    return InstanceSummary(
        thresholds=th,
        precision=ratio(tp * 1.0, (tp + fp) * 1.0),
        recall=ratio(tp * 1.0, (tp + fn) * 1.0),
        f1=ratio(2.0 * tp, (2 * tp + fp + fn) * 1.0),
        mean_iou=np.divide(iou_sum, tp, out=np.full(tp.shape, np.nan), where=tp > 0),
        true_positives=tp,
        false_positives=fp,
        false_negatives=fn,
        n_split=int(sum(s.n_split for s in scores)),
        n_merged=int(sum(s.n_merged for s in scores)),
        n_true=int(sum(s.n_true for s in scores)),
        n_predicted=int(sum(s.n_predicted for s in scores)),
    )


@dataclass
class EvaluationResult:
    """Everything one dataset evaluation produced.

    Attributes
    ----------
    dataset : Dataset
    mode : {"regions", "objects"}
    counts : tuple of int or float
        The sweep (regions mode): region counts, or hierarchy levels when ``sweep`` is
        ``"level"``.
    images : list of ImageResult
        Scored images, in dataset order.
    failures : list of (str, str)
        (image name, one-line reason) of images that failed and were skipped.
    regions : RegionSummary or None
    boundaries : BoundarySummary or None
    instances : InstanceSummary or None
    options : dict
        Options of the run (for the report); ``options["method"]`` holds
        ``{"asked", "used", "reason"}``.
    sweep : {"regions", "level"}
        What the sweep entries are: region counts or hierarchy levels.
    method : str
        Region method used (``"recursive"``, ``"kway"``, ``"boundary"``; ``"custom"`` for a
        ``sweep_segmenter``; ``"objects"`` in objects mode).
    method_reason : str
        Why that method ran (one sentence).
    """

    dataset: Dataset
    mode: str
    counts: tuple[float, ...]
    images: list[ImageResult]
    failures: list[tuple[str, str]]
    regions: RegionSummary | None = None
    boundaries: BoundarySummary | None = None
    instances: InstanceSummary | None = None
    options: dict[str, Any] = field(default_factory=dict)
    sweep: str = "regions"
    method: str = "recursive"
    method_reason: str = ""


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split()) or type(exc).__name__
    return f"{type(exc).__name__}: {text}" if not isinstance(exc, ValueError) else text


def evaluate_dataset(
    root: str | os.PathLike[str],
    *,
    counts: Sequence[int] | None = None,
    levels: Sequence[float] | None = None,
    mode: str = "auto",
    method: str = "auto",
    limit: int | None = None,
    jobs: int = 1,
    max_dist: float = DEFAULT_MAX_DIST,
    iou_thresholds: Sequence[float] = DEFAULT_IOU_THRESHOLDS,
    segment_options: dict[str, Any] | None = None,
    sweep_segmenter: SweepSegmenter | None = None,
    object_segmenter: ObjectSegmenter | None = None,
    progress: Callable[[str, str | None], None] | None = None,
) -> EvaluationResult:
    """Segment every image of a dataset folder and score it against its ground truth.

    Parameters
    ----------
    root : str or path-like
        Dataset folder (layout ``"bsds"`` or ``"masks"``, see
        :func:`imgcut.groundtruth.find_dataset`).
    counts : sequence of int, optional
        Region counts swept per image (regions mode); ODS picks one for the dataset,
        OIS one per image. Default: `DEFAULT_SWEEP` for the pixel-graph methods; for
        ``boundary`` the sweep is over ``levels`` unless counts are given (then each count is
        read with ``RegionHierarchy.labels_with``).
    levels : sequence of float, optional
        Hierarchy levels swept per image (method ``boundary`` only; exclusive with
        ``counts``). Default for ``boundary``: the preset's ``level_sweep``.
    mode : {"auto", "regions", "objects"}, default "auto"
        ``"auto"``: regions for ``"bsds"``, objects for ``"masks"``. Objects mode scores
        instance labels (0 = background) with :func:`imgcut.metrics.instance_scores`.
    method : {"auto", "recursive", "kway", "boundary"}, default "auto"
        Region method (regions mode), as for ``imgcut segment``: ``"auto"`` is resolved
        once, from the first image, by :func:`resolve_method` (``boundary`` for 3-channel
        colour images, ``recursive`` otherwise); every image then uses that method so that
        ODS / OIS compare one kind of segmentation. With ``"boundary"`` each image's sweep
        comes from one hierarchy (:func:`boundary_sweep`). A ``"method"`` entry of
        ``segment_options`` is honoured when ``method`` is ``"auto"`` (older callers).
    limit : int, optional
        Score only the first ``limit`` images (sorted by name).
    jobs : int, default 1
        Worker processes. Custom segmenters must then be picklable (module-level).
    max_dist : float, default 0.0075
        Boundary tolerance as a fraction of the image diagonal.
    iou_thresholds : sequence of float
        Objects mode thresholds.
    segment_options : dict, optional
        Keyword options of :func:`imgcut.segment` (regions mode) or
        :func:`imgcut.objects.segment_objects` (objects mode); the boundary method takes
        only ``seed`` and ``preset`` (default ``"photo"``).
    sweep_segmenter, object_segmenter : callable, optional
        Replace the default segmenters (:func:`segment_sweep`, :func:`boundary_sweep`,
        :func:`segment_objects_labels`); the hook for other methods or modes. A
        ``sweep_segmenter`` receives the sweep (``counts``, default `DEFAULT_SWEEP`, or
        ``levels``) and the method is reported as ``"custom"``.
    progress : callable, optional
        Called as ``progress(name, error)`` after each image (``error`` None on success).

    Returns
    -------
    EvaluationResult
        Failed images are listed in ``failures`` and left out of the summaries.

    Raises
    ------
    ValueError
        Bad options or dataset folder (one line; a :class:`GroundTruthError` names the
        folder); also when every image failed.

    Notes
    -----
    With ``boundary`` one hierarchy per image gives the whole sweep, so the label images
    of an image are nested and ODS / OIS select within one family of segmentations
    (``docs/benchmarks.md``); with ``recursive`` one run to ``max(counts)`` regions does
    the same; ``kway`` segments once per count.
    """
    if mode not in MODES:
        raise ValueError(f"mode must be one of {', '.join(MODES)}; got {mode!r}")
    opts = dict(segment_options or {})
    if method == "auto" and "method" in opts:
        method = str(opts["method"])
    opts.pop("method", None)
    if method not in EVALUATION_METHODS:
        raise ValueError(f"method must be one of {', '.join(EVALUATION_METHODS)}; got {method!r}")
    if counts is not None and levels is not None:
        raise ValueError("give counts (region counts) or levels (hierarchy levels), not both")
    cts: tuple[int, ...] | None = None
    if counts is not None:
        cts = tuple(int(c) for c in counts)
        if not cts or min(cts) < 1:
            raise ValueError(f"counts must be region counts >= 1, got {list(counts)}")
    lvls: tuple[float, ...] | None = None
    if levels is not None:
        lvls = tuple(float(t) for t in levels)
        if not lvls or not all(np.isfinite(lvls)):
            raise ValueError(f"levels must be finite hierarchy levels, got {list(levels)}")
    if limit is not None and limit < 1:
        raise ValueError(f"limit must be >= 1, got {limit}")
    if jobs < 1:
        raise ValueError(f"jobs must be >= 1, got {jobs}")
    ths = tuple(float(t) for t in iou_thresholds)
    dataset = find_dataset(root)
    run_mode = mode if mode != "auto" else ("regions" if dataset.layout == "bsds" else "objects")
    items = list(dataset.items[:limit] if limit else dataset.items)
    if run_mode == "objects":
        if method not in ("auto", "recursive"):
            raise ValueError(
                f"method {method} applies to regions mode; objects mode segments with "
                "imgcut.objects.segment_objects"
            )
        used, reason = "objects", "objects mode: imgcut.objects.segment_objects"
    elif sweep_segmenter is not None:
        used, reason = "custom", "a sweep_segmenter was given"
    elif method == "auto" and (first := _first_shape(items)) is not None:
        used, reason = resolve_method("auto", first[1], opts)
        reason = f"{reason}; decided on the first image, {first[0]}"
    else:
        used, reason = resolve_method(method, (1, 1), opts)
    sweep_kind = "regions"
    if used == "boundary":
        bad = sorted(set(opts) - set(BOUNDARY_OPTIONS))
        if bad:
            raise ValueError(
                f"segment option(s) {', '.join(bad)} not used by method boundary (it builds "
                f"no pixel graph); it takes only {', '.join(BOUNDARY_OPTIONS)}"
            )
        if cts is None:
            from imgcut.presets import get_preset
            from imgcut.runner import BOUNDARY_PRESET

            preset = get_preset(opts.get("preset", BOUNDARY_PRESET))
            lvls = lvls if lvls is not None else tuple(preset.level_sweep)
            sweep_kind = "level"
    elif lvls is not None:
        if used != "custom":
            raise ValueError(
                f"levels (hierarchy levels) apply to method boundary; {used} ran "
                f"({reason}); give region counts instead"
            )
        sweep_kind = "level"
    sweep_vals: tuple[float, ...] = (
        lvls if sweep_kind == "level" else (cts if cts is not None else DEFAULT_SWEEP)
    )  # type: ignore[assignment]
    method_info = (method, used, reason)
    args = (
        run_mode, sweep_vals, opts, max_dist, ths, sweep_segmenter, object_segmenter,
        method_info, sweep_kind,
    )  # fmt: skip
    results: dict[str, ImageResult] = {}
    failures: list[tuple[str, str]] = []

    def done(name: str, res: ImageResult | None, err: BaseException | None) -> None:
        if res is not None:
            results[name] = res
        else:
            failures.append((name, _one_line(err) if err else "failed"))
        if progress is not None:
            progress(name, None if res is not None else failures[-1][1])

    if jobs == 1:
        for item in items:
            try:
                res = _evaluate_item(item, *args)
            except (KeyboardInterrupt, SystemExit):
                raise
            except Exception as exc:  # a failing image is reported and skipped
                done(item.name, None, exc)
            else:
                done(item.name, res, None)
    else:
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            futures = {pool.submit(_evaluate_item, item, *args): item for item in items}
            for fut in as_completed(futures):
                item = futures[fut]
                try:
                    res = fut.result()
                except Exception as exc:
                    done(item.name, None, exc)
                else:
                    done(item.name, res, None)
    ordered = [results[i.name] for i in items if i.name in results]
    failures.sort()
    if not ordered:
        first = failures[0][1] if failures else "no images"
        raise ValueError(f"{dataset.root}: every image failed (first: {first})")
    out = EvaluationResult(
        dataset,
        run_mode,
        sweep_vals if run_mode == "regions" else (),
        ordered,
        failures,
        options={
            "max_dist": max_dist,
            "iou_thresholds": ths,
            "segment": opts,
            "limit": limit,
            "method": {"asked": method, "used": used, "reason": reason},
        },
        sweep=sweep_kind,
        method=used,
        method_reason=reason,
    )
    if run_mode == "regions":
        out.regions = summarize_regions([[s.region for s in r.scores] for r in ordered])
        out.boundaries = summarize_boundaries([[s.boundary for s in r.scores] for r in ordered])
    else:
        out.instances = summarize_instances([r.instance for r in ordered if r.instance])
    return out


def write_report(
    result: EvaluationResult, out_dir: str | os.PathLike[str], *, n_examples: int = 3
) -> list[Path]:
    """Write the report of an evaluation into a folder.

    Files: ``per_image.csv`` (one row per image and sweep entry, or per image and IoU
    threshold), ``summary.csv`` and ``summary.md`` (ODS / OIS / Best table, failures),
    ``failures.csv`` when images failed, and PNG plots: ``boundary_pr.png`` (dataset
    precision-recall over the sweep with iso-F contours, ODS and OIS marked),
    ``covering_hist.png`` (per-image covering at the ODS level; ``f1_hist.png`` in
    objects mode) and ``overlay_best_*.png`` / ``overlay_worst_*.png`` (segmentation
    beside up to four human segmentations). Every file is written atomically.

    Parameters
    ----------
    result : EvaluationResult
    out_dir : str or path-like
        Created if missing; existing report files are replaced.
    n_examples : int, default 3
        Best and worst images drawn.

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    from imgcut._evaluation_report import write_report_files

    return write_report_files(result, Path(out_dir), n_examples=n_examples)
