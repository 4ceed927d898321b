"""Sparse pixel affinity graph W for normalized cuts.

One job: from an image (or its :class:`~imgcut.features.Features`) build the symmetric,
non-negative, zero-diagonal CSR matrix ``W`` that links every pixel to the pixels within a
Euclidean radius, with Shi–Malik feature/distance weights, intervening-contour weights, or
their product. Memory is planned before anything large is allocated.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from imgcut._errors import GraphTooLargeError
from imgcut.features import Features, compute_features, validate_image

__all__ = ["AffinityGraph", "GraphTooLargeError", "affinity_graph", "estimate_graph_memory"]

_CUES = ("combined", "intensity", "contour")
DEFAULT_RADIUS = 5.0
DEFAULT_MEMORY_BUDGET = 4 * 1024**3  # bytes (4 GiB)
# sigma_distance = _SIGMA_X_PER_RADIUS * radius when not given (see affinity_graph Notes).
_SIGMA_X_PER_RADIUS = 0.8
# Working memory of the builder, on top of the stored CSR arrays: per pixel an int64 row
# start, an int32 node number and count temporaries, plus two validity bit sets and their
# popcount temporaries per 64 half-plane offsets; per-block temporaries are a constant.
# Measured with tracemalloc (38 bytes/pixel at r = 5, 110 at r = 12).
_WORK_BYTES_PER_PIXEL = 24
_WORK_BYTES_PER_PIXEL_WORD = 24
_WORK_BYTES_FIXED = 4 * 1024**2
_INT32_MAX = np.iinfo(np.int32).max
# Pixels per block of rows in the fill loop: the block's rows of the CSR arrays (about
# 80 entries × 12 bytes per pixel at r = 5) then stay in the CPU cache while all offsets write
# into them. Tuned with benchmarks/bench_graph.py.
_BLOCK_PIXELS = 8192


@dataclass(frozen=True, eq=False)
class AffinityGraph:
    """A sparse pixel affinity graph.

    Attributes
    ----------
    weights : scipy.sparse.csr_matrix
        ``(n, n)`` float64, symmetric, non-negative, zero diagonal, sorted indices. Row/column
        ``k`` is the pixel ``nodes[k]``.
    nodes : numpy.ndarray
        ``(n,)`` int64 flat (raster, C-order) pixel indices of the graph's nodes, ascending.
        All pixels without a mask, the True pixels of the mask otherwise.
    shape : tuple of int
        Image shape ``(H, W)``.
    sigmas : dict
        The σ values actually used: ``"feature"`` and ``"distance"`` (cues "intensity" and
        "combined") and ``"edge"`` (cues "contour" and "combined").
    radius : float
        Neighbourhood radius in pixels.
    cue : str
        ``"combined"``, ``"intensity"`` or ``"contour"``.
    """

    weights: sp.csr_matrix
    nodes: np.ndarray
    shape: tuple[int, int]
    sigmas: dict = field(default_factory=dict)
    radius: float = DEFAULT_RADIUS
    cue: str = "combined"

    @property
    def n_nodes(self) -> int:
        """Number of nodes ``n``."""
        return int(self.nodes.size)

    @property
    def degrees(self) -> np.ndarray:
        """Weighted degrees ``d_i = sum_j w_ij`` as an ``(n,)`` float64 array."""
        return np.asarray(self.weights.sum(axis=1), dtype=np.float64).ravel()


# --------------------------------------------------------------------------- public API


def estimate_graph_memory(shape, radius: float, mask=None) -> tuple[int, int]:
    """Exact non-zero count and estimated peak bytes of an affinity graph, before building it.

    Parameters
    ----------
    shape : tuple of int
        Image shape ``(H, W)`` or ``(H, W, C)`` (channels do not change the graph).
    radius : float
        Neighbourhood radius in pixels, ``>= 1``.
    mask : array_like of bool, optional
        ``(H, W)`` foreground mask; the count is then restricted to pairs of True pixels.

    Returns
    -------
    nnz : int
        Exact number of stored entries of ``W``: ordered pairs ``(i, j)``, ``i != j``, of
        graph pixels with ``‖X_i − X_j‖ <= radius``.
    bytes : int
        Estimated peak memory of :func:`affinity_graph` (not counting the features): the
        CSR arrays (8-byte values, 4-byte indices — 8-byte beyond 2³¹ − 1 entries —,
        ``n + 1`` row pointers) plus the builder's working memory, about
        ``24 + 24 · ceil(K / 64)`` bytes per pixel for ``K`` half-plane offsets (48 bytes per
        pixel while K <= 64, i.e. r < 6.4) and 4 MiB.

    Raises
    ------
    ValueError
        Bad shape, radius or mask.

    Notes
    -----
    Without a mask the count is closed-form: ``2 * sum_{(dy, dx)} (H − dy)(W − |dx|)`` over the
    half-plane offsets ``dy > 0 or (dy == 0 and dx > 0)`` with ``dy² + dx² <= r²``. With a mask it
    is one vectorised boolean pass per offset. Nothing of size ``nnz`` is allocated.

    Examples
    --------
    >>> estimate_graph_memory((3, 3), 1)[0]   # 12 grid edges, both directions
    24
    """
    height, width = _check_shape(shape)
    r = _check_radius(radius)
    offsets = _half_offsets(r)
    if mask is None:
        n = height * width
        half = sum(max(height - dy, 0) * max(width - abs(dx), 0) for dy, dx in offsets)
        nnz = 2 * half
    else:
        m = _check_mask(mask, (height, width))
        n = int(np.count_nonzero(m))
        half = 0
        for dy, dx in offsets:
            rects = _rectangles(height, width, dy, dx)
            if rects is None:
                continue
            ri, rj = rects
            half += int(np.count_nonzero(m[ri] & m[rj]))
        nnz = 2 * half
    return nnz, _peak_bytes(nnz, n, height * width, len(offsets))


def affinity_graph(
    image,
    *,
    radius: float = DEFAULT_RADIUS,
    cue: str = "combined",
    sigma_feature: float | None = None,
    sigma_distance: float | None = None,
    sigma_edge: float | None = None,
    mask=None,
    memory_budget: int | None = DEFAULT_MEMORY_BUDGET,
) -> AffinityGraph:
    """Build the sparse pixel affinity matrix W of an image.

    Parameters
    ----------
    image : array_like or Features
        An image accepted by :func:`imgcut.features.compute_features` (features are then
        computed with its defaults), or precomputed :class:`~imgcut.features.Features`.
    radius : float, default 5
        Pixels ``i, j`` are linked when ``‖X_i − X_j‖ <= radius`` (Euclidean, pixels; may be
        fractional, must be ``>= 1``: 1 gives the 4-neighbour grid, 1.5 adds the diagonals).
        Cost and memory grow like ``π r²`` per pixel: 80 neighbours at r = 5.
    cue : {"combined", "intensity", "contour"}, default "combined"
        ``"intensity"``: Shi–Malik feature × distance weight; ``"contour"``: intervening
        contour; ``"combined"``: their product.
    sigma_feature, sigma_distance, sigma_edge : float or None
        Scales σ_F, σ_X, σ_E (> 0, finite). None derives them (see Notes). A large σ (say
        1e100) is accepted and makes its factor 1 everywhere, i.e. switches that cue off; a σ
        whose square overflows (> ~1e154) or whose 1/σ² overflows is rejected.
    mask : array_like of bool, optional
        ``(H, W)``; the graph has one node per True pixel (raster order) and links only True
        pixels.
    memory_budget : int or None, default 4 GiB
        Refuse (``GraphTooLargeError``) when the estimated peak memory exceeds this many bytes.
        None disables the check.

    Returns
    -------
    AffinityGraph
        ``weights`` (CSR float64, symmetric, zero diagonal, sorted indices), ``nodes``,
        ``shape``, the ``sigmas`` used, ``radius`` and ``cue``.

    Raises
    ------
    ValueError
        Bad image, unknown cue (valid: "combined", "intensity", "contour"), radius not finite
        and >= 1, σ not finite and > 0 (or so large or small that σ² or 1/σ² overflows),
        bad mask, a mask that selects no pixel, inconsistent Features, memory_budget not
        None or > 0.
    GraphTooLargeError
        The estimate from :func:`estimate_graph_memory` exceeds ``memory_budget``.

    Notes
    -----
    *Weights.* For ``‖X_i − X_j‖ <= r`` (zero otherwise, and on the diagonal):

    * intensity (Shi & Malik 2000, eq. (11)):
      ``w_ij = exp(−‖F_i − F_j‖² / σ_F²) · exp(−‖X_i − X_j‖² / σ_X²)``
    * contour (Malik, Belongie, Leung & Shi 2001):
      ``w_ij = exp(−max_{p ∈ line(i, j)} E(p)² / σ_E²)``, no distance factor (the radius alone
      bounds the reach), with ``E`` the edge map of :func:`~imgcut.features.compute_features`.
      ``line(i, j)`` is sampled at unit steps along the major axis,
      ``p_s = i + round_half_up(s · (j − i) / L)``, ``s = 0..L``, ``L = max(|dy|, |dx|)``,
      both end pixels included.
    * combined: the product of the two, i.e. feature, distance and contour factors.

    *Default σ* (heuristics from the image's own statistics, common practice, not a theorem):

    * ``σ_F = sqrt(mean ‖F_i − F_j‖²)`` over horizontally and vertically adjacent pixel
      pairs (inside the mask): the typical nearest-neighbour feature change. A mean of
      squares rather than a median, because the median is 0 on images with flat regions.
      Falls back to 1 when it is 0 (constant image).
    * ``σ_X = 0.8 · radius`` (r = 5 gives σ_X = 4; the distance factor at the rim of the disk is
      ``exp(−1/0.64) ≈ 0.21``).
    * ``σ_E = sqrt(mean E²)`` over the (masked) pixels, the RMS edge strength; 1 when E ≡ 0.

    *Construction.* A loop over blocks of image rows and, inside, over the ``O(r²)``
    half-plane offsets ``(dy, dx)``; each step is NumPy slicing over the block, never a loop
    over pixels. Each weight is computed once and written to both ``(i, j)`` and ``(j, i)``.
    The exact row counts come first, so the CSR arrays are allocated once at their final size
    and filled in place; entries of a row are ordered by flat offset, so column indices are
    sorted without a sort. Every pair within the radius is stored, also when its weight
    underflows to 0, so ``nnz`` equals :func:`estimate_graph_memory` exactly. Peak memory is
    the CSR (12 bytes per entry with 32-bit indices) plus ``O(n)`` working arrays: about
    12.5 bytes per entry at r = 5, against about 43 for a builder that concatenates per-offset
    COO triplets and converts to CSR (``benchmarks/bench_graph.py``).

    References
    ----------
    .. [1] J. Shi and J. Malik, "Normalized cuts and image segmentation", IEEE TPAMI 22(8),
       2000, eq. (11).
    .. [2] J. Malik, S. Belongie, T. Leung and J. Shi, "Contour and texture analysis for image
       segmentation", IJCV 43(1), 2001 (intervening contour).

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((6, 6))
    >>> img[:, 3:] = 1.0
    >>> g = affinity_graph(img, radius=1.5, cue="intensity")
    >>> g.weights.shape, g.weights.nnz
    ((36, 36), 220)
    >>> bool(abs(g.weights - g.weights.T).max() == 0)
    True
    """
    if cue not in _CUES:
        raise ValueError(f"cue must be one of {_CUES}, got {cue!r}")
    for name, value in (
        ("sigma_feature", sigma_feature),
        ("sigma_distance", sigma_distance),
        ("sigma_edge", sigma_edge),
    ):
        if value is not None:
            _check_sigma(value, name)
    if memory_budget is not None and not (
        isinstance(memory_budget, int | float | np.integer | np.floating) and memory_budget > 0
    ):
        raise ValueError(
            f"memory_budget must be a number of bytes > 0 or None, got {memory_budget!r}"
        )
    if isinstance(image, Features):
        feats = _check_features(image)
        height, width = feats.shape
    else:  # features are computed after the memory check
        feats = None
        height, width = validate_image(image).shape[:2]
    r = _check_radius(radius)
    m = None if mask is None else _check_mask(mask, (height, width))
    if m is not None and not m.any():
        raise ValueError("mask selects no pixels; expected a boolean (H, W) array with some True")

    nnz, est_bytes = estimate_graph_memory((height, width), r, m)
    if memory_budget is not None and est_bytes > memory_budget:
        raise GraphTooLargeError(
            f"affinity graph of a {height}x{width} image at radius {r:g} needs about "
            f"{est_bytes / 1e9:.2f} GB ({nnz} non-zeros) > memory_budget "
            f"{memory_budget / 1e9:.2f} GB; use the multiscale path or a smaller radius"
        )
    if feats is None:
        feats = compute_features(image)

    use_feature = cue in ("intensity", "combined")
    use_edge = cue in ("contour", "combined")
    sigmas: dict[str, float] = {}
    if use_feature:
        sf = sigma_feature if sigma_feature is not None else _default_sigma_feature(feats, m)
        sx = sigma_distance if sigma_distance is not None else _SIGMA_X_PER_RADIUS * r
        sigmas["feature"] = _check_sigma(sf, "sigma_feature")
        sigmas["distance"] = _check_sigma(sx, "sigma_distance")
    if use_edge:
        se = sigma_edge if sigma_edge is not None else _default_sigma_edge(feats, m)
        sigmas["edge"] = _check_sigma(se, "sigma_edge")

    weights, nodes = _build(feats, r, m, nnz, sigmas)
    return AffinityGraph(
        weights=weights,
        nodes=nodes,
        shape=(height, width),
        sigmas=sigmas,
        radius=r,
        cue=cue,
    )


# --------------------------------------------------------------------------- checks


def _check_shape(shape) -> tuple[int, int]:
    try:
        dims = tuple(int(s) for s in shape)
    except (TypeError, ValueError):
        raise ValueError(f"shape must be (H, W) or (H, W, C), got {shape!r}") from None
    if len(dims) not in (2, 3) or min(dims) < 1:
        raise ValueError(f"shape must be (H, W) or (H, W, C) with sizes >= 1, got {shape!r}")
    return dims[0], dims[1]


def _check_radius(radius) -> float:
    try:
        r = float(radius)
    except (TypeError, ValueError):
        raise ValueError(f"radius must be a finite number >= 1 (pixels), got {radius!r}") from None
    if not math.isfinite(r) or r < 1.0:
        raise ValueError(
            f"radius must be a finite number >= 1 (pixels) so that neighbours are linked, "
            f"got {radius!r}"
        )
    return r


def _check_sigma(sigma, name: str) -> float:
    try:
        s = float(sigma)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a finite number > 0 or None, got {sigma!r}") from None
    if not math.isfinite(s) or s <= 0:
        raise ValueError(f"{name} must be a finite number > 0 or None, got {sigma!r}")
    s2 = s * s
    if not math.isfinite(s2):
        raise ValueError(f"{name}={sigma!r} is too large: {name}² overflows float64")
    if s2 == 0.0 or not math.isfinite(1.0 / s2):
        raise ValueError(f"{name}={sigma!r} is too small: 1/{name}² overflows float64")
    return s


def _check_features(feats: Features) -> Features:
    values, edges = np.asarray(feats.values), np.asarray(feats.edges)
    if values.ndim != 3 or 0 in values.shape or edges.shape != values.shape[:2]:
        raise ValueError(
            f"Features.values must have shape (H, W, C) and Features.edges (H, W), got "
            f"{values.shape} and {edges.shape}"
        )
    if not (np.isfinite(values).all() and np.isfinite(edges).all()) or (edges < 0).any():
        raise ValueError("Features must be finite and Features.edges non-negative")
    return feats


def _check_mask(mask, shape: tuple[int, int]) -> np.ndarray:
    m = np.asarray(mask)
    if m.dtype != np.bool_ or m.shape != shape:
        raise ValueError(
            f"mask must be a boolean array of shape {shape} (H, W), got dtype {m.dtype} "
            f"and shape {m.shape}"
        )
    return m


# --------------------------------------------------------------------------- geometry


def _half_offsets(r: float) -> list[tuple[int, int]]:
    """Offsets (dy, dx) with dy > 0 or (dy == 0, dx > 0) and dy² + dx² <= r², sorted (dy, dx).

    Sorted lexicographically, their flat offsets ``dy * W + dx`` ascend for any width W that
    they fit in; the mirrored offsets ``(−dy, −dx)`` ascend in reverse order.
    """
    k = int(math.floor(r))
    r2 = r * r
    out = []
    for dy in range(0, k + 1):
        for dx in range(-k, k + 1):
            if (dy > 0 or dx > 0) and dy * dy + dx * dx <= r2:
                out.append((dy, dx))
    return out


def _rectangles(height: int, width: int, dy: int, dx: int, row0: int = 0, row1: int | None = None):
    """Slices of the pixels i and their partners j = i + (dy, dx) that lie inside the image.

    Only pixels i in rows ``[row0, row1)`` are taken; None when there are none.
    """
    row_end = height - dy if row1 is None else min(row1, height - dy)
    if row_end <= row0 or abs(dx) >= width:
        return None
    xi0, xi1 = max(0, -dx), width - max(0, dx)
    ri = (slice(row0, row_end), slice(xi0, xi1))
    rj = (slice(row0 + dy, row_end + dy), slice(xi0 + dx, xi1 + dx))
    return ri, rj


def _line_samples(dy: int, dx: int) -> list[tuple[int, int]]:
    """Pixel steps (sy, sx) on the segment from (0, 0) to (dy, dx), unit steps on the major axis.

    ``round_half_up(s · (dy, dx) / L)`` for ``s = 0..L``, ``L = max(|dy|, |dx|)``.
    """
    length = max(abs(dy), abs(dx))
    return [
        (math.floor(s * dy / length + 0.5), math.floor(s * dx / length + 0.5))
        for s in range(length + 1)
    ]


def _peak_bytes(nnz: int, n_nodes: int, n_pixels: int, n_offsets: int) -> int:
    idx = 4 if max(nnz, n_nodes) <= _INT32_MAX else 8
    n_words = max(1, -(-n_offsets // 64))
    work = n_pixels * (_WORK_BYTES_PER_PIXEL + _WORK_BYTES_PER_PIXEL_WORD * n_words)
    return int(nnz * (8 + idx) + (n_nodes + 1) * idx + work + _WORK_BYTES_FIXED)


# --------------------------------------------------------------------------- σ defaults


def _default_sigma_feature(feats: Features, mask: np.ndarray | None) -> float:
    """RMS feature difference of 4-adjacent pixel pairs (both in the mask)."""
    values = feats.values
    total = 0.0
    count = 0
    for dy, dx in ((0, 1), (1, 0)):
        rects = _rectangles(values.shape[0], values.shape[1], dy, dx)
        if rects is None:
            continue
        ri, rj = rects
        diff = values[ri] - values[rj]
        d2 = np.einsum("ijc,ijc->ij", diff, diff)
        if mask is not None:
            keep = mask[ri] & mask[rj]
            d2 = d2[keep]
        total += float(d2.sum())
        count += d2.size
    if count == 0 or total <= 0.0:
        return 1.0
    return math.sqrt(total / count)


def _default_sigma_edge(feats: Features, mask: np.ndarray | None) -> float:
    """RMS edge strength over the (masked) pixels."""
    e = feats.edges if mask is None else feats.edges[mask]
    rms = math.sqrt(float(np.mean(e * e))) if e.size else 0.0
    return rms if rms > 0.0 else 1.0


# --------------------------------------------------------------------------- builder


def _build(
    feats: Features,
    r: float,
    mask: np.ndarray | None,
    nnz: int,
    sigmas: dict[str, float],
) -> tuple[sp.csr_matrix, np.ndarray]:
    """Fill the CSR arrays in place, one block of image rows and one offset at a time.

    Row ``p`` of W holds first its mirrored entries (offsets ``−o_k``, flat offset < 0) and
    then its forward entries (``+o_k``), each group in ascending column order. With ``o_k``
    the half-plane offsets in ascending ``(dy, dx)`` order, the slot of ``+o_k`` is the number
    of valid forward offsets ``k' < k`` after the mirrored group, and the slot of ``−o_k``
    counts back from the end of the mirrored group by the number of valid ``k' < k``. Those
    counts are popcounts of per-pixel validity bit sets, so every entry's position is known
    independently of the visiting order; blocks of rows then keep the scattered writes of
    both halves of a pair inside a cache-sized stretch of the arrays.
    """
    height, width = feats.shape
    n_pix = height * width
    offsets = _half_offsets(r)
    n_words = max(1, -(-len(offsets) // 64))

    if mask is None:
        nodes = np.arange(n_pix, dtype=np.int64)
    else:
        nodes = np.flatnonzero(mask).astype(np.int64, copy=False)
    n = nodes.size
    idx_dtype = np.int32 if max(nnz, n) <= _INT32_MAX else np.int64

    # Node number of every pixel (raster rank among graph pixels; unused outside the mask).
    if mask is None:
        rank = np.arange(n_pix, dtype=idx_dtype).reshape(height, width)
    else:
        rank = np.zeros((height, width), dtype=idx_dtype)
        rank[mask] = np.arange(n, dtype=idx_dtype)

    # Pass 1: validity bit sets. Bit k of fwd_bits[p] <=> pair (p, p + o_k) is in the graph;
    # bit k of bwd_bits[p] <=> pair (p, p − o_k) is.
    fwd_bits = np.zeros((n_words, height, width), dtype=np.uint64)
    bwd_bits = np.zeros((n_words, height, width), dtype=np.uint64)
    for k, (dy, dx) in enumerate(offsets):
        rects = _rectangles(height, width, dy, dx)
        if rects is None:
            continue
        ri, rj = rects
        word, bit = divmod(k, 64)
        flag = np.uint64(1 << bit)
        fw, bw = fwd_bits[word][ri], bwd_bits[word][rj]
        if mask is None:
            fw |= flag
            bw |= flag
        else:
            valid = mask[ri] & mask[rj]
            np.bitwise_or(fw, flag, out=fw, where=valid)
            np.bitwise_or(bw, flag, out=bw, where=valid)

    # Entries per row, row pointers, and where each row's forward group starts.
    n_fwd = np.bitwise_count(fwd_bits).sum(axis=0, dtype=np.int64)
    n_bwd = np.bitwise_count(bwd_bits).sum(axis=0, dtype=np.int64)
    counts = n_fwd + n_bwd
    del n_fwd
    indptr = np.zeros(n + 1, dtype=idx_dtype)
    np.cumsum(counts.ravel() if mask is None else counts[mask], out=indptr[1:])
    if int(indptr[-1]) != nnz:  # pragma: no cover - internal consistency
        raise RuntimeError(f"graph builder count mismatch: {int(indptr[-1])} != {nnz}")
    start = counts  # reuse memory: indptr[p] + n_bwd[p]
    if mask is None:
        start.ravel()[:] = indptr[:-1]
    else:
        start[mask] = indptr[:-1]
    start += n_bwd
    del n_bwd, counts
    # With more than 64 offsets, the popcounts of the lower words are added per word.
    fwd_below = _words_below(fwd_bits)
    bwd_below = _words_below(bwd_bits)

    data = np.empty(nnz, dtype=np.float64)
    indices = np.empty(nnz, dtype=idx_dtype)

    values = np.moveaxis(feats.values, 2, 0)  # (C, H, W) views per channel
    inv_f = _inverse_square(sigmas.get("feature"))
    inv_x = _inverse_square(sigmas.get("distance"))
    inv_e = _inverse_square(sigmas.get("edge"))
    edges = feats.edges

    rows_per_block = max(1, _BLOCK_PIXELS // width)
    for b0 in range(0, height, rows_per_block):
        b1 = min(height, b0 + rows_per_block)
        for k, (dy, dx) in enumerate(offsets):
            rects = _rectangles(height, width, dy, dx, b0, b1)
            if rects is None:
                continue
            ri, rj = rects
            word, bit = divmod(k, 64)
            low = np.uint64((1 << bit) - 1)
            expo = _exponent(values, edges, ri, rj, dy, dx, inv_f, inv_x, inv_e)
            np.negative(expo, out=expo)
            w = np.exp(expo, out=expo)
            # forward entry (p, p + o_k) in row p = i
            pos_f = np.bitwise_count(fwd_bits[word][ri] & low).astype(np.int64)
            pos_f += start[ri]
            # mirrored entry (q, q − o_k) in row q = j
            pos_b = np.bitwise_count(bwd_bits[word][rj] & low).astype(np.int64)
            np.subtract(start[rj] - 1, pos_b, out=pos_b)
            if word:
                pos_f += fwd_below[word - 1][ri]
                pos_b -= bwd_below[word - 1][rj]
            cols_f, cols_b = rank[rj], rank[ri]
            if mask is not None:
                valid = mask[ri] & mask[rj]
                w, pos_f, pos_b = w[valid], pos_f[valid], pos_b[valid]
                cols_f, cols_b = cols_f[valid], cols_b[valid]
            data[pos_f] = w
            indices[pos_f] = cols_f
            data[pos_b] = w
            indices[pos_b] = cols_b

    weights = sp.csr_matrix((data, indices, indptr), shape=(n, n), copy=False)
    weights.has_sorted_indices = True
    return weights, nodes


def _words_below(bits: np.ndarray) -> np.ndarray | None:
    """Cumulative popcount of words 0..w for w < n_words − 1 (None with a single word)."""
    if bits.shape[0] == 1:
        return None
    return np.cumsum(np.bitwise_count(bits[:-1]), axis=0, dtype=np.int32)


def _inverse_square(sigma: float | None) -> float | None:
    return None if sigma is None else 1.0 / (sigma * sigma)


def _exponent(values, edges, ri, rj, dy, dx, inv_f, inv_x, inv_e) -> np.ndarray:
    """−log w for one offset over the rectangle of pixels i: a new float64 array."""
    shape = (ri[0].stop - ri[0].start, ri[1].stop - ri[1].start)
    expo = np.zeros(shape, dtype=np.float64)
    if inv_f is not None:
        tmp = np.empty(shape, dtype=np.float64)
        for channel in values:
            np.subtract(channel[ri], channel[rj], out=tmp)
            np.multiply(tmp, tmp, out=tmp)
            expo += tmp
        expo *= inv_f  # Shi & Malik 2000, eq. (11): ‖F_i − F_j‖² / σ_F²
        expo += (dy * dy + dx * dx) * inv_x  # Shi & Malik 2000, eq. (11): ‖X_i − X_j‖² / σ_X²
    if inv_e is not None:
        # Malik et al. 2001: max of E on the segment ij, a running maximum over shifted copies.
        run = edges[ri].copy()
        y0, x0 = ri[0].start, ri[1].start
        h, w = shape
        for sy, sx in _line_samples(dy, dx)[1:]:
            np.maximum(run, edges[y0 + sy : y0 + sy + h, x0 + sx : x0 + sx + w], out=run)
        run *= run
        run *= inv_e
        expo += run
    return expo
