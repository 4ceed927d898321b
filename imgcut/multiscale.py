"""Multiscale normalized-cut eigenvectors for megapixel images.

One job: the smallest eigenpairs of a *multiscale* pixel graph at full resolution, without
ever building a long-radius graph on all pixels.

The multiscale graph follows Cour, Bénézit & Shi (CVPR 2005): level 0 is the full-resolution
image with a short-radius affinity graph ``W_0``; level ``s`` is the image averaged over
``2^s x 2^s`` blocks with its own graph ``W_s`` (short radius, the coarsest level a long one).
The node values of level ``s + 1`` are tied to those of level ``s`` by averaging,
``x_{s+1} = C_s x_s``. Substituting the ties into the normalized-cut Rayleigh quotient of the
block-diagonal multiscale graph gives a generalised problem on the full-resolution pixels alone:

    A y = lambda B y,
    A = L_0 + C^T (L_1 + C^T (L_2 + ...) C) C,     L_s = D_s - W_s,
    B = D_0 + C^T (D_1 + C^T (D_2 + ...) C) C.

Long-range links come from the coarse levels, so each pixel carries only the few non-zeros of
the short-radius ``W_0``. A variation with zero mean inside every block is invisible to the
coarse terms (``C z = 0``), so boundaries inside a block are placed by the full-resolution
graph alone, on real image edges.

The solver is coarsen–solve–refine (nested iteration): the Galerkin projection of the pencil
onto piecewise-constant functions of the coarsest level (prolongation ``P``, ``C P = I``) is an
ordinary graph normalized cut, solved with :func:`imgcut.spectral.laplacian_eigenpairs`; its
eigenvectors are prolonged one level at a time, placed inside the blocks by compatible
relaxation, and refined by a Rayleigh-Ritz step (large levels) or a few block LOBPCG
iterations (Knyazev 2001) on that level's Galerkin pencil, ending on the full-resolution
pencil.

Public names: :func:`multiscale_eigenpairs`, :func:`prolongation`, :func:`restriction`,
:func:`coarsen_features`, :func:`galerkin_graph`, :class:`MultiscaleProblem`,
:func:`multiscale_problem`, :data:`AUTO_MULTISCALE_PIXELS`.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.csgraph as csgraph

from imgcut._errors import EigenConvergenceWarning
from imgcut._linalg import tall_matmul
from imgcut.features import Features, compute_features
from imgcut.graph import AffinityGraph, affinity_graph
from imgcut.spectral import DENSE_MAX_NODES, FLOAT32_MIN_TOL, Eigenpairs, laplacian_eigenpairs

__all__ = [
    "AUTO_MULTISCALE_PIXELS",
    "MultiscaleProblem",
    "coarsen_features",
    "galerkin_graph",
    "multiscale_eigenpairs",
    "multiscale_problem",
    "prolongation",
    "restriction",
    "RELAX_MIN_PIXELS",
]

#: ``segment(scale="auto")`` switches to the multiscale path above this many pixels (a
#: choice of this project). Session 5 (docs/multiscale.md): on 20 BSDS val photographs of
#: 154 401 pixels, in colour and in grey, the multiscale k-way cut scored at least as well as
#: the single-scale k-way and recursive cuts in covering, boundary F and PRI at 25-85x less
#: CPU; below this size there is no such measurement, and the single-scale graph solves in
#: a few seconds.
AUTO_MULTISCALE_PIXELS = 150_000

# The coarsest level is the first one with at most this many pixels (auto levels).
_COARSEST_PIXELS = 3_000
_CUES = ("combined", "intensity", "contour")
_PRECONDITIONERS = ("vcycle", "jacobi")
# Extra LOBPCG columns beyond the wanted ones (guard vectors; common practice, they speed
# up the convergence of the last wanted pairs and let new fine-level modes enter). One
# guard: on a BSDS photo the 9 710-pixel level reached 1e-4 in 18-20 iterations with 2-3
# guards and stalled at 1e-3 after 36 with none (session 4 traces, docs/multiscale.md).
_GUARD = 1
# Shift of the preconditioned operator A + sigma B (B-relative). It must be comparable to
# the wanted eigenvalues (1e-4 to 1e-2 on photographs), else the preconditioner acts like
# B^-1 on exactly the smooth modes LOBPCG needs: 0.1 left a photo's levels at residual 2e-3
# after 20 iterations and missed two of the eight smallest eigenvalues; 0.01 converged
# them (session 4 measurements, docs/multiscale.md).
_PRECOND_SHIFT = 0.01
# Damping of the Jacobi steps of the compatible relaxation (common practice for Jacobi
# smoothing on graphs with odd cycles; 1.0 oscillates on bipartite stencils).
_RELAX_OMEGA = 0.8
# Levels with more pixels than this are refined by compatible relaxation instead of LOBPCG
# (relax_levels="auto"); a choice of this project, measured in docs/multiscale.md.
RELAX_MIN_PIXELS = 100_000
_RELAX_STEPS = 8
# Lanczos restarts allowed on the coarsest level before LAPACK takes over (the BSDS photo
# levels need about 10).
_COARSE_RESTARTS = 100
# The V-cycle solves its bottom level (further aggregates of the coarsest graph) densely
# once it has at most this many nodes (Cholesky of 700 x 700: a few milliseconds).
_DENSE_BOTTOM = 700
_RESYNC = 5  # LOBPCG iterations between explicit recomputations of A X and B X
_TRACE = None  # debugging hook: a list collects the residuals of every LOBPCG iteration


# --------------------------------------------------------------------------- grid operators


def _coarse_shape(shape: tuple[int, int]) -> tuple[int, int]:
    return (shape[0] + 1) // 2, (shape[1] + 1) // 2


def _check_grid_shape(shape) -> tuple[int, int]:
    try:
        h, w = (int(s) for s in shape)
    except (TypeError, ValueError):
        raise ValueError(f"shape must be (H, W) with sizes >= 1, got {shape!r}") from None
    if h < 1 or w < 1:
        raise ValueError(f"shape must be (H, W) with sizes >= 1, got {shape!r}")
    return h, w


def prolongation(shape, factor: int = 2) -> sp.csr_matrix:
    """Piecewise-constant prolongation from a block grid to a pixel grid.

    Parameters
    ----------
    shape : tuple of int
        Fine grid ``(H, W)``.
    factor : int, default 2
        Block side ``f`` (>= 1). Coarse node ``(I, J)`` is the block of pixels
        ``f I <= y < f (I + 1)``, ``f J <= x < f (J + 1)``; blocks at the right and bottom
        borders may be partial.

    Returns
    -------
    P : scipy.sparse.csr_matrix, shape (H * W, Hc * Wc)
        ``P[i, I] = 1`` when pixel ``i`` lies in block ``I`` (raster order on both grids,
        ``Hc = ceil(H / f)``, ``Wc = ceil(W / f)``). ``P 1 = 1``: constants are preserved.

    Raises
    ------
    ValueError
        Bad shape or factor.

    Notes
    -----
    With this ``P`` the Galerkin coarse graph ``P^T W P`` has the block sums of ``W`` as
    weights and ``P^T D P`` as degrees (intra-block weight kept as self-loops), so the coarse
    normalized-cut Rayleigh quotient of a coarse vector ``z`` equals the fine one of ``P z``
    (Galerkin projection; see :func:`galerkin_graph`).

    Examples
    --------
    >>> P = prolongation((3, 3), 2)
    >>> P.shape
    (9, 4)
    >>> (P @ [1.0, 2.0, 3.0, 4.0]).reshape(3, 3)
    array([[1., 1., 2.],
           [1., 1., 2.],
           [3., 3., 4.]])
    """
    h, w = _check_grid_shape(shape)
    f = _check_factor(factor)
    wc = -(-w // f)
    rows = np.arange(h * w, dtype=np.int64)
    blk = ((np.arange(h) // f)[:, None] * wc + (np.arange(w) // f)[None, :]).ravel()
    nc = -(-h // f) * wc
    return sp.csr_matrix((np.ones(h * w), (rows, blk)), shape=(h * w, nc))


def restriction(shape, factor: int = 2) -> sp.csr_matrix:
    """Averaging restriction ``C`` from a pixel grid to its block grid.

    Parameters
    ----------
    shape : tuple of int
        Fine grid ``(H, W)``.
    factor : int, default 2
        Block side ``f`` (>= 1), as in :func:`prolongation`.

    Returns
    -------
    C : scipy.sparse.csr_matrix, shape (Hc * Wc, H * W)
        ``C[I, i] = 1 / |I|`` for the pixels ``i`` of block ``I``: block means. ``C 1 = 1``
        (constants preserved) and ``C P = I``.

    Raises
    ------
    ValueError
        Bad shape or factor.

    Notes
    -----
    ``C = (P^T P)^-1 P^T``, the left inverse of :func:`prolongation`; it is the cross-scale
    averaging constraint of Cour, Bénézit & Shi (2005), ``x_{s+1} = C x_s``.

    Examples
    --------
    >>> C = restriction((2, 4), 2)
    >>> C @ [1.0, 3.0, 5.0, 7.0, 1.0, 3.0, 5.0, 7.0]
    array([2., 6.])
    """
    P = prolongation(shape, factor)
    counts = np.asarray(P.sum(axis=0)).ravel()
    return sp.csr_matrix(sp.diags(1.0 / counts) @ P.T)


def _check_factor(factor) -> int:
    if isinstance(factor, bool) or not isinstance(factor, int | np.integer) or factor < 1:
        raise ValueError(f"factor must be an integer >= 1, got {factor!r}")
    return int(factor)


class _Grid:
    """Fast 2x2 block operators between a grid and its half-resolution grid."""

    def __init__(self, shape: tuple[int, int]):
        self.shape = shape
        self.coarse = _coarse_shape(shape)
        h, w = shape
        hc, wc = self.coarse
        cnt = np.full((hc, wc), 4.0)
        if h % 2:
            cnt[-1, :] /= 2
        if w % 2:
            cnt[:, -1] /= 2
        self.counts = cnt.ravel()

    def block_sum(self, x: np.ndarray) -> np.ndarray:
        """``P^T x`` for ``x`` of shape (n, m)."""
        h, w = self.shape
        hc, wc = self.coarse
        m = x.shape[1]
        # pairs of image rows first (whole contiguous rows: long inner loops), then pairs of
        # columns; an odd last row or column is its own partial block. A band of block rows
        # at a time keeps the temporaries near 2^16 x m values.
        g = x.reshape(h, w * m)
        out = np.empty((hc, wc, m), dtype=x.dtype)
        step = max(1, (1 << 16) // w)
        for c0 in range(0, hc, step):
            c1 = min(hc, c0 + step)
            even = g[2 * c0 : 2 * c1 : 2]
            odd = g[2 * c0 + 1 : 2 * c1 : 2]
            r = even.copy()
            r[: odd.shape[0]] += odd
            r3 = r.reshape(c1 - c0, w, m)
            band = out[c0:c1]
            if w % 2:
                band[...] = r3[:, 0::2]
                band[:, : w // 2] += r3[:, 1::2]
            else:
                np.add(r3[:, 0::2], r3[:, 1::2], out=band)
        return out.reshape(hc * wc, m)

    def average(self, x: np.ndarray) -> np.ndarray:
        """``C x``: block means (in the dtype of ``x``)."""
        out = self.block_sum(x)
        out /= self.counts.astype(out.dtype, copy=False)[:, None]
        return out

    def expand(self, z: np.ndarray) -> np.ndarray:
        """``P z``: copy every block value to its pixels."""
        h, w = self.shape
        m = z.shape[1]
        x = np.empty((h * w, m), dtype=z.dtype)
        self._put(x, z, add=False)
        return x

    def _put(self, x: np.ndarray, z: np.ndarray, add: bool) -> None:
        h, w = self.shape
        hc, _ = self.coarse
        m = x.shape[1]
        # each block value copied to its two columns once (a half-size row block), then
        # added to (or written into) both image rows of the block as whole contiguous rows:
        # 2-5x faster on odd grids than 2 x 2 broadcasting with its 8-element inner loops.
        # (A prebuilt CSR P would be no faster for ``x += P z``, which it cannot do in place,
        # and costs 12 bytes per pixel per level; ``bench_multiscale.py --transfers``.)
        g = x.reshape(h, w * m)
        zc = z.reshape(hc, -1, m)
        step = max(1, (1 << 16) // w)  # block rows per pass: temporaries of ~2^16 x m values
        for c0 in range(0, hc, step):
            c1 = min(hc, c0 + step)
            zw = np.repeat(zc[c0:c1], 2, axis=1)[:, :w].reshape(c1 - c0, w * m)
            even = g[2 * c0 : 2 * c1 : 2]
            odd = g[2 * c0 + 1 : 2 * c1 : 2]  # one row fewer at an odd last row
            if add:
                even += zw
                odd += zw[: odd.shape[0]]
            else:
                even[...] = zw
                odd[...] = zw[: odd.shape[0]]

    def add_expanded(self, x: np.ndarray, z: np.ndarray) -> None:
        """``x += P z`` in place (no full-size temporary)."""
        if not x.flags.c_contiguous:  # a reshape would copy: the writes would be lost
            x += self.expand(z)
            return
        self._put(x, z, add=True)

    def average_t(self, z: np.ndarray) -> np.ndarray:
        """``C^T z``."""
        return self.expand(z / self.counts[:, None])


# --------------------------------------------------------------------------- features / graphs


def coarsen_features(features: Features) -> Features:
    """Features of the half-resolution image: 2x2 block means of the values, maxima of edges.

    Parameters
    ----------
    features : Features
        Full-resolution features ``(H, W, C)``.

    Returns
    -------
    Features
        ``(ceil(H/2), ceil(W/2), C)`` values (means over the pixels of each block) and the
        block maxima of the edge map, so that a one-pixel-wide contour survives coarsening
        for the intervening-contour cue.

    Examples
    --------
    >>> import numpy as np
    >>> from imgcut.features import compute_features
    >>> f = coarsen_features(compute_features(np.arange(12.0).reshape(3, 4)))
    >>> f.values.shape, f.edges.shape
    ((2, 2, 1), (2, 2))
    """
    v = np.asarray(features.values, dtype=np.float64)
    e = np.asarray(features.edges, dtype=np.float64)
    h, w, c = v.shape
    grid = _Grid((h, w))
    hc, wc = grid.coarse
    values = grid.average(v.reshape(h * w, c)).reshape(hc, wc, c)
    ep = np.pad(e, ((0, h % 2), (0, w % 2)), mode="edge")
    edges = ep.reshape(hc, 2, wc, 2).max(axis=(1, 3))
    return Features(
        values=values,
        edges=np.ascontiguousarray(edges),
        kind=features.kind,
        low=features.low,
        high=features.high,
        percentiles=features.percentiles,
        edge_scales=features.edge_scales,
    )


def galerkin_graph(W, shape, *, chunk_rows: int = 1 << 22) -> sp.csr_matrix:
    """Aggregate a pixel graph onto 2x2 blocks: ``P^T W P``.

    Parameters
    ----------
    W : scipy.sparse matrix, shape (H * W, H * W)
        Affinity graph on the pixels of ``shape`` (raster order, no mask).
    shape : tuple of int
        Grid ``(H, W)``.
    chunk_rows : int, default 2**22
        Rows aggregated at a time (bounds the temporary memory).

    Returns
    -------
    scipy.sparse.csr_matrix, shape (Hc * Wc, Hc * Wc)
        Block sums of ``W``; the diagonal holds the weight inside each block (self-loops),
        so row sums are the block sums of the degrees, ``P^T d``.

    Raises
    ------
    ValueError
        When ``W`` does not match ``shape``.

    Notes
    -----
    ``z^T P^T (D - W) P z = (P z)^T (D - W) (P z)`` and ``z^T P^T D P z = (P z)^T D (P z)``,
    so the Rayleigh quotient of the aggregated graph at ``z`` equals the fine one at the
    prolonged vector (Galerkin projection onto piecewise-constant functions).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> W = sp.csr_matrix(np.ones((4, 4)) - np.eye(4))   # K4 on a 2x2 grid
    >>> galerkin_graph(W, (2, 2)).toarray()
    array([[12.]])
    """
    h, w = _check_grid_shape(shape)
    W = sp.csr_matrix(W)
    if W.shape != (h * w, h * w):
        raise ValueError(f"W must be ({h * w}, {h * w}) for a grid of shape {shape}; got {W.shape}")
    hc, wc = _coarse_shape((h, w))
    # Block index of every pixel. Each chunk of an even number of image rows gives complete,
    # disjoint rows of the result: its columns are mapped to blocks in place of a product
    # with P (duplicates are summed by the product that follows), and its rows are summed
    # by the sparse product with that chunk's part of P^T. 8x faster at 2048 x 2048 than the
    # row-sliced P^T (W P) it replaced (slices and format conversions); about as fast as
    # P^T W P with a prebuilt CSR P^T, without building P (bench_multiscale.py --transfers).
    ci = (np.arange(h) // 2)[:, None] * wc + (np.arange(w) // 2)[None, :]
    ci = ci.ravel().astype(W.indices.dtype)
    step = max(2, (chunk_rows // w) // 2 * 2)
    parts = []
    for y0 in range(0, h, step):
        y1 = min(h, y0 + step)
        r0, r1 = y0 * w, y1 * w
        a, b = int(W.indptr[r0]), int(W.indptr[r1])
        # views of W's arrays except the mapped columns; nothing here writes into them
        Wm = sp.csr_matrix(
            (W.data[a:b], ci[W.indices[a:b]], W.indptr[r0 : r1 + 1] - a),
            shape=(r1 - r0, hc * wc),
        )
        c0 = (y0 // 2) * wc
        n_rows = ((y1 + 1) // 2) * wc - c0
        PT = sp.csr_matrix(
            (np.ones(r1 - r0), (ci[r0:r1] - c0, np.arange(r1 - r0))), shape=(n_rows, r1 - r0)
        )
        parts.append(PT @ Wm)
    out = parts[0] if len(parts) == 1 else sp.vstack(parts, format="csr")
    out = sp.csr_matrix(out)
    out.sum_duplicates()
    out.sort_indices()
    return out


# --------------------------------------------------------------------------- the problem


@dataclass(eq=False)
class _Level:
    shape: tuple[int, int]
    W_own: sp.csr_matrix | None  # the level's own graph W_s (None: no own graph)
    G: sp.csr_matrix  # Galerkin graph of levels <= s (incl. W_s), self-loops on the diagonal
    grid: _Grid | None  # operators to level s + 1 (None on the coarsest level)


@dataclass(eq=False)
class MultiscaleProblem:
    """The multiscale normalized-cut pencil of an image, level by level.

    Attributes
    ----------
    shapes : list of tuple
        Grid shape of every level, full resolution first.
    radii : list of float
        Radius of each level's own graph.
    sigmas : list of dict
        σ values used by each level's own graph.
    nnz : list of int
        Stored entries of each level's own graph.
    timings : dict
        Seconds spent on features, graphs and aggregation.
    fine_graph : AffinityGraph or None
        The full-resolution short-radius graph ``W_0`` (for post-processing that needs
        pixel affinities, e.g. :func:`imgcut.regions.pair_weights`).
    """

    shapes: list
    radii: list
    sigmas: list
    nnz: list
    timings: dict = field(default_factory=dict)
    fine_graph: AffinityGraph | None = field(default=None, repr=False)
    _levels: list = field(default_factory=list, repr=False)

    @property
    def n_levels(self) -> int:
        """Number of levels (1 = single scale)."""
        return len(self._levels)

    # -- operators of the pencil on level s ---------------------------------------------
    def _coarse_apply(self, s: int, z: np.ndarray, a: float, b: float) -> np.ndarray:
        """``E_s z`` for ``a L + b D`` of the own graphs of levels >= s, tied by averaging."""
        lev = self._levels[s]
        W = lev.W_own
        if W is None:
            out = np.zeros_like(z)
        else:
            out = ((a + b) * self._own_deg[s])[:, None] * z
            if a:
                Wz = W @ z
                Wz *= a
                out -= Wz
        if lev.grid is not None:  # out += C^T E_{s+1} C z, without a full-size temporary
            coarse = self._coarse_apply(s + 1, lev.grid.average(z), a, b)
            coarse /= lev.grid.counts[:, None]
            lev.grid.add_expanded(out, coarse)
        return out

    def apply(self, s: int, x: np.ndarray, mass: bool = False, shift: float = 0.0) -> np.ndarray:
        """``A_s x`` (``B_s x`` with ``mass=True``; ``A_s x + shift B_s x`` otherwise).

        ``x`` has shape ``(n_s, m)``.
        """
        a, b = (0.0, 1.0) if mass else (1.0, float(shift))
        lev = self._levels[s]
        if a:  # (a + b) D x - a G x, built in place a block of rows at a time
            out = lev.G @ x
            out *= -a
            d = (a + b) * self._deg[s]
            for r0 in range(0, out.shape[0], 1 << 16):
                r1 = r0 + (1 << 16)
                out[r0:r1] += d[r0:r1, None] * x[r0:r1]
        else:
            out = (b * self._deg[s])[:, None] * x
        if lev.grid is not None:
            coarse = self._coarse_apply(s + 1, lev.grid.average(x), a, b)
            coarse /= lev.grid.counts[:, None]
            lev.grid.add_expanded(out, coarse)  # += C^T coarse
        return out

    def _coarse_diag(self, s: int, mass: bool) -> np.ndarray:
        lev = self._levels[s]
        W = lev.W_own
        n = lev.shape[0] * lev.shape[1]
        out = np.zeros(n)
        if W is not None:
            out += self._own_deg[s]
            if not mass:
                out -= W.diagonal()
        if lev.grid is not None:
            out += lev.grid.expand(
                (self._coarse_diag(s + 1, mass) / lev.grid.counts**2)[:, None]
            ).ravel()
        return out

    def diagonal(self, s: int, mass: bool = False) -> np.ndarray:
        """Diagonal of ``A_s`` (or ``B_s``)."""
        lev = self._levels[s]
        out = self._deg[s].copy()
        if not mass:
            out -= lev.G.diagonal()
        if lev.grid is not None:
            out += lev.grid.expand(
                (self._coarse_diag(s + 1, mass) / lev.grid.counts**2)[:, None]
            ).ravel()
        return out

    def _coarse_l1(self, s: int, sigma: float) -> np.ndarray:
        lev = self._levels[s]
        n = lev.shape[0] * lev.shape[1]
        out = np.zeros(n) if lev.W_own is None else (2.0 + sigma) * self._own_deg[s]
        if lev.grid is not None:
            out += lev.grid.average_t(self._coarse_l1(s + 1, sigma)[:, None]).ravel()
        return out

    def l1_diagonal(self, s: int, sigma: float = 0.0) -> np.ndarray:
        """Upper bound of the absolute row sums of ``A_s + sigma B_s`` (l1-Jacobi diagonal).

        ``diag(A)^-1`` is a poor smoother here: the coarse terms ``C^T E C`` couple whole
        blocks, so ``lambda_max(diag(A)^-1 A)`` grows like 4 per level. This diagonal
        (``|L_0| 1`` plus ``C^T`` of the coarse levels' ``|L_s| 1``, by the triangle
        inequality at least the absolute row sum) bounds every row, so
        ``l1^-1 (A + sigma B)`` has spectrum in ``(0, 1]`` and the
        smoother converges (Baker, Falgout, Kolev & Yang, SIAM J. Sci. Comput. 33(5), 2011).
        """
        lev = self._levels[s]
        out = (2.0 + sigma) * self._deg[s] - 2.0 * lev.G.diagonal()
        if lev.grid is not None:
            out += lev.grid.average_t(self._coarse_l1(s + 1, sigma)[:, None]).ravel()
        return out

    def __post_init__(self):
        self._deg = []

    def _finish(self):
        self._deg = [np.asarray(lv.G.sum(axis=1)).ravel() for lv in self._levels]
        self._own_deg = [
            None if lv.W_own is None else np.asarray(lv.W_own.sum(axis=1)).ravel()
            for lv in self._levels
        ]


def _auto_levels(shape: tuple[int, int], coarsest_pixels: int) -> int:
    levels = 1
    h, w = shape
    while h * w > coarsest_pixels and min(h, w) >= 8:
        h, w = _coarse_shape((h, w))
        levels += 1
    return levels


def multiscale_problem(
    image,
    *,
    levels: int | str = "auto",
    radius_fine: float = 1.5,
    radius_coarse: float = 5.0,
    cue: str = "combined",
    sigma_feature: float | None = None,
    sigma_edge: float | None = None,
    coarsest_pixels: int = _COARSEST_PIXELS,
) -> MultiscaleProblem:
    """Build the graphs and operators of the multiscale pencil ``A y = lambda B y``.

    Parameters
    ----------
    image : array_like or Features
        Image (see :func:`imgcut.features.compute_features`) or precomputed features.
    levels : int or "auto", default "auto"
        Number of levels including full resolution (>= 1). "auto": halve until the coarsest
        level has at most ``coarsest_pixels`` pixels.
    radius_fine : float, default 1.5
        Radius of the own graph of every level but the coarsest (1.5: 8 neighbours).
    radius_coarse : float, default 5
        Radius of the coarsest level's graph, which carries the long-range links.
    cue : {"combined", "intensity", "contour"}, default "combined"
        Affinity cue of every level (see :func:`imgcut.graph.affinity_graph`).
    sigma_feature, sigma_edge : float, optional
        Fixed σ_F, σ_E for every level; None derives them per level from its features.
    coarsest_pixels : int, default 3000
        Target size of the coarsest level with ``levels="auto"``.

    Returns
    -------
    MultiscaleProblem

    Raises
    ------
    ValueError
        Bad option values (listing the valid ones).

    Examples
    --------
    >>> import numpy as np
    >>> prob = multiscale_problem(np.random.default_rng(0).random((40, 40)), levels=3)
    >>> prob.shapes
    [(40, 40), (20, 20), (10, 10)]
    """
    if cue not in _CUES:
        raise ValueError(f"cue must be one of {_CUES}, got {cue!r}")
    timings: dict[str, float] = {}
    t = time.perf_counter()
    feats = image if isinstance(image, Features) else compute_features(image)
    timings["features"] = time.perf_counter() - t
    shape = feats.shape
    if levels == "auto":
        n_levels = _auto_levels(shape, int(coarsest_pixels))
    else:
        if isinstance(levels, bool) or not isinstance(levels, int | np.integer) or levels < 1:
            raise ValueError(f"levels must be 'auto' or an integer >= 1, got {levels!r}")
        n_levels = int(levels)
    for name, r in (("radius_fine", radius_fine), ("radius_coarse", radius_coarse)):
        number = isinstance(r, int | float | np.integer | np.floating)
        if not (number and math.isfinite(r) and r >= 1):
            raise ValueError(f"{name} must be a finite number >= 1 (pixels), got {r!r}")

    t_graph = 0.0
    t_agg = 0.0
    feats_s = feats
    shapes, radii, sigmas, nnz = [], [], [], []
    levels_out: list[_Level] = []
    G_prev = None
    for s in range(n_levels):
        if s > 0:
            feats_s = coarsen_features(feats_s)
        shp = feats_s.shape
        last = s == n_levels - 1
        r = float(radius_coarse if last else radius_fine)
        t0 = time.perf_counter()
        g = affinity_graph(
            feats_s,
            radius=r,
            cue=cue,
            sigma_feature=sigma_feature,
            sigma_edge=sigma_edge,
            memory_budget=None,
        )
        t_graph += time.perf_counter() - t0
        W_s = g.weights
        if s == 0:
            fine_graph = g
        t0 = time.perf_counter()
        if G_prev is None:
            G = W_s
        else:
            G = galerkin_graph(G_prev, shapes[-1]) + W_s
            G = sp.csr_matrix(G)
        t_agg += time.perf_counter() - t0
        if levels_out:
            levels_out[-1].grid = _Grid(shapes[-1])
        # Level 0's G is W_0 itself; keep one reference only.
        levels_out.append(_Level(shp, None if s == 0 else W_s, G, None))
        shapes.append(shp)
        radii.append(r)
        sigmas.append(dict(g.sigmas))
        nnz.append(int(W_s.nnz))
        G_prev = G
    # Level 0: its own graph is G itself (A_0 = L(W_0) + C^T E_1 C); the own graphs of the
    # levels >= 1 enter the finer pencils through E; G_s (s >= 1) includes W_s already.
    timings["graphs"] = t_graph
    timings["aggregate"] = t_agg
    prob = MultiscaleProblem(
        shapes=shapes, radii=radii, sigmas=sigmas, nnz=nnz, timings=timings, fine_graph=fine_graph
    )
    prob._levels = levels_out
    prob._finish()
    return prob


# --------------------------------------------------------------------------- refinement


def _b_orthonormalize(X, BX):
    G = X.T @ BX
    G = (G + G.T) / 2
    try:
        Lc = np.linalg.cholesky(G)
    except np.linalg.LinAlgError:
        w, V = np.linalg.eigh(G)
        keep = w > w.max() * 1e-12
        T = V[:, keep] / np.sqrt(w[keep])
        return tall_matmul(X, T), tall_matmul(BX, T)
    Ti = scipy.linalg.solve_triangular(Lc, np.eye(G.shape[0]), lower=True).T
    return tall_matmul(X, Ti), tall_matmul(BX, Ti)


class _VCycle:
    """One multigrid V-cycle for ``(A_s + sigma B_s) e = r`` on the level hierarchy.

    The level pencils are Galerkin projections of each other (``P^T A_s P = A_{s+1}``), so
    this is aggregation multigrid with the hierarchy the multiscale graph already has:
    l1-Jacobi smoothing (one pre-, one post-step) and piecewise-constant transfer. Below the
    problem's coarsest level the cycle goes on through further 2x2 Galerkin aggregates of
    the coarsest graph until at most ``_DENSE_BOTTOM`` nodes remain, where the shifted
    pencil is solved exactly by a dense Cholesky factor. Every step acts on the whole block
    of columns at once (a per-column algebraic-multigrid solve on the coarsest level cost
    more than the rest of the cycle on the 481 x 321 photographs).
    """

    def __init__(self, prob: MultiscaleProblem, sigma: float):
        self.prob = prob
        self.sigma = sigma
        S = prob.n_levels - 1
        # l1 diagonals per level on first use: the relaxed fine levels never enter a V-cycle
        self._inv_diag: dict[int, np.ndarray] = {}
        # Plain graph levels from the coarsest one down: (G, degrees, grid to the next).
        shape = prob.shapes[S]
        G = prob._levels[S].G
        extra = []
        while shape[0] * shape[1] > _DENSE_BOTTOM and min(shape) >= 2:
            grid = _Grid(shape)
            extra.append((G, np.asarray(G.sum(axis=1)).ravel(), grid))
            G = galerkin_graph(G, shape)
            shape = grid.coarse
        d = np.asarray(G.sum(axis=1)).ravel()
        M = np.diag((1.0 + sigma) * d) - G.toarray()
        # A node without any weight (all its affinities underflowed to 0) has a zero row:
        # the identity there keeps the bottom solve defined (it is its own component).
        empty = M.diagonal() <= 0
        M[empty, empty] = 1.0
        try:
            self.bottom = ("cholesky", scipy.linalg.cho_factor(M, lower=True))
        except np.linalg.LinAlgError:  # numerically singular: symmetric pseudo-inverse
            self.bottom = ("pinv", scipy.linalg.pinvh(M))
        self.extra = extra
        self.S = S
        self.pre = 1  # smoothing steps before and after the coarse correction

    def inv_diag(self, s: int) -> np.ndarray:
        if s not in self._inv_diag:
            if s < self.S:
                l1 = self.prob.l1_diagonal(s, self.sigma)
            else:
                G, d, _ = self.extra[s - self.S]
                l1 = (2.0 + self.sigma) * d - 2.0 * G.diagonal()
            self._inv_diag[s] = 1.0 / l1
        return self._inv_diag[s]

    def _apply(self, s: int, e: np.ndarray) -> np.ndarray:
        if s < self.S:
            return self.prob.apply(s, e, shift=self.sigma)
        G, d, _ = self.extra[s - self.S]
        out = G @ e
        out *= -1.0
        out += ((1.0 + self.sigma) * d)[:, None] * e
        return out

    def __call__(self, s: int, r: np.ndarray) -> np.ndarray:
        if s == self.S + len(self.extra):
            kind, factor = self.bottom
            return scipy.linalg.cho_solve(factor, r) if kind == "cholesky" else factor @ r
        grid = self.prob._levels[s].grid if s < self.S else self.extra[s - self.S][2]
        dinv = self.inv_diag(s)[:, None]  # l1-Jacobi needs no damping (Baker et al. 2011)
        e = dinv * r
        for _ in range(self.pre - 1):
            e += dinv * (r - self._apply(s, e))
        res = r - self._apply(s, e)
        grid.add_expanded(e, self(s + 1, grid.block_sum(res)))
        for _ in range(self.pre):
            e += dinv * (r - self._apply(s, e))
        return e


def _weighted_sq_norms(V: np.ndarray, w: np.ndarray, chunk: int = 1 << 18) -> np.ndarray:
    """``sum_i w_i V_ij^2`` per column, a block of rows at a time (no n x m temporary)."""
    out = np.zeros(V.shape[1])
    for r0 in range(0, V.shape[0], chunk):
        part = V[r0 : r0 + chunk]
        out += w[r0 : r0 + chunk] @ (part * part)
    return out


def _weighted_gram(X: np.ndarray, w: np.ndarray, chunk: int = 1 << 16) -> np.ndarray:
    """``X^T diag(w) X`` a block of rows at a time (no n x m temporary)."""
    out = np.zeros((X.shape[1], X.shape[1]))
    for r0 in range(0, X.shape[0], chunk):
        part = X[r0 : r0 + chunk]
        out += (part * w[r0 : r0 + chunk, None]).T @ part
    return out


def _rayleigh_ritz(prob: MultiscaleProblem, s: int, X: np.ndarray, n_wanted: int):
    """Ritz pairs of the level-``s`` pencil in ``span(X)`` (constant deflated), lean on memory.

    Returns (values, B-orthonormal vectors, relative residuals) like :func:`_refine` with
    ``maxiter=0``, without its ``n x m`` temporaries: the k x k generalised problem is solved
    by LAPACK and the residual norms by weighted sums. ``X`` is overwritten.
    """
    n, m = X.shape
    dB = prob.diagonal(s, mass=True)
    one = np.ones((n, 1))
    B1 = prob.apply(s, one, mass=True)[:, 0]
    X -= ((B1 @ X) / float(B1.sum()))[None, :]  # B-deflate the constant (in place)
    # B X = d * X + P c with c the (block-sized) coarse mass terms, so neither the Gram
    # matrix nor the residual needs an n x m block for B X: X^T B X is a weighted Gram
    # matrix plus (P^T X)^T c, and c of the Ritz vectors is c Z (B is linear). At most two
    # n x m blocks (X and A X) are alive.
    d = prob._deg[s]
    grid = prob._levels[s].grid
    c = None
    if grid is not None:
        c = prob._coarse_apply(s + 1, grid.average(X), 0.0, 1.0)
        c /= grid.counts[:, None]
    GB = _weighted_gram(X, d)
    if c is not None:
        GB += grid.block_sum(X).T @ c
    AX = prob.apply(s, X)
    GA = X.T @ AX
    gw, gv = np.linalg.eigh((GB + GB.T) / 2)
    keep = gw > 1e-12 * gw.max()
    T = gv[:, keep] / np.sqrt(gw[keep])
    lam, Zr = np.linalg.eigh(T.T @ ((GA + GA.T) / 2) @ T)
    Z = T @ Zr
    if Z.shape[1] == m:  # Ritz vectors in place (X is the caller's fresh block)
        tall_matmul(X, Z, out=X)
        tall_matmul(AX, Z, out=AX)
    else:  # a dependent direction was dropped: fewer columns
        X = tall_matmul(X, Z)
        AX = tall_matmul(AX, Z)
    # residual block A X - B X diag(lam), formed in AX in place
    for r0 in range(0, n, 1 << 16):
        r1 = r0 + (1 << 16)
        AX[r0:r1] -= (d[r0:r1, None] * X[r0:r1]) * lam[None, :]
    if c is not None:
        grid.add_expanded(AX, -((c @ Z) * lam[None, :]))
    inv_dB = np.divide(1.0, dB, out=np.zeros_like(dB), where=dB > 0)
    num = np.sqrt(_weighted_sq_norms(AX, inv_dB))
    den = np.sqrt(_weighted_sq_norms(X, dB))
    res = num / den
    return lam, X, res[:n_wanted]


def _refine(
    prob: MultiscaleProblem,
    s: int,
    X: np.ndarray,
    tol: float,
    maxiter: int,
    precond=None,
    n_wanted: int | None = None,
):
    """Block LOBPCG (Knyazev 2001) on level s with Jacobi preconditioning.

    The constant vector (eigenvalue 0) is deflated in the B inner product. Returns
    (values, X, residuals, iterations).
    """
    n, m = X.shape
    A = lambda V: prob.apply(s, V)  # noqa: E731
    B = lambda V: prob.apply(s, V, mass=True)  # noqa: E731
    dA = prob.l1_diagonal(s)
    dB = prob.diagonal(s, mass=True)
    inv_dA = 1.0 / np.maximum(dA, 1e-300)
    sq_dB = np.sqrt(dB)
    one = np.ones((n, 1))
    B1 = B(one)
    n1 = float(one[:, 0] @ B1[:, 0])

    b1 = B1[:, 0] / n1

    def deflate(V):
        return V - (b1 @ V)[None, :]  # remove the B-component along the constant

    X = deflate(X)
    BX = B(X)
    X, BX = _b_orthonormalize(X, BX)
    AX = A(X)
    H = X.T @ AX
    lam, Z = np.linalg.eigh((H + H.T) / 2)
    X, AX, BX = tall_matmul(X, Z), tall_matmul(AX, Z), tall_matmul(BX, Z)
    P = AP = BP = None
    it = 0
    res = np.full(m, np.inf)
    while True:
        R = AX - BX * lam
        num = np.linalg.norm(R / sq_dB[:, None], axis=0)
        den = np.linalg.norm(X * sq_dB[:, None], axis=0)
        res = num / den
        if n_wanted is not None:
            res = res[:n_wanted]
        if _TRACE is not None:
            _TRACE.append(res.copy())
        if np.all(res <= tol) or it >= maxiter:
            break
        it += 1
        Wt = deflate(R * inv_dA[:, None] if precond is None else precond(s, R))
        BW = B(Wt)
        Wt, BW = _b_orthonormalize(Wt, BW)
        AW = A(Wt)
        # Gram matrices of span[X, W, P]. X and W are B-orthonormal (X^T B X = W^T B W = I)
        # and X^T A X = diag(lam) (X holds Ritz vectors), so only the other blocks are
        # computed, one small GEMM each (Knyazev 2001; the implicit blocks are what
        # standard LOBPCG implementations use until the residuals are tiny).
        mw = Wt.shape[1]
        XAW, XBW, WAW = X.T @ AW, X.T @ BW, Wt.T @ AW
        eye_m, eye_w = np.eye(m), np.eye(mw)
        if P is None:
            S, AS, BS = [X, Wt], [AX, AW], [BX, BW]
            GA = np.block([[np.diag(lam), XAW], [XAW.T, WAW]])
            GB = np.block([[eye_m, XBW], [XBW.T, eye_w]])
        else:
            S, AS, BS = [X, Wt, P], [AX, AW, AP], [BX, BW, BP]
            XAP, XBP = X.T @ AP, X.T @ BP
            WAP, WBP = Wt.T @ AP, Wt.T @ BP
            PAP, PBP = P.T @ AP, P.T @ BP
            GA = np.block([[np.diag(lam), XAW, XAP], [XAW.T, WAW, WAP], [XAP.T, WAP.T, PAP]])
            GB = np.block([[eye_m, XBW, XBP], [XBW.T, eye_w, WBP], [XBP.T, WBP.T, PBP]])
        # Rayleigh-Ritz in a B-orthonormal basis of span[X, W, P]; directions that became
        # linearly dependent (tiny eigenvalues of the Gram matrix) are dropped.
        gw, gv = np.linalg.eigh(GB)
        keep = gw > 1e-12 * gw.max()
        T = gv[:, keep] / np.sqrt(gw[keep])
        vals, Zr = np.linalg.eigh(T.T @ GA @ T)
        Z = T @ Zr
        Z = Z[:, :m]
        lam = vals[:m]
        sizes = [b.shape[1] for b in S]
        offs = np.cumsum([0] + sizes)
        Zs = [Z[offs[i] : offs[i + 1]] for i in range(len(S))]
        P = sum(tall_matmul(S[i], Zs[i]) for i in range(1, len(S)))
        AP = sum(tall_matmul(AS[i], Zs[i]) for i in range(1, len(S)))
        BP = sum(tall_matmul(BS[i], Zs[i]) for i in range(1, len(S)))
        X = tall_matmul(X, Zs[0]) + P
        if it % _RESYNC == 0:
            # Recompute the products and re-orthonormalise: the implicit updates drift and
            # LOBPCG stagnates when X loses B-orthonormality (Knyazev 2001, sec. 5).
            BX = B(X)
            X, BX = _b_orthonormalize(X, BX)
            AX = A(X)
            H = X.T @ AX
            lam, Zh = np.linalg.eigh((H + H.T) / 2)
            X, AX, BX = tall_matmul(X, Zh), tall_matmul(AX, Zh), tall_matmul(BX, Zh)
        else:
            AX = tall_matmul(AX, Zs[0]) + AP
            BX = tall_matmul(BX, Zs[0]) + BP
        del S, AS, BS, Wt, AW, BW
    return lam, X, res, it


def _compatible_relaxation(
    prob: MultiscaleProblem,
    s: int,
    target: np.ndarray,
    steps: int,
    dtype: type = np.float64,
) -> np.ndarray:
    """Place the prolonged vectors' transitions inside the blocks of level ``s``.

    With the block means ``C y = target`` held fixed, the coarse terms of the pencil are
    constant, so the within-block part of an eigenvector with a small eigenvalue minimises
    ``y^T L(G_s) y`` alone. Damped Jacobi steps on ``L(G_s)`` followed by restoring the block
    means solve that constrained problem; it is local (high-frequency) and converges in a few
    steps, moving each transition onto the weakest links of the level's own short-radius graph
    -- the image edges. This is compatible relaxation (Brandt, "General highly accurate
    algebraic coarsening", ETNA 10, 2000; Livne, Numer. Linear Algebra Appl. 11, 2004).
    ``target`` is the block of level ``s + 1`` (the block means to keep); it is prolonged
    here and the relaxed float64 block returned. With ``dtype=np.float32`` the steps run in
    single precision (half the memory traffic); the Rayleigh-Ritz step that follows is float64.
    """
    lev = prob._levels[s]
    G, grid = lev.G, lev.grid
    omega = _RELAX_OMEGA
    # Step: y <- (1 - w) y + J y with J = w (D - diag G)^-1 (G - diag G). J's values are
    # scaled in float64 (degrees span hundreds of orders of magnitude on flat images) and
    # stored in ``dtype``, a block of rows at a time so no nnz-sized float64 temporary is made.
    n = G.shape[0]
    diag = G.diagonal()
    off = prob._deg[s] - diag  # weight to the other nodes; 0 for an isolated node (no step)
    off = np.where(off > 0, off, 1.0)  # isolated nodes: their rows of G are zero anyway
    with np.errstate(over="ignore", divide="ignore"):
        scale = omega / off
    loops = bool(np.any(diag))  # Galerkin levels carry self-loops; level 0 has none
    # Row scaling by one multiplication when 1/off is finite; on flat synthetic images the
    # degrees can be denormal, and then the ratio is formed first (both may be tiny).
    direct = bool(np.all(np.isfinite(scale)))
    data = np.empty(G.nnz, dtype=dtype)
    indptr, indices = G.indptr, G.indices
    for r0 in range(0, n, 1 << 20):
        r1 = min(n, r0 + (1 << 20))
        a, b = int(indptr[r0]), int(indptr[r1])
        counts = np.diff(indptr[r0 : r1 + 1])
        if direct and not loops:
            np.multiply(G.data[a:b], np.repeat(scale[r0:r1], counts), out=data[a:b])
            continue
        rows = np.repeat(np.arange(r0, r1, dtype=indices.dtype), counts)
        part = G.data[a:b] / off[rows]  # ratio first: both may be denormal on flat images
        part *= omega
        part[indices[a:b] == rows] = 0.0  # self-loops (Galerkin levels) take no part
        data[a:b] = part
    J = sp.csr_matrix((data, indices, indptr), shape=G.shape)
    del data
    target = target.astype(dtype, copy=False)
    Y = grid.expand(target)  # prolonged straight into ``dtype``: no float64 full-size block
    for _ in range(steps):
        Y_new = J @ Y
        Y *= 1.0 - omega  # in place: full-size temporaries cost page faults at megapixels
        Y_new += Y
        Y = Y_new
        grid.add_expanded(Y, target - grid.average(Y))
    return Y.astype(np.float64, copy=False)


def _relaxed_levels(shapes: list, relax_levels: int | str) -> int:
    """Number of finest levels refined by compatible relaxation (the coarsest never is)."""
    n_coarse = len(shapes) - 1
    if relax_levels == "auto":
        big = [h * w > RELAX_MIN_PIXELS for h, w in shapes[:n_coarse]]
        return int(sum(big))
    if isinstance(relax_levels, bool) or not isinstance(relax_levels, int | np.integer):
        raise ValueError(f"relax_levels must be 'auto' or an integer >= 0, got {relax_levels!r}")
    if relax_levels < 0:
        raise ValueError(f"relax_levels must be 'auto' or an integer >= 0, got {relax_levels!r}")
    return int(min(relax_levels, n_coarse))


def _fix_signs(Y: np.ndarray) -> np.ndarray:
    idx = np.argmax(np.abs(Y), axis=0)
    signs = np.sign(Y[idx, np.arange(Y.shape[1])])
    signs[signs == 0] = 1.0
    return Y * signs


def multiscale_eigenpairs(
    image,
    k: int,
    *,
    levels: int | str = "auto",
    radius_fine: float = 1.5,
    radius_coarse: float = 5.0,
    cue: str = "combined",
    sigma_feature: float | None = None,
    sigma_edge: float | None = None,
    tol: float = 1e-5,
    maxiter: int | None = None,
    level_maxiter: int = 15,
    level_tol: float = 1e-4,
    seed=None,
    coarsest_pixels: int = _COARSEST_PIXELS,
    preconditioner: str = "vcycle",
    problem: MultiscaleProblem | None = None,
    relax_levels: int | str = "auto",
    relax_steps: int = _RELAX_STEPS,
) -> Eigenpairs:
    """Smallest eigenpairs of the multiscale normalized-cut pencil at full resolution.

    Parameters
    ----------
    image : array_like or Features
        ``(H, W)`` or ``(H, W, C)`` image, or its features (no mask).
    k : int
        Eigenpairs wanted (>= 1), the constant vector (eigenvalue 0) included.
    levels, radius_fine, radius_coarse, cue, sigma_feature, sigma_edge, coarsest_pixels
        Graph hierarchy, see :func:`multiscale_problem`.
    tol : float, default 1e-5
        Residual tolerance on the full-resolution pencil (see Returns).
    maxiter : int, optional
        LOBPCG iterations allowed on the full-resolution level (default 60).
    level_maxiter : int, default 15
        LOBPCG iterations on each intermediate level refined by LOBPCG (they improve the
        start of the finer levels; see ``relax_levels``). The finest such level, which
        costs four times the next coarser one, gets half (rounded up).
    level_tol : float, default 1e-4
        Residual at which an intermediate level stops early (``min(tol, level_tol)``). The
        coarse levels decide the regions, so they are converged harder than the
        full-resolution tolerance of the segmentation path asks (docs/multiscale.md).
    seed : None, int or numpy.random.Generator
        Seeds the coarsest eigensolve.
    preconditioner : {"vcycle", "jacobi"}, default "vcycle"
        LOBPCG preconditioner: one multigrid V-cycle for ``A + 0.01 B`` on the level
        hierarchy (l1-Jacobi smoothing, further aggregates below the coarsest level and a
        dense Cholesky solve at the bottom), or l1-Jacobi alone.
    problem : MultiscaleProblem, optional
        A prebuilt problem from :func:`multiscale_problem`; ``image`` is then ignored
        (pass None).
    relax_levels : int or "auto", default "auto"
        Number of finest levels refined by compatible relaxation (``relax_steps`` damped
        Jacobi steps with the block means held, then one Rayleigh-Ritz step) instead of
        LOBPCG. "auto": every level with more than ``RELAX_MIN_PIXELS`` (100 000) pixels.
        On the full-resolution level LOBPCG still follows when the Ritz residuals miss
        ``tol`` and ``maxiter > 0``.
    relax_steps : int, default 8
        Jacobi steps of the compatible relaxation that starts every level (the LOBPCG
        levels too: it is a better start than the piecewise-constant prolongation).

    Returns
    -------
    Eigenpairs
        ``values`` ascending; ``vectors`` (H*W, k) with ``y^T B y = 1``, signs fixed;
        ``residuals`` ``||D^-1/2 (A y - lambda B y)|| / ||D^1/2 y||`` with ``D = diag(B)``,
        which is the contract's ``||L v - lambda v|| / ||v||`` when ``B`` is diagonal;
        ``solver="multiscale"``; ``info`` holds the level shapes, the coarse eigenvalues
        (upper bounds of the fine ones), per-level iterations and residuals.

    Raises
    ------
    ValueError
        Bad options.

    Warns
    -----
    EigenConvergenceWarning
        When a full-resolution residual stays above ``tol``.

    Notes
    -----
    The pencil ``(A, B)`` is the normalized cut of the multiscale graph of Cour, Bénézit &
    Shi (2005) with its cross-scale averaging constraints eliminated (module docstring).
    ``A 1 = 0``, so the constant is the eigenvector of eigenvalue 0 and is deflated exactly.
    For ``s > 0`` the level-``s`` pencil is the Galerkin projection ``P^T A P, P^T B P``
    onto functions constant on the level's blocks, so by the Courant–Fischer min-max
    theorem its eigenvalues are upper bounds of the full-resolution ones
    (Rayleigh–Ritz; Parlett, *The Symmetric Eigenvalue Problem*, 1998, thm 11.4.1 / Cauchy
    interlacing). The coarsest pencil has diagonal ``B`` and is solved by
    :func:`imgcut.spectral.laplacian_eigenpairs`; its vectors are prolonged one level at a
    time (nested iteration), placed inside the blocks by compatible relaxation, and on
    levels of at most ``RELAX_MIN_PIXELS`` refined with block LOBPCG (Knyazev 2001, one
    guard vector) preconditioned by a multigrid V-cycle.

    References
    ----------
    T. Cour, F. Bénézit, J. Shi, "Spectral segmentation with multiscale graph
    decomposition", CVPR 2005.
    A. V. Knyazev, "Toward the optimal preconditioned eigensolver: LOBPCG", SIAM J. Sci.
    Comput. 23(2), 2001.
    J. Shi, J. Malik, "Normalized cuts and image segmentation", IEEE TPAMI 22(8), 2000.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((64, 64))
    >>> img[:, 32:] = 1.0
    >>> ep = multiscale_eigenpairs(img, 2, levels=3, seed=0)
    >>> ep.vectors.shape, bool(ep.converged)
    ((4096, 2), True)
    >>> y = ep.vectors[:, 1].reshape(64, 64)
    >>> bool(np.all(np.sign(y[:, :32]) == -np.sign(y[:, 32:])))
    True
    """
    t_start = time.perf_counter()
    if isinstance(k, bool) or not isinstance(k, int | np.integer) or k < 1:
        raise ValueError(f"k must be a positive integer; got {k!r}")
    if not (isinstance(tol, int | float | np.floating) and np.isfinite(tol) and tol > 0):
        raise ValueError(f"tol must be a positive finite number; got {tol!r}")
    if maxiter is not None and (
        isinstance(maxiter, bool) or not isinstance(maxiter, int | np.integer) or maxiter < 0
    ):
        raise ValueError(f"maxiter must be None or a positive integer; got {maxiter!r}")
    for name, v in (("level_maxiter", level_maxiter), ("relax_steps", relax_steps)):
        if isinstance(v, bool) or not isinstance(v, int | np.integer) or v < 0:
            raise ValueError(f"{name} must be an integer >= 0; got {v!r}")
    if not (isinstance(level_tol, int | float | np.floating) and level_tol > 0):
        raise ValueError(f"level_tol must be a positive number; got {level_tol!r}")
    if preconditioner not in _PRECONDITIONERS:
        raise ValueError(
            f"unknown preconditioner {preconditioner!r}; valid: {', '.join(_PRECONDITIONERS)}"
        )
    rng = np.random.default_rng(seed)
    if problem is None:
        problem = multiscale_problem(
            image,
            levels=levels,
            radius_fine=radius_fine,
            radius_coarse=radius_coarse,
            cue=cue,
            sigma_feature=sigma_feature,
            sigma_edge=sigma_edge,
            coarsest_pixels=coarsest_pixels,
        )
    timings = dict(problem.timings)
    S = problem.n_levels - 1
    n0 = problem.shapes[0][0] * problem.shapes[0][1]
    k = int(min(k, n0))
    info: dict = {"shapes": [list(s) for s in problem.shapes], "radii": list(problem.radii)}

    t0 = time.perf_counter()
    Gs = problem._levels[S].G
    nS = Gs.shape[0]
    # the coarsest vectors are refined on every finer level: level_tol is enough there
    k_coarse, tol_coarse = min(k + _GUARD, nS), min(tol, level_tol)
    # LAPACK up to 1000 nodes, Lanczos above (10x faster than LAPACK on 2 500-node photo
    # levels). Near one-dimensional levels (a 3 x 200 000 strip) have eigenvalues so clustered
    # that Lanczos crawls, so it gets a restart budget and LAPACK takes over when it runs out.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EigenConvergenceWarning)
        coarse = laplacian_eigenpairs(
            Gs, k_coarse, solver="auto", tol=tol_coarse, seed=rng, maxiter=_COARSE_RESTARTS
        )
    if not coarse.converged and nS <= DENSE_MAX_NODES:
        coarse = laplacian_eigenpairs(Gs, k_coarse, solver="dense", tol=tol_coarse, seed=rng)
    timings["coarse_solve"] = time.perf_counter() - t0
    info["coarse_values"] = coarse.values.tolist()
    if S == 0:
        timings["total"] = time.perf_counter() - t_start
        return Eigenpairs(  # without the guard pairs
            values=coarse.values[:k],
            vectors=coarse.vectors[:, :k],
            residuals=coarse.residuals[:k],
            solver=f"single-scale ({coarse.solver})",
            iterations=coarse.iterations,
            n_components=coarse.n_components,
            component_labels=coarse.component_labels,
            tol=float(tol),
            converged=bool(np.all(coarse.residuals[:k] <= tol_coarse)),
            timings=timings,
            info=info,
        )
    n_comp, _ = csgraph.connected_components(Gs, directed=False)
    # Non-trivial vectors: drop the constant (eigenvalue 0) of a connected coarse graph.
    Y = coarse.vectors[:, 1:] if n_comp == 1 else coarse.vectors
    m = k - 1 if n_comp == 1 else k
    if Y.shape[1] < m:  # coarse grid smaller than k: fill with random columns
        Y = np.hstack([Y, rng.standard_normal((nS, m - Y.shape[1]))])
    n_relax = _relaxed_levels(problem.shapes, relax_levels)
    # Single-precision relaxation under the same rule as the Lanczos products (spectral.py).
    relax_dtype = np.float32 if tol >= FLOAT32_MIN_TOL else np.float64
    info["relaxed_levels"] = n_relax
    timings["precond_setup"] = 0.0
    vcycle: list = []  # built on first use: levels refined by relaxation alone never need it

    def precond(level: int, r: np.ndarray) -> np.ndarray:
        if not vcycle:
            t_setup = time.perf_counter()
            vcycle.append(_VCycle(problem, _PRECOND_SHIFT))
            timings["precond_setup"] += time.perf_counter() - t_setup
        return vcycle[0](level, r)

    if preconditioner != "vcycle":
        precond = None  # noqa: F811 (l1-Jacobi inside _refine)
    t0 = time.perf_counter()
    iters = []
    level_res = []
    X = Y
    lam, res = np.zeros(0), np.zeros(0)
    for s in range(S - 1, -1, -1) if m > 0 else ():
        final = s == 0
        # Every level starts from the relaxed prolongation (on LOBPCG levels too: a better
        # start than the piecewise-constant one, at the cost of a few sparse products).
        X = _compatible_relaxation(problem, s, X, relax_steps, relax_dtype)
        if s < n_relax and not final:
            # Rayleigh-Ritz only: B-orthonormal Ritz vectors of the relaxed block.
            lam, X, res = _rayleigh_ritz(problem, s, X, m)
            iters.append(0)
            level_res.append(float(res.max()) if res.size else 0.0)
            continue
        if final:
            it_max = maxiter if maxiter is not None else 60
        elif s == n_relax:  # the finest LOBPCG level costs 4x the next: half the cap
            it_max = (level_maxiter + 1) // 2
        else:
            it_max = level_maxiter
        it = 0
        if s < n_relax:  # final level after relaxation: LOBPCG only if the Ritz pairs miss tol
            lam, X, res = _rayleigh_ritz(problem, s, X, m)
            if np.all(res <= tol) or it_max == 0:
                iters.append(0)
                level_res.append(float(res.max()) if res.size else 0.0)
                continue
        level_tol_s = tol if final else min(tol, level_tol)
        lam, X, res, it = _refine(problem, s, X, level_tol_s, it_max, precond, n_wanted=m)
        iters.append(it)
        level_res.append(float(res.max()) if res.size else 0.0)
    timings["refine"] = time.perf_counter() - t0
    lam, X = lam[:m], (X[:, :m] if m > 0 else np.zeros((n0, 0)))
    info["level_iterations"] = iters[::-1]
    info["level_max_residual"] = level_res[::-1]

    if m < k:  # prepend the constant vector, B-normalised
        one = np.ones((n0, 1))
        b = float(problem.apply(0, one, mass=True)[:, 0].sum())
        X = np.hstack([one / math.sqrt(b), X])
        lam = np.concatenate([[0.0], lam])
        res = np.concatenate([[0.0], res])
    order = np.argsort(lam, kind="stable")
    lam, X, res = lam[order], X[:, order], res[order]
    X = _fix_signs(X)
    converged = bool(np.all(res <= tol))
    if not converged:
        warnings.warn(
            f"{int((res > tol).sum())} of {k} multiscale eigenpairs have residuals above "
            f"tol={tol:g} (largest {res.max():.2e}) after {iters[-1] if iters else 0} "
            "full-resolution LOBPCG "
            "iterations; raise maxiter, loosen tol, or add a level",
            EigenConvergenceWarning,
            stacklevel=2,
        )
    timings["total"] = time.perf_counter() - t_start
    return Eigenpairs(
        values=np.asarray(lam, dtype=np.float64),
        vectors=X,
        residuals=np.asarray(res, dtype=np.float64),
        solver="multiscale",
        iterations=int(sum(iters)),
        n_components=int(n_comp),
        component_labels=np.zeros(n0, dtype=np.int64),
        tol=float(tol),
        converged=converged,
        timings=timings,
        info=info,
    )
