"""Read human ground truth: BSDS ``.mat`` files, label images, folders, dataset layouts.

Two dataset layouts are recognised (see :func:`find_dataset`):

- ``"bsds"``: ``images/<id>.jpg`` with ``groundTruth/<id>.mat`` (the Berkeley benchmark's
  distribution: a MATLAB cell array ``groundTruth`` with one struct per human holding
  ``Segmentation`` (label map, regions 1..n) and ``Boundaries`` (0/1 map));
- ``"masks"``: ``images/<stem>.<ext>`` with ``masks/<stem>.png|.tif`` label images
  (0 = background, one label per object), as in BBBC039.

Every failure raises :class:`GroundTruthError` (a ``ValueError``) with one line naming
the file and the problem.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = [
    "DatasetItem",
    "Dataset",
    "GroundTruth",
    "GroundTruthError",
    "LABEL_SUFFIXES",
    "IMAGE_SUFFIXES",
    "find_dataset",
    "read_bsds_mat",
    "read_ground_truth",
    "read_label_image",
]

#: File suffixes read as label images.
LABEL_SUFFIXES = (".png", ".tif", ".tiff")
#: File suffixes taken as input images in a dataset folder.
IMAGE_SUFFIXES = (".jpg", ".jpeg", ".png", ".tif", ".tiff", ".bmp")


class GroundTruthError(ValueError):
    """Ground truth could not be read; the message is one line naming the file."""


@dataclass(frozen=True)
class GroundTruth:
    """The human segmentations of one image.

    Attributes
    ----------
    segmentations : tuple of ndarray of int32, shape (H, W)
        One label image per human; 0 = unlabelled / background.
    boundaries : tuple of ndarray of bool, shape (H, W), or None
        The boundary maps stored with the segmentations (BSDS ``Boundaries``), or None when
        the source has none (they are then derived with
        :func:`imgcut.metrics.label_boundaries`).
    source : pathlib.Path or None
        The file or folder read.
    """

    segmentations: tuple[np.ndarray, ...]
    boundaries: tuple[np.ndarray, ...] | None = None
    source: Path | None = None

    @property
    def shape(self) -> tuple[int, int]:
        """(H, W) of the label images."""
        return self.segmentations[0].shape  # type: ignore[return-value]

    @property
    def n_humans(self) -> int:
        """Number of human segmentations."""
        return len(self.segmentations)


@dataclass(frozen=True)
class DatasetItem:
    """One image of a dataset and the file(s) holding its ground truth."""

    name: str
    image: Path
    truth: Path


@dataclass(frozen=True)
class Dataset:
    """A dataset folder: its layout and its (image, ground truth) pairs, sorted by name.

    Attributes
    ----------
    root : pathlib.Path
    layout : {"bsds", "masks"}
    items : tuple of DatasetItem
    unmatched : tuple of pathlib.Path
        Images without ground truth (reported, not scored).
    """

    root: Path
    layout: str
    items: tuple[DatasetItem, ...]
    unmatched: tuple[Path, ...] = field(default=())


def _as_label_array(arr: np.ndarray, path: Path) -> np.ndarray:
    if arr.ndim == 3 and arr.shape[-1] in (3, 4):
        rgb = arr[..., :3]
        if np.all(rgb == rgb[..., :1]):
            arr = rgb[..., 0]  # grey stored as RGB
        else:
            raise GroundTruthError(
                f"{path}: colour label image (shape {arr.shape}); expected one channel of "
                "integer labels (0 = background)"
            )
    if arr.ndim != 2:
        raise GroundTruthError(f"{path}: label image must be 2-D (H, W), got shape {arr.shape}")
    if arr.size == 0:
        raise GroundTruthError(f"{path}: empty label image")
    if arr.dtype.kind == "b":
        arr = arr.astype(np.uint8)
    if arr.dtype.kind == "f":
        if not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
            raise GroundTruthError(f"{path}: label image holds non-integer values")
    elif arr.dtype.kind not in "iu":
        raise GroundTruthError(f"{path}: label image has non-numeric samples ({arr.dtype})")
    if arr.min() < 0:
        raise GroundTruthError(f"{path}: label image holds negative labels (min {arr.min()})")
    if arr.max() > np.iinfo(np.int32).max:
        raise GroundTruthError(f"{path}: labels exceed the int32 range")
    return arr.astype(np.int32)


def read_label_image(path: str | os.PathLike[str]) -> np.ndarray:
    """Read a label image (PNG or TIFF; 0 = background / unlabelled).

    Parameters
    ----------
    path : str or path-like
        ``.png``, ``.tif`` or ``.tiff`` holding one channel of integer labels (8/16/32-bit);
        an RGB file whose three channels are equal is accepted as grey.

    Returns
    -------
    ndarray of int32, shape (H, W)

    Raises
    ------
    GroundTruthError
        Missing or unreadable file, colour or multi-page image, non-integer or negative
        labels. The message names the file.

    Examples
    --------
    >>> import numpy as np, tempfile, pathlib
    >>> from PIL import Image
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "lab.png"
    >>> Image.fromarray(np.array([[0, 1], [2, 2]], np.uint8)).save(p)
    >>> read_label_image(p).tolist()
    [[0, 1], [2, 2]]
    """
    p = Path(path)
    if not p.is_file():
        raise GroundTruthError(f"{p}: no such file")
    suffix = p.suffix.lower()
    try:
        if suffix in (".tif", ".tiff"):
            import tifffile

            arr = tifffile.imread(p)
            while arr.ndim > 2 and arr.shape[0] == 1:  # single-page stacks
                arr = arr[0]
        else:
            from PIL import Image

            with Image.open(p) as im:
                arr = np.asarray(im)
    except GroundTruthError:
        raise
    except Exception as exc:  # any decoder failure becomes one line naming the file
        raise GroundTruthError(f"{p}: cannot read as a label image ({exc})") from None
    return _as_label_array(np.asarray(arr), p)


def read_bsds_mat(path: str | os.PathLike[str]) -> GroundTruth:
    """Read a Berkeley benchmark ground-truth ``.mat`` file.

    Parameters
    ----------
    path : str or path-like
        MATLAB (v5) file with a variable ``groundTruth``: a 1×K cell array of structs
        with fields ``Segmentation`` (H×W labels) and ``Boundaries`` (H×W 0/1).

    Returns
    -------
    GroundTruth
        K segmentations (int32) and boundary maps (bool).

    Raises
    ------
    GroundTruthError
        Unreadable file, no ``groundTruth`` variable, a struct without ``Segmentation``,
        or label maps of different shapes.

    Notes
    -----
    Read with ``scipy.io.loadmat(..., simplify_cells=True)``, which turns the cell array
    into a list of dicts (a single struct when K = 1).
    """
    from scipy.io import loadmat

    p = Path(path)
    if not p.is_file():
        raise GroundTruthError(f"{p}: no such file")
    try:
        data = loadmat(p, simplify_cells=True)
    except Exception as exc:
        raise GroundTruthError(f"{p}: cannot read as a MATLAB file ({exc})") from None
    if "groundTruth" not in data:
        names = sorted(k for k in data if not k.startswith("__"))
        raise GroundTruthError(f"{p}: no 'groundTruth' variable (found {names})")
    cells = data["groundTruth"]
    if isinstance(cells, dict):
        cells = [cells]
    elif isinstance(cells, np.ndarray):
        cells = list(cells.ravel())
    segs, bnds = [], []
    for k, cell in enumerate(cells):
        if not isinstance(cell, dict) or "Segmentation" not in cell:
            raise GroundTruthError(f"{p}: groundTruth{{{k + 1}}} has no 'Segmentation' field")
        segs.append(_as_label_array(np.asarray(cell["Segmentation"]), p))
        b = cell.get("Boundaries")
        bnds.append(None if b is None else np.asarray(b) != 0)
    if not segs:
        raise GroundTruthError(f"{p}: 'groundTruth' holds no segmentation")
    shapes = {s.shape for s in segs} | {b.shape for b in bnds if b is not None}
    if len(shapes) != 1:
        raise GroundTruthError(f"{p}: human segmentations differ in shape {sorted(shapes)}")
    boundaries = None if any(b is None for b in bnds) else tuple(bnds)
    return GroundTruth(tuple(segs), boundaries, p)


def read_ground_truth(path: str | os.PathLike[str]) -> GroundTruth:
    """Read ground truth from a ``.mat`` file, a label image, or a folder of label images.

    Parameters
    ----------
    path : str or path-like
        ``.mat`` (BSDS layout, several humans), ``.png`` / ``.tif`` / ``.tiff`` (one
        human), or a folder whose label images are the humans (sorted by name).

    Returns
    -------
    GroundTruth

    Raises
    ------
    GroundTruthError
        Unknown suffix, empty folder, unreadable file or shapes that differ.
    """
    p = Path(path)
    if p.is_dir():
        files = sorted(f for f in p.iterdir() if f.suffix.lower() in LABEL_SUFFIXES)
        if not files:
            raise GroundTruthError(
                f"{p}: folder holds no label images ({', '.join(LABEL_SUFFIXES)})"
            )
        segs = [read_label_image(f) for f in files]
        if len({s.shape for s in segs}) != 1:
            raise GroundTruthError(f"{p}: label images in the folder differ in shape")
        return GroundTruth(tuple(segs), None, p)
    suffix = p.suffix.lower()
    if suffix == ".mat":
        return read_bsds_mat(p)
    if suffix in LABEL_SUFFIXES:
        return GroundTruth((read_label_image(p),), None, p)
    if not p.exists():
        raise GroundTruthError(f"{p}: no such file or folder")
    raise GroundTruthError(
        f"{p}: unknown ground-truth format {suffix!r}; expected .mat, "
        f"{', '.join(LABEL_SUFFIXES)} or a folder"
    )


def _stems(folder: Path, suffixes: tuple[str, ...]) -> dict[str, Path]:
    out: dict[str, Path] = {}
    for f in sorted(folder.iterdir()):
        if f.is_file() and f.suffix.lower() in suffixes and not f.name.startswith("."):
            out.setdefault(f.stem, f)
    return out


def find_dataset(root: str | os.PathLike[str]) -> Dataset:
    """Detect the layout of a dataset folder and pair each image with its ground truth.

    Parameters
    ----------
    root : str or path-like
        A folder holding ``images/`` and either ``groundTruth/`` (``.mat``, layout
        ``"bsds"``) or ``masks/`` (label images, layout ``"masks"``).

    Returns
    -------
    Dataset
        Items sorted by name; images without ground truth are listed in ``unmatched``.

    Raises
    ------
    GroundTruthError
        Not a folder, neither layout present, or no image has ground truth. When the
        folder holds split subfolders (``train/``, ``val/``, ...), the message names them.
    """
    r = Path(root)
    if not r.is_dir():
        raise GroundTruthError(f"{r}: not a folder")
    images = r / "images"
    if (images.is_dir()) and (r / "groundTruth").is_dir():
        layout, truth_dir, truth_suffixes = "bsds", r / "groundTruth", (".mat",)
    elif images.is_dir() and (r / "masks").is_dir():
        layout, truth_dir, truth_suffixes = "masks", r / "masks", LABEL_SUFFIXES
    else:
        splits = sorted(d.name for d in r.iterdir() if d.is_dir() and (d / "images").is_dir())
        hint = f"; pick a split folder: {', '.join(splits)}" if splits else ""
        raise GroundTruthError(
            f"{r}: expected images/ with groundTruth/ (.mat) or masks/ (label images){hint}"
        )
    imgs = _stems(images, IMAGE_SUFFIXES)
    truths = _stems(truth_dir, truth_suffixes)
    items = tuple(DatasetItem(n, imgs[n], truths[n]) for n in sorted(imgs) if n in truths)
    unmatched = tuple(imgs[n] for n in sorted(imgs) if n not in truths)
    if not items:
        raise GroundTruthError(
            f"{r}: no image in images/ has ground truth of the same name in {truth_dir.name}/"
        )
    return Dataset(r, layout, items, unmatched)
