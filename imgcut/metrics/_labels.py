"""Label-image validation and sparse contingency tables shared by the measures."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["as_labels", "as_label_stack", "Contingency", "contingency"]


def as_labels(labels: object, name: str = "labels") -> np.ndarray:
    """Return ``labels`` as a non-negative int64 array; raise ``ValueError`` otherwise.

    Integer and boolean arrays are accepted, and floating arrays whose values are all
    whole numbers (label images saved as float TIFF). Label 0 means "unlabelled".
    """
    arr = np.asarray(labels)
    if arr.ndim != 2:
        raise ValueError(f"{name} must be a 2-D label image of shape (H, W), got shape {arr.shape}")
    if arr.size == 0:
        raise ValueError(f"{name} is empty (shape {arr.shape}); expected a non-empty (H, W) array")
    if arr.dtype.kind == "b":
        return arr.astype(np.int64)
    if arr.dtype.kind == "f":
        if not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
            raise ValueError(f"{name} must hold whole-number labels; got non-integer floats")
    elif arr.dtype.kind not in "iu":
        raise ValueError(f"{name} must be an integer label image, got dtype {arr.dtype}")
    if arr.dtype.kind != "u" and arr.min() < 0:
        raise ValueError(f"{name} must hold labels >= 0 (0 = unlabelled), got minimum {arr.min()}")
    return arr.astype(np.int64, copy=False)


def as_label_stack(ground_truth: object, shape: tuple[int, ...] | None = None) -> list[np.ndarray]:
    """Return the human segmentations as a list of int64 label images of one shape.

    ``ground_truth`` is one (H, W) label image, a (K, H, W) array, or a sequence of
    (H, W) label images.
    """
    if isinstance(ground_truth, np.ndarray) and ground_truth.ndim == 3:
        items: Sequence[object] = list(ground_truth)
    elif isinstance(ground_truth, np.ndarray) or not isinstance(ground_truth, Sequence):
        items = [ground_truth]
    else:
        items = list(ground_truth)
    if not items:
        raise ValueError("ground_truth is empty; expected at least one (H, W) label image")
    stack = [as_labels(g, f"ground_truth[{k}]") for k, g in enumerate(items)]
    ref = shape if shape is not None else stack[0].shape
    for k, g in enumerate(stack):
        if g.shape != tuple(ref):
            raise ValueError(
                f"ground_truth[{k}] has shape {g.shape}, expected {tuple(ref)} "
                "(the shape of the segmentation)"
            )
    return stack


def _codes(labels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Map labels to codes 0..n-1 (sorted); return (codes, the label of each code)."""
    if labels.size and labels.max() < 4 * labels.size + 1024:
        # Bounded labels: a lookup table is faster than sorting.
        present = np.bincount(labels, minlength=1) > 0
        values = np.flatnonzero(present)
        lut = np.cumsum(present) - 1
        return lut[labels], values
    values, codes = np.unique(labels, return_inverse=True)
    return codes.reshape(-1), values


@dataclass(frozen=True)
class Contingency:
    """Non-zero entries of the contingency table of two label images.

    ``count[e]`` pixels carry label ``row_labels[rows[e]]`` in the first image and
    ``col_labels[cols[e]]`` in the second. ``row_sizes`` and ``col_sizes`` are the
    marginals (region sizes); ``total`` is the number of pixels counted.
    """

    rows: np.ndarray
    cols: np.ndarray
    count: np.ndarray
    row_sizes: np.ndarray
    col_sizes: np.ndarray
    row_labels: np.ndarray
    col_labels: np.ndarray

    @property
    def total(self) -> int:
        return int(self.count.sum())


def contingency(a: np.ndarray, b: np.ndarray) -> Contingency:
    """Sparse contingency table of two equal-shape label images (all pixels counted).

    Cost O(N) for bounded labels (a lookup and one ``bincount``), never O(N^2).
    """
    ca, la = _codes(a.reshape(-1))
    cb, lb = _codes(b.reshape(-1))
    na, nb = la.size, lb.size
    key = ca * nb + cb
    if na * nb <= 4 * key.size + 4096:
        dense = np.bincount(key, minlength=na * nb)
        nz = np.flatnonzero(dense)
        count = dense[nz]
    else:
        nz, count = np.unique(key, return_counts=True)
    rows, cols = np.divmod(nz, nb)
    row_sizes = np.bincount(rows, weights=count, minlength=na).astype(np.int64)
    col_sizes = np.bincount(cols, weights=count, minlength=nb).astype(np.int64)
    return Contingency(rows, cols, count.astype(np.int64), row_sizes, col_sizes, la, lb)
