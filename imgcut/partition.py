"""Partition a graph from Laplacian eigenvectors: sweep cuts, recursive and k-way normalized cuts.

Three ways of turning eigenvectors of ``(D - W) y = lambda D y`` into node labels:

* :func:`sweep_cut` -- the best two-way cut among all thresholds of one eigenvector,
  with the normalized-cut value and the conductance of every threshold.
* :func:`recursive_ncut` -- recursive two-way normalized cuts (Shi & Malik 2000, section 3.1),
  re-solving the eigenproblem on every region's subgraph; returns a :class:`Hierarchy`.
* :func:`kway_ncut` -- a simultaneous k-way partition from k eigenvectors by the multiclass
  discretisation of Yu & Shi (2003) (:func:`discretize`) or by k-means.

Node labels follow the project convention: int32, regions ``1..K`` numbered in order of their
first node (raster order for image graphs).
"""

from __future__ import annotations

import heapq
import math
import time
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from imgcut._linalg import tall_matmul

__all__ = [
    "sweep_cut",
    "SweepCut",
    "SplitRecord",
    "Hierarchy",
    "recursive_ncut",
    "kway_ncut",
    "discretize",
]

_KWAY_METHODS = ("discretize", "kmeans")
#: Above this many nodes :func:`discretize` fits its rotation on this many sampled rows
#: (a choice of this project: it keeps every BSDS-sized image, 154 401 pixels, exact).
DISCRETIZE_SAMPLE = 250_000

SeedLike = None | int | np.random.Generator


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------


def _as_csr(W: Any, name: str = "W") -> sp.csr_matrix:
    """Return ``W`` as a square float64 CSR matrix, or raise ``ValueError``."""
    if not sp.issparse(W):
        arr = np.asarray(W)
        if arr.ndim != 2:
            raise ValueError(f"{name} must be a square (n, n) matrix, got shape {arr.shape}")
        W = sp.csr_matrix(arr)
    if W.ndim != 2 or W.shape[0] != W.shape[1]:
        raise ValueError(f"{name} must be a square (n, n) matrix, got shape {W.shape}")
    W = sp.csr_matrix(W, dtype=np.float64)
    if W.nnz and (not np.all(np.isfinite(W.data)) or W.data.min() < 0):
        raise ValueError(f"{name} must have finite, non-negative weights")
    return W


def _degrees(W: sp.csr_matrix) -> np.ndarray:
    return np.asarray(W.sum(axis=1), dtype=np.float64).ravel()


def _first_occurrence_labels(labels: np.ndarray) -> np.ndarray:
    """Renumber integer labels to ``1..K`` in order of their first occurrence."""
    labels = np.asarray(labels).ravel()
    if labels.size == 0:
        return labels.astype(np.int32)
    if labels.dtype.kind in "iu" and labels.min() >= 0 and labels.max() < 64:
        # few small labels (a k-way argmax): one pass per label instead of a sort of all n
        present = np.flatnonzero(np.bincount(labels))
        first = np.array([int(np.argmax(labels == j)) for j in present])
        rank = np.zeros(int(present[-1]) + 1, dtype=np.int32)
        rank[present[np.argsort(first, kind="stable")]] = np.arange(
            1, present.size + 1, dtype=np.int32
        )
        return rank[labels]
    uniq, first, inverse = np.unique(labels, return_index=True, return_inverse=True)
    rank = np.empty(uniq.size, dtype=np.int32)
    rank[np.argsort(first, kind="stable")] = np.arange(1, uniq.size + 1, dtype=np.int32)
    return rank[inverse.ravel()]


def _safe_ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """``num / den`` with ``0 / 0 = 0`` (an empty cut costs nothing)."""
    out = np.zeros(np.broadcast(num, den).shape, dtype=np.float64)
    np.divide(num, den, out=out, where=den > 0)
    return out


# --------------------------------------------------------------------------------------------
# sweep cut
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SweepCut:
    """The best threshold cut of one eigenvector, and the cost of every threshold.

    Attributes
    ----------
    mask : ndarray of bool, shape (n,)
        Side A of the chosen cut: the nodes with the ``size_a`` smallest entries of ``y``.
    ncut : float
        Normalized-cut value of the chosen cut, ``cut/vol(A) + cut/vol(B)``.
    conductance : float
        Conductance of the chosen cut, ``cut / min(vol(A), vol(B))``.
    threshold : float
        A value between the largest ``y`` in A and the smallest ``y`` in B (their midpoint).
    size_a : int
        Number of nodes in A.
    cut, vol_a, vol_b : float
        Weight of the cut edges and the volumes (degree sums) of both sides.
    min_conductance : float
        Smallest conductance over all ``n - 1`` prefix sets of the sorted ``y`` (the quantity
        bounded by Cheeger's inequality; not necessarily the chosen cut's).
    ncut_values, conductance_values : ndarray, shape (n - 1,)
        Ncut and conductance of the prefix set of size ``t + 1`` at index ``t``.
    valid : ndarray of bool, shape (n - 1,)
        Which prefixes were eligible (a strict threshold of ``y`` and ``min_size`` on both sides).
    order : ndarray of int64, shape (n,)
        The stable ``argsort`` of ``y``: the prefix of size ``t + 1`` is ``order[:t + 1]``.
    """

    mask: np.ndarray
    ncut: float
    conductance: float
    threshold: float
    size_a: int
    cut: float
    vol_a: float
    vol_b: float
    min_conductance: float
    ncut_values: np.ndarray = field(repr=False)
    conductance_values: np.ndarray = field(repr=False)
    valid: np.ndarray = field(repr=False)
    order: np.ndarray = field(repr=False)


def sweep_cut(
    W: sp.spmatrix | np.ndarray,
    y: np.ndarray,
    *,
    degrees: np.ndarray | None = None,
    min_size: int = 1,
) -> SweepCut:
    """Best normalized cut among all thresholds of a vector, in O(m + n log n).

    Parameters
    ----------
    W : sparse matrix or ndarray, shape (n, n)
        Symmetric non-negative affinity matrix (the diagonal is ignored).
    y : ndarray, shape (n,)
        The vector to threshold, usually the second generalised eigenvector of
        ``(D - W) y = lambda D y``.
    degrees : ndarray, shape (n,), optional
        Node degrees ``d_i = sum_j W_ij``; computed from ``W`` when omitted.
    min_size : int, default 1
        Smallest number of nodes allowed on either side of the cut.

    Returns
    -------
    SweepCut
        The cut with the smallest Ncut value; ties go to the smallest side A (the first
        threshold in ascending ``y``), so the result is deterministic.

    Raises
    ------
    ValueError
        If shapes disagree, ``y`` is not finite, ``n < 2``, or no threshold leaves
        ``min_size`` nodes on both sides.

    Notes
    -----
    Sort the nodes by ``y`` (stable, so ties are broken by node index) and let ``A_t`` be the
    first ``t + 1`` nodes. ``vol(A_t)`` is a cumulative sum of the sorted degrees. When node
    ``v`` moves from B to A the cut gains ``v``'s edges to nodes later in the order and loses
    its edges to earlier ones, ``delta_v = w(v, later) - w(v, earlier)`` (equivalently
    ``d_v - 2 w(v, A)``); one vectorised pass over the CSR entries (the sign of the rank
    difference of each edge's ends, summed per row) gives every ``delta_v``, and their
    cumulative sum in sweep order is ``cut(A_t)`` for all ``t``: O(m) after the O(n log n)
    sort. Then

    ``Ncut(A, B) = cut(A, B) / vol(A) + cut(A, B) / vol(B)``  (Shi & Malik 2000, eq. (2))

    ``phi(A) = cut(A, B) / min(vol(A), vol(B))``  (conductance, Chung 1997, ch. 2)

    with ``0 / 0 = 0``. Prefixes that split equal values of ``y`` are not thresholds and are
    skipped, unless no strict threshold satisfies ``min_size`` (then ties are broken by node
    index). For the second eigenvector the best prefix conductance obeys Cheeger's
    inequality ``lambda_2 / 2 <= phi* <= min_t phi(A_t) <= sqrt(2 lambda_2)`` (Chung 1997,
    Theorem 2.2 and its sweep proof).

    References
    ----------
    J. Shi and J. Malik, "Normalized cuts and image segmentation", IEEE TPAMI 22(8), 2000.
    F. R. K. Chung, *Spectral Graph Theory*, AMS, 1997.

    Examples
    --------
    Two triangles joined by one weak edge are cut at that edge:

    >>> import numpy as np, scipy.sparse as sp
    >>> edges = [(0, 1), (1, 2), (0, 2), (3, 4), (4, 5), (3, 5)]
    >>> rows, cols = zip(*edges)
    >>> A = sp.coo_matrix((np.ones(6), (rows, cols)), shape=(6, 6))
    >>> A = A + sp.coo_matrix(([0.1], ([2], [3])), shape=(6, 6))
    >>> W = (A + A.T).tocsr()
    >>> res = sweep_cut(W, np.array([-1.0, -0.9, -0.5, 0.5, 0.9, 1.0]))
    >>> res.mask.astype(int).tolist(), round(res.ncut, 4)
    ([1, 1, 1, 0, 0, 0], 0.0328)
    """
    W = _as_csr(W)
    n = W.shape[0]
    y = np.asarray(y, dtype=np.float64).ravel()
    if y.shape != (n,):
        raise ValueError(f"y must have shape ({n},) to match W, got {y.shape}")
    if not np.all(np.isfinite(y)):
        raise ValueError("y must be finite (no NaN or inf)")
    if n < 2:
        raise ValueError(f"a cut needs at least 2 nodes, got {n}")
    min_size = int(min_size)
    if min_size < 1:
        raise ValueError(f"min_size must be >= 1, got {min_size}")
    if degrees is None:
        d = _degrees(W)
    else:
        d = np.asarray(degrees, dtype=np.float64).ravel()
        if d.shape != (n,):
            raise ValueError(f"degrees must have shape ({n},), got {d.shape}")

    order = np.argsort(y, kind="stable")
    cut = _prefix_cuts(W, order)
    return _sweep_from_cuts(cut, d, y, order, min_size)


def _row_sums(values: np.ndarray, indptr: np.ndarray) -> np.ndarray:
    """Exact per-row sums of CSR-aligned ``values`` (empty rows give 0)."""
    n = indptr.size - 1
    out = np.zeros(n, dtype=np.float64)
    nonempty = indptr[1:] > indptr[:-1]
    if values.size:
        out[nonempty] = np.add.reduceat(values, indptr[:-1][nonempty])
    return out


def _prefix_cuts(W: sp.csr_matrix, order: np.ndarray) -> np.ndarray:
    """``cut(A_t)`` for the prefix sets ``A_t = order[:t + 1]``, ``t = 0..n-2``, in O(m).

    When node ``v`` joins the prefix, the cut gains its edges to later nodes and loses its
    edges to earlier ones: ``delta_v = w(v, later) - w(v, earlier)``; the cut of every prefix
    is the cumulative sum of these in sweep order (the diagonal is never counted).
    """
    n = W.shape[0]
    rank = np.empty(n, dtype=np.int32 if n < 2**31 else np.int64)
    rank[order] = np.arange(n, dtype=rank.dtype)
    step = rank[W.indices]
    step -= np.repeat(rank, np.diff(W.indptr))
    np.sign(step, out=step)  # +1: edge to a later node, -1: to an earlier one, 0: diagonal
    delta = _row_sums(W.data * step, W.indptr)
    return np.maximum(np.cumsum(delta[order])[: n - 1], 0.0)  # clip round-off below zero


def _sweep_from_cuts(
    cut: np.ndarray, d: np.ndarray, y: np.ndarray, order: np.ndarray, min_size: int
) -> SweepCut:
    n = y.size
    d_sorted = d[order]
    vol_a = np.cumsum(d_sorted)[: n - 1]
    vol_b = np.cumsum(d_sorted[::-1])[::-1][1:]  # summed from the other end: no cancellation
    ncut_values = _safe_ratio(cut, vol_a) + _safe_ratio(cut, vol_b)  # Shi & Malik 2000, eq. (2)
    conductance_values = _safe_ratio(cut, np.minimum(vol_a, vol_b))  # Chung 1997, ch. 2

    sizes = np.arange(1, n, dtype=np.int64)
    size_ok = (sizes >= min_size) & (n - sizes >= min_size)
    y_sorted = y[order]
    valid = size_ok & (y_sorted[1:] > y_sorted[:-1])
    if not valid.any():
        valid = size_ok  # y constant or tied at every eligible place: break ties by node index
    if not valid.any():
        raise ValueError(
            f"no cut leaves min_size={min_size} nodes on both sides of a {n}-node graph"
        )
    t = int(np.argmin(np.where(valid, ncut_values, np.inf)))  # first minimum: deterministic
    mask = np.zeros(n, dtype=bool)
    mask[order[: t + 1]] = True
    return SweepCut(
        mask=mask,
        ncut=float(ncut_values[t]),
        conductance=float(conductance_values[t]),
        threshold=float(0.5 * (y_sorted[t] + y_sorted[t + 1])),
        size_a=t + 1,
        cut=float(cut[t]),
        vol_a=float(vol_a[t]),
        vol_b=float(vol_b[t]),
        min_conductance=float(conductance_values.min()),
        ncut_values=ncut_values,
        conductance_values=conductance_values,
        valid=valid,
        order=order,
    )


# --------------------------------------------------------------------------------------------
# recursive two-way normalized cut
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SplitRecord:
    """One two-way split of a recursive normalized cut.

    Attributes
    ----------
    index : int
        Position in the split order (0 = first split); after it there are ``index + 2`` regions.
    parent : int
        Tree id of the region that was split (the root is 0).
    children : tuple of int
        Tree ids of the two new regions, ``(2 * index + 1, 2 * index + 2)``; the first one holds
        the parent's lowest-numbered node.
    sizes : tuple of int
        Node counts of the two children.
    ncut : float
        Normalized-cut value of the split on the parent's subgraph (0 for a split between
        connected components).
    conductance : float
        Conductance ``cut / min(vol)`` of the split.
    lambda2 : float
        Second smallest eigenvalue of the normalized Laplacian of the graph that was cut: the
        parent region, or its one large component when the rest is dust (0 for a split
        between components).
    cheeger_lower, cheeger_upper : float
        Cheeger interval ``lambda2 / 2 <= phi* <= sqrt(2 lambda2)`` for the parent's
        optimal conductance ``phi*`` (Chung 1997, Theorem 2.2).
    sweep_conductance : float
        Best conductance over the whole sweep of the eigenvector (0 for components).
    cheeger_holds : bool
        Whether ``sweep_conductance <= cheeger_upper`` held (it must, up to the eigenvector's
        residual; False flags an inaccurate eigenvector).
    kind : str
        ``"components"`` (free split of a disconnected region) or ``"sweep"``.
    residual : float
        Relative residual of the eigenvector that was swept (0 for components).
    """

    index: int
    parent: int
    children: tuple[int, int]
    sizes: tuple[int, int]
    ncut: float
    conductance: float
    lambda2: float
    cheeger_lower: float
    cheeger_upper: float
    sweep_conductance: float
    cheeger_holds: bool
    kind: str
    residual: float

    def to_dict(self) -> dict[str, Any]:
        """Plain-Python dict (JSON-serialisable; no numpy types)."""
        out = asdict(self)
        out["children"] = [int(c) for c in self.children]
        out["sizes"] = [int(s) for s in self.sizes]
        for key in (
            "ncut",
            "conductance",
            "lambda2",
            "cheeger_lower",
            "cheeger_upper",
            "sweep_conductance",
            "residual",
        ):
            out[key] = float(out[key])
        for key in ("index", "parent"):
            out[key] = int(out[key])
        out["cheeger_holds"] = bool(out["cheeger_holds"])
        return out


@dataclass(frozen=True)
class Hierarchy:
    """Result of :func:`recursive_ncut`: the ordered splits and the labels at every level.

    Attributes
    ----------
    leaf_ids : ndarray of int64, shape (n,)
        Tree id of each node's final region (root 0, split ``i`` makes ``2i+1`` and ``2i+2``).
    splits : list of SplitRecord
        The splits in the order they were made (cheapest first, as chosen greedily).
    root_eigenvalues, root_residuals : ndarray
        The eigenpairs solved on the whole graph (empty if none were needed).
    solves : list of dict
        One entry per eigenproblem solved on a region (nodes, nnz, k, warm_start, solver,
        iterations, max_residual, seconds), in the order solved.
    seconds : float
        Wall time of :func:`recursive_ncut`, eigensolves included.

    Notes
    -----
    ``labels_at(m)`` undoes the splits after the ``m - 1``-th without recomputing anything.
    """

    leaf_ids: np.ndarray = field(repr=False)
    splits: list[SplitRecord]
    root_eigenvalues: np.ndarray = field(repr=False)
    root_residuals: np.ndarray = field(repr=False)
    solves: list[dict[str, Any]] = field(default_factory=list, repr=False)
    seconds: float = 0.0

    @property
    def n_eigensolves(self) -> int:
        """Number of eigenproblems solved (the precomputed root solve not included)."""
        return len(self.solves)

    @property
    def n_regions(self) -> int:
        """Number of regions after the last split."""
        return len(self.splits) + 1

    @property
    def labels(self) -> np.ndarray:
        """Final node labels, int32 ``1..K`` in order of first node."""
        return self.labels_at(self.n_regions)

    def labels_at(self, n_regions: int) -> np.ndarray:
        """Node labels after the first ``n_regions - 1`` splits.

        Parameters
        ----------
        n_regions : int
            A level ``1 <= n_regions <= self.n_regions``.

        Returns
        -------
        ndarray of int32, shape (n,)
            Labels ``1..n_regions`` numbered in order of their first node.

        Raises
        ------
        ValueError
            If ``n_regions`` is outside ``1..self.n_regions``.
        """
        n_regions = int(n_regions)
        if not 1 <= n_regions <= self.n_regions:
            raise ValueError(f"n_regions must be in 1..{self.n_regions}, got {n_regions}")
        n_tree = 2 * len(self.splits) + 1
        parent = np.zeros(n_tree, dtype=np.int64)
        for rec in self.splits:
            parent[list(rec.children)] = rec.parent
        # Nodes created by splits 0..n_regions-2 have ids <= 2 * n_regions - 2; anything newer
        # climbs to its ancestor. Parents always have smaller ids, so one ascending pass works.
        ancestor = np.arange(n_tree, dtype=np.int64)
        last = 2 * n_regions - 2
        for node in range(last + 1, n_tree):  # loop over tree nodes (<= 2K), not pixels
            ancestor[node] = ancestor[parent[node]]
        return _first_occurrence_labels(ancestor[self.leaf_ids])


@dataclass
class _Candidate:
    ncut: float
    tree_id: int
    idx: np.ndarray  # node indices of the region (ascending)
    mask: np.ndarray  # side A within idx
    conductance: float
    lambda2: float
    sweep_conductance: float
    kind: str
    residual: float
    vectors: np.ndarray | None  # eigenvectors of the region (for warm starts)
    comp: np.ndarray | None = None  # component labels of the region minus the cut edges
    graph: sp.csr_matrix | None = None  # the region's graph minus the cut edges


def recursive_ncut(
    W: sp.spmatrix,
    *,
    n_regions: int,
    max_ncut: float | None = None,
    min_size: int = 1,
    solver: str = "auto",
    tol: float = 1e-5,
    maxiter: int | None = None,
    seed: SeedLike = None,
    eigenpairs: Any = None,
    n_eigenvectors: int = 3,
    aggregates: Any = None,
) -> Hierarchy:
    """Recursive two-way normalized cut (Shi & Malik 2000, section 3.1).

    Parameters
    ----------
    W : sparse matrix, shape (n, n)
        Symmetric non-negative affinity matrix.
    n_regions : int
        Stop when this many regions exist.
    max_ncut : float, optional
        Only split a region whose best cut has ``Ncut < max_ncut``; ``None`` means no limit.
    min_size : int, default 1
        No split may leave fewer than ``min_size`` nodes on a side.
    solver, tol, maxiter :
        Passed to :func:`imgcut.spectral.laplacian_eigenpairs` for every subproblem.
    seed : None, int or numpy.random.Generator
        Seeds every eigensolve.
    eigenpairs : Eigenpairs, optional
        Eigenpairs already solved on the whole of ``W`` (at least 2); saves the first solve.
    n_eigenvectors : int, default 3
        Eigenpairs per subproblem (>= 2); a third one helps LOBPCG separate ``lambda_2``.
    aggregates : array_like of int, shape (n,), optional
        Coarse aggregates of the nodes for the ``"twolevel"`` eigensolver
        (:func:`imgcut.twolevel.tile_aggregates`); each subproblem gets its own nodes' part.

    Returns
    -------
    Hierarchy
        Splits in order, final labels and ``labels_at(m)`` for every level ``m``.

    Raises
    ------
    ValueError
        For ``n_regions < 1``, ``min_size < 1``, ``max_ncut <= 0`` or a non-square ``W``.

    Notes
    -----
    Every leaf region ``R`` gets one candidate split, computed when the region is created.
    Connected components of ``W[R][:, R]`` with at least ``min_size`` nodes are *real*,
    smaller ones are *dust* (they could never be regions of their own):

    1. With two or more real components, split the largest real component from the rest:
       ``cut = 0``, so ``Ncut = 0`` (a free split; dust stays with the rest).
    2. With one real component (plus dust), solve ``(D - W) y = lambda D y`` on it for the
       few smallest eigenpairs and take the best :func:`sweep_cut` of the second
       eigenvector (Shi & Malik 2000, section 3.1). The vector swept is the combination of
       the returned eigenvectors that is D-orthogonal to the constant vector with the
       smallest Rayleigh quotient, which is ``y_2`` itself unless the bottom of the spectrum
       is numerically degenerate. Among the thresholds, the cheapest one whose two sides
       each contain a connected piece of at least ``min_size`` nodes is taken (at most 8
       tried; a side made only of dust would be dissolved by the region clean-up). Dust
       joins the larger side. With no real component there is no candidate.

    A priority queue keyed by the candidate's Ncut value then repeatedly splits the region
    whose best cut is cheapest; ties go to the older region. The children's eigenproblems are
    warm-started from the parent's eigenvectors restricted to them (one column of the start
    block is left random), and their subgraphs are diagonal blocks of the parent's graph
    without the cut edges. The order of the splits is the hierarchy. Each split records the
    Cheeger interval ``lambda_2 / 2 <= phi* <= sqrt(2 lambda_2)`` of the graph it cut
    (Chung 1997, Theorem 2.2), and whether the sweep's best conductance respected the
    upper bound.

    References
    ----------
    J. Shi and J. Malik, "Normalized cuts and image segmentation", IEEE TPAMI 22(8), 2000.

    Examples
    --------
    Three cliques joined by weak edges split into three regions:

    >>> import numpy as np, scipy.sparse as sp
    >>> B = np.ones((4, 4)) - np.eye(4)
    >>> W = sp.block_diag([B, B, B]).tolil()
    >>> W[3, 4] = W[4, 3] = W[7, 8] = W[8, 7] = 0.05
    >>> h = recursive_ncut(W.tocsr(), n_regions=3, seed=0)
    >>> h.labels.tolist()
    [1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3]
    >>> h.labels_at(1).tolist() == [1] * 12
    True
    """
    from imgcut.spectral import laplacian_eigenpairs

    W = _as_csr(W)
    n = W.shape[0]
    n_regions = int(n_regions)
    if n_regions < 1:
        raise ValueError(f"n_regions must be >= 1, got {n_regions}")
    min_size = int(min_size)
    if min_size < 1:
        raise ValueError(f"min_size must be >= 1, got {min_size}")
    if max_ncut is not None and not max_ncut > 0:
        raise ValueError(f"max_ncut must be > 0 or None, got {max_ncut}")
    n_eigenvectors = int(n_eigenvectors)
    if n_eigenvectors < 2:
        raise ValueError(f"n_eigenvectors must be >= 2, got {n_eigenvectors}")
    limit = math.inf if max_ncut is None else float(max_ncut)
    rng = np.random.default_rng(seed)

    t_start = time.perf_counter()
    solves: list[dict[str, Any]] = []
    root = [np.zeros(0), np.zeros(0)]  # eigenvalues and residuals of the whole-graph solve

    if aggregates is not None:
        aggregates = np.asarray(aggregates)
        if aggregates.shape != (n,):
            raise ValueError(f"aggregates must have shape ({n},); got {aggregates.shape}")

    def solve(sub: sp.csr_matrix, x0: np.ndarray | None, nodes: np.ndarray):
        k = min(n_eigenvectors, sub.shape[0])
        if x0 is not None:
            # Leave one column of the block random: a block made only of the parent's
            # vectors can lack any component along the child's lambda_2 eigenvector.
            x0 = _warm_start(x0, max(1, k - 1), rng)
        t = time.perf_counter()
        agg = None if aggregates is None else aggregates[nodes]
        ep = laplacian_eigenpairs(
            sub, k, solver=solver, tol=tol, maxiter=maxiter, seed=rng, x0=x0, aggregates=agg
        )
        solves.append(
            {
                "nodes": int(sub.shape[0]),
                "nnz": int(sub.nnz),
                "k": int(k),
                "warm_start": x0 is not None,
                "solver": str(getattr(ep, "solver", solver)),
                "iterations": int(getattr(ep, "iterations", 0)),
                "max_residual": float(np.max(ep.residuals)) if len(ep.residuals) else 0.0,
                "seconds": time.perf_counter() - t,
            }
        )
        return ep

    def candidate(tree_id, idx, x0, ep=None, comp=None, sub=None) -> _Candidate | None:
        m = idx.size
        if m < 2 * min_size or m < 2:
            return None
        if sub is None:
            sub = W if m == n else W[idx][:, idx]
        if comp is None:
            comp = _components(sub)
        sizes = np.bincount(comp)
        core = None
        if np.count_nonzero(sizes) > 1:
            real = np.flatnonzero(sizes >= min_size)  # components that can be regions
            if real.size == 0:
                return None  # only dust: no split leaves a piece of min_size on both sides
            if real.size >= 2:
                # Free split (cut = 0): the largest real component against the rest; dust
                # (components < min_size) stays with the rest. Ties: the earliest component.
                big = int(real[np.argmax(sizes[real])])
                mask = comp == big
                vec = x0 if x0 is not None else (None if ep is None else ep.vectors)
                return _Candidate(
                    0.0, tree_id, idx, mask, 0.0, 0.0, 0.0, "components", 0.0, vec, comp, sub
                )
            # One real component plus dust: cut the real one; the dust (no edges to it, so
            # no change to the cut) joins the larger side below.
            core = np.flatnonzero(comp == real[0])
            sub = sub[core][:, core]
            if x0 is not None:
                x0 = x0[core]
            ep = None
        if ep is None:
            ep = solve(sub, x0, idx if core is None else idx[core])
        if tree_id == 0:
            root[:] = [np.asarray(ep.values, float), np.asarray(ep.residuals, float)]
        values = np.asarray(ep.values, dtype=np.float64)
        vectors = np.asarray(ep.vectors, dtype=np.float64)
        residuals = np.asarray(ep.residuals, dtype=np.float64)
        if vectors.shape[1] < 2:
            return None
        degrees = _row_sums(sub.data, sub.indptr)
        y2, lam2, res2 = _fiedler(vectors, values, residuals, degrees)
        order = np.argsort(y2, kind="stable")
        try:
            sw = _sweep_from_cuts(_prefix_cuts(sub, order), degrees, y2, order, min_size)
        except ValueError:
            return None
        solid = _solid_cut(sub, sw, min_size)
        if solid is None:
            return None
        t, mask, cut_comp, cut_graph = solid
        if core is not None:
            full = np.zeros(m, dtype=bool)
            full[core[mask]] = True
            if 2 * mask.sum() >= mask.size:
                full[np.setdiff1d(np.arange(m), core, assume_unique=True)] = True
            mask = full
            padded = np.zeros((m, vectors.shape[1]))
            padded[core] = vectors
            vectors = padded
            cut_comp = cut_graph = None  # the children find their own components
        return _Candidate(
            float(sw.ncut_values[t]),
            tree_id,
            idx,
            mask,
            float(sw.conductance_values[t]),
            lam2,
            sw.min_conductance,
            "sweep",
            res2,
            vectors,
            cut_comp,
            cut_graph,
        )

    root_idx = np.arange(n, dtype=np.int64)
    if eigenpairs is not None:
        shape = np.shape(eigenpairs.vectors)
        if len(shape) != 2 or shape[0] != n or shape[1] < 2:
            raise ValueError(
                f"eigenpairs.vectors must have shape ({n}, >= 2) to match W, got {shape}"
            )
    leaf_ids = np.zeros(n, dtype=np.int64)
    splits: list[SplitRecord] = []
    heap: list[tuple[float, int, _Candidate]] = []
    counter = 0
    if n_regions > 1:
        first = candidate(0, root_idx, None, eigenpairs)
        if first is not None:
            heapq.heappush(heap, (first.ncut, counter, first))
            counter += 1

    while heap and len(splits) + 1 < n_regions:
        ncut, _, cand = heapq.heappop(heap)
        if not ncut < limit:
            break
        mask = cand.mask
        if not mask[0]:
            mask = ~mask  # child A holds the region's lowest-numbered node
        s = len(splits)
        a_id, b_id = 2 * s + 1, 2 * s + 2
        idx_a, idx_b = cand.idx[mask], cand.idx[~mask]
        leaf_ids[idx_a] = a_id
        leaf_ids[idx_b] = b_id
        upper = math.sqrt(2.0 * cand.lambda2)
        splits.append(
            SplitRecord(
                index=s,
                parent=cand.tree_id,
                children=(a_id, b_id),
                sizes=(int(idx_a.size), int(idx_b.size)),
                ncut=float(cand.ncut),
                conductance=float(cand.conductance),
                lambda2=float(cand.lambda2),
                cheeger_lower=cand.lambda2 / 2.0,  # Chung 1997, Theorem 2.2 (lower bound)
                cheeger_upper=upper,  # Chung 1997, Theorem 2.2 (upper bound, sweep proof)
                sweep_conductance=float(cand.sweep_conductance),
                cheeger_holds=bool(cand.sweep_conductance <= upper * (1 + 1e-6) + 1e-12),
                kind=cand.kind,
                residual=float(cand.residual),
            )
        )
        if len(splits) + 1 >= n_regions:
            break
        for child_id, child_idx, child_mask in ((a_id, idx_a, mask), (b_id, idx_b, ~mask)):
            x0 = None if cand.vectors is None else cand.vectors[child_mask]
            child_comp = None if cand.comp is None else cand.comp[child_mask]
            # Without cut edges the region's graph is block diagonal: a child's subgraph is
            # its rows, renumbered (no column search).
            child_sub = None
            if cand.graph is not None:
                child_sub = _diagonal_block(cand.graph, np.flatnonzero(child_mask))
            c = candidate(child_id, child_idx, x0, comp=child_comp, sub=child_sub)
            if c is not None:
                heapq.heappush(heap, (c.ncut, counter, c))
                counter += 1

    return Hierarchy(
        leaf_ids=leaf_ids,
        splits=splits,
        root_eigenvalues=root[0],
        root_residuals=root[1],
        solves=solves,
        seconds=time.perf_counter() - t_start,
    )


def _fiedler(
    vectors: np.ndarray, values: np.ndarray, residuals: np.ndarray, degrees: np.ndarray
) -> tuple[np.ndarray, float, float]:
    """The second eigenvector, made D-orthogonal to the constant vector.

    On a connected graph the smallest eigenvector of ``(D - W) y = lambda D y`` is constant
    and the second one is D-orthogonal to it (Shi & Malik 2000, section 2: ``y^T D 1 = 0``).
    When the bottom of the spectrum is (numerically) degenerate -- two nearly separate
    parts give ``lambda_2 ~ 0`` -- a solver may return any basis of that eigenspace, and its
    second column can be nearly constant, useless for a cut. So take the combination
    ``y = Y u`` of the (D-orthonormal) vectors with ``u`` orthogonal to ``c = Y^T D 1`` that
    has the smallest Rayleigh quotient ``u^T diag(lambda) u`` (Rayleigh-Ritz in that
    subspace); for a well separated spectrum this is the second column itself.
    Returns the vector, its Rayleigh quotient and the largest residual of the columns used.
    """
    c = vectors.T @ degrees  # constant component of each column (y^T D 1)
    k = c.size
    norm = np.linalg.norm(c)
    if norm == 0:
        return vectors[:, 1], max(float(values[1]), 0.0), float(residuals[1])
    # Orthonormal basis of the complement of c by a Householder-free QR of [c, I].
    q, _ = np.linalg.qr(np.column_stack([c / norm, np.eye(k)]))
    basis = q[:, 1:k]
    small = basis.T @ (values[:, None] * basis)
    w, U = np.linalg.eigh(0.5 * (small + small.T))
    u = basis @ U[:, 0]
    used = np.abs(u) > 1e-8
    return vectors @ u, max(float(w[0]), 0.0), float(residuals[used].max())


def _components(G: sp.csr_matrix) -> np.ndarray:
    """Connected-component label of every node of a symmetric graph.

    For a symmetric matrix the strongly connected components of the directed view are the
    connected components, and scipy finds them from the CSR arrays alone (its undirected
    mode first builds the transpose, several times slower on image graphs).
    """
    _, comp = connected_components(G, directed=True, connection="strong")
    return comp


def _cut_graph(W: sp.csr_matrix, mask: np.ndarray) -> sp.csr_matrix:
    """``W`` with the edges between ``mask`` and ``~mask`` removed (same node numbering)."""
    keep = mask[W.indices]
    keep ^= np.repeat(~mask, np.diff(W.indptr))  # True where both ends are on the same side
    indptr = _kept_indptr(keep, W.indptr)
    return sp.csr_matrix((W.data[keep], W.indices[keep], indptr), shape=W.shape)


def _diagonal_block(G: sp.csr_matrix, idx: np.ndarray) -> sp.csr_matrix:
    """``G[idx][:, idx]`` when no row of ``idx`` has an entry outside ``idx`` (ascending)."""
    rows = G[idx]
    position = np.empty(G.shape[0], dtype=rows.indices.dtype)
    position[idx] = np.arange(idx.size, dtype=position.dtype)
    return sp.csr_matrix(
        (rows.data, position[rows.indices], rows.indptr), shape=(idx.size, idx.size)
    )


def _kept_indptr(keep: np.ndarray, indptr: np.ndarray) -> np.ndarray:
    """Row pointer of a CSR matrix after dropping the entries where ``keep`` is False."""
    n = indptr.size - 1
    counts = np.zeros(n, dtype=np.int64)
    nonempty = indptr[1:] > indptr[:-1]
    if keep.size:
        counts[nonempty] = np.add.reduceat(
            keep.view(np.int8), indptr[:-1][nonempty], dtype=np.int64
        )
    out = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(counts, out=out[1:])
    return out


def _solid_cut(
    W: sp.csr_matrix, sw: SweepCut, min_size: int, max_tries: int = 8
) -> tuple[int, np.ndarray, np.ndarray | None, sp.csr_matrix | None] | None:
    """The cheapest sweep threshold whose sides each hold a connected piece of min_size nodes.

    A side made only of pieces smaller than ``min_size`` would be dissolved by the
    fragment merging of :func:`imgcut.regions.enforce_connectivity`; on graphs with nearly
    isolated specks such sides can have tiny Ncut values. Thresholds are tried in increasing
    Ncut order, at most ``max_tries`` of them. Returns the prefix index, the mask, the
    component labels of the two sides and the graph without the cut edges (both reused by
    the children), or None.
    """
    if min_size <= 1:
        return sw.size_a - 1, sw.mask, None, None
    costs = np.where(sw.valid, sw.ncut_values, np.inf)
    for t in np.argsort(costs, kind="stable")[:max_tries]:
        if not np.isfinite(costs[t]):
            break
        mask = np.zeros(sw.mask.size, dtype=bool)
        mask[sw.order[: t + 1]] = True
        G = _cut_graph(W, mask)
        comp = _components(G)  # G has float64 data, so scipy does not copy it
        sizes = np.bincount(comp)
        on_a = np.zeros(sizes.size, dtype=bool)
        on_a[comp[mask]] = True
        if sizes[on_a].max() >= min_size and sizes[~on_a & (sizes > 0)].max() >= min_size:
            return int(t), mask, comp, G
    return None


def _warm_start(x0: np.ndarray, k: int, rng: np.random.Generator) -> np.ndarray:
    """Well-conditioned initial block for a child's eigenproblem from the parent's vectors.

    The parent's second eigenvector was used for the cut, so on each child it is nearly
    constant, i.e. nearly parallel to the (constant) first one; the third and later ones
    carry the child's structure. Columns are taken in the order first, third, ..., second
    and orthonormalised by QR; a column that is numerically dependent on the earlier ones
    (``|R_jj|`` below 1e-3 of its norm) is replaced by seeded noise: block eigensolvers
    such as LOBPCG need a start block of full rank.
    """
    x0 = np.asarray(x0, dtype=np.float64)
    if x0.ndim == 1:
        x0 = x0[:, None]
    m = x0.shape[0]
    k = min(k, m)
    cols = [0] + list(range(2, x0.shape[1])) + [1]
    block = x0[:, [c for c in cols if c < x0.shape[1]][:k]]
    if block.shape[1] < k:
        block = np.hstack([block, rng.standard_normal((m, k - block.shape[1]))])
    for _ in range(3):  # QR; dependent columns are replaced by noise and the block redone
        q, r = np.linalg.qr(block)
        scale = np.linalg.norm(block, axis=0)
        weak = np.abs(np.diag(r)) <= 1e-3 * np.where(scale > 0, scale, 1.0)
        if not weak.any():
            return q
        block[:, weak] = rng.standard_normal((m, int(weak.sum())))
    return np.linalg.qr(block)[0]


# --------------------------------------------------------------------------------------------
# k-way normalized cut
# --------------------------------------------------------------------------------------------


def _row_normalise(vectors: np.ndarray) -> np.ndarray:
    norms = np.linalg.norm(vectors, axis=1, keepdims=True)
    norms[norms == 0] = 1.0  # an all-zero row stays zero (only for isolated, zero-degree nodes)
    return vectors / norms


def _check_vectors(vectors: Any, k: int | None = None) -> np.ndarray:
    if hasattr(vectors, "vectors"):
        vectors = vectors.vectors
    V = np.asarray(vectors, dtype=np.float64)
    if V.ndim == 1:
        V = V[:, None]
    if V.ndim != 2 or V.shape[0] < 1 or V.shape[1] < 1:
        raise ValueError(f"eigenvectors must have shape (n, k) with n, k >= 1, got {V.shape}")
    if not np.all(np.isfinite(V)):
        raise ValueError("eigenvectors must be finite (no NaN or inf)")
    if k is not None:
        if k < 1:
            raise ValueError(f"k must be >= 1, got {k}")
        if V.shape[1] < k:
            raise ValueError(f"k={k} regions need at least {k} eigenvectors, got {V.shape[1]}")
        V = V[:, :k]
    return V


def discretize(
    vectors: np.ndarray,
    *,
    seed: SeedLike = None,
    max_iter: int = 200,
) -> np.ndarray:
    """Discrete k-way partition nearest to a continuous one (Yu & Shi 2003).

    Parameters
    ----------
    vectors : ndarray, shape (n, k), or an object with a ``vectors`` attribute
        The first k generalised eigenvectors ``y`` of ``(D - W) y = lambda D y``, the
        constant one included.
    seed : None, int or numpy.random.Generator
        Chooses the node whose row starts the initial rotation.
    max_iter : int, default 200
        Upper bound on alternations (it usually stops after a handful).

    Returns
    -------
    ndarray of int32, shape (n,)
        Labels ``1..K'`` (``K' <= k``: a class may end up empty) in order of first node.

    Raises
    ------
    ValueError
        If ``vectors`` is not a finite (n, k) array.

    Notes
    -----
    Yu & Shi (2003), Fig. 2: with ``Z = [y_1 .. y_k]`` (already ``D^{-1/2}``-scaled),
    normalise rows, ``X~ = Diag(Z Z^T)^{-1/2} Z``. Initialise the rotation ``R`` with the row
    of a random node, then repeatedly add the row most orthogonal to those chosen so far
    (step 3). Alternate

    * ``X = one-hot(argmax_j (X~ R)_ij)`` -- the discrete solution nearest to ``X~ R``;
    * SVD ``X^T X~ = U Omega U~^T`` and ``R = U~ U^T`` -- orthogonal Procrustes (step 5),

    and stop when the objective ``trace(Omega)`` stops increasing (it never decreases).
    Above ``DISCRETIZE_SAMPLE`` nodes the initial rotation and the alternation use that many
    rows drawn with ``seed``, and the final rotation labels every node (``argmax`` of
    ``Z R`` a block of rows at a time: row normalisation does not change the argmax).

    References
    ----------
    S. X. Yu and J. Shi, "Multiclass spectral clustering", ICCV 2003.

    Examples
    --------
    >>> import numpy as np
    >>> V = np.repeat(np.eye(3), 4, axis=0) + 0.01  # three clear classes
    >>> discretize(V, seed=0).tolist()
    [1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3]
    """
    V = _check_vectors(vectors)
    n, k = V.shape
    if k == 1:
        return np.ones(n, dtype=np.int32)
    rng = np.random.default_rng(seed)
    sampled = n > DISCRETIZE_SAMPLE
    if sampled:
        # The objective is a sum over rows: fit the rotation on a seeded sample of rows,
        # then label every row once with it (subsampled fitting, as in mini-batch k-means,
        # Sculley 2010). Only the sample is row-normalised: the final argmax is unchanged by
        # a positive scale per row, so the full block is never copied.
        Xt = _row_normalise(V[np.sort(rng.choice(n, DISCRETIZE_SAMPLE, replace=False))])
    else:
        Xt = _row_normalise(V)
    n = Xt.shape[0]

    # Yu & Shi 2003, Fig. 2 step 3: initial R from mutually near-orthogonal rows.
    R = np.zeros((k, k))
    R[:, 0] = Xt[rng.integers(n)]
    c = np.zeros(n)
    for j in range(1, k):
        c += np.abs(Xt @ R[:, j - 1])
        R[:, j] = Xt[int(np.argmin(c))]

    best_obj = -np.inf
    best_labels = None
    ones, rows = np.ones(n), np.arange(n)
    for _ in range(max_iter):
        # Yu & Shi 2003, eq. (12): the discrete X nearest to X~ R
        labels = np.argmax(tall_matmul(Xt, R), axis=1)
        # X^T X~ (k, k): per-class column sums of X~, as one sparse one-hot product
        M = sp.csr_matrix((ones, (labels, rows)), shape=(k, n)) @ Xt
        U, S, Vt = np.linalg.svd(M)  # Yu & Shi 2003, Fig. 2 step 5
        obj = float(S.sum())
        if obj <= best_obj + 1e-12 * max(1.0, abs(obj)):
            break  # the objective stopped improving: keep the best partition seen
        best_obj, best_labels = obj, labels
        best_R = R
        R = Vt.T @ U.T  # R = U~ U^T (orthogonal Procrustes)
    if sampled:  # every row, a block at a time (no n x k product in memory)
        best_labels = np.empty(V.shape[0], dtype=np.intp)
        for r0 in range(0, V.shape[0], 1 << 16):
            best_labels[r0 : r0 + (1 << 16)] = np.argmax(V[r0 : r0 + (1 << 16)] @ best_R, axis=1)
    return _first_occurrence_labels(best_labels)


def _kmeans(
    X: np.ndarray, k: int, rng: np.random.Generator, n_init: int = 4, max_iter: int = 100
) -> np.ndarray:
    """Lloyd's k-means with k-means++ seeding (Arthur & Vassilvitskii 2007); best of n_init."""
    n = X.shape[0]
    best_inertia, best = np.inf, None
    sq = np.einsum("ij,ij->i", X, X)
    for _ in range(n_init):
        centres = np.empty((k, X.shape[1]))
        centres[0] = X[rng.integers(n)]
        d2 = np.maximum(sq - 2 * X @ centres[0] + centres[0] @ centres[0], 0)
        for j in range(1, k):
            total = d2.sum()
            i = rng.choice(n, p=d2 / total) if total > 0 else rng.integers(n)
            centres[j] = X[i]  # Arthur & Vassilvitskii 2007: sample proportional to D(x)^2
            d2 = np.minimum(d2, np.maximum(sq - 2 * X @ centres[j] + centres[j] @ centres[j], 0))
        labels = np.full(n, -1)
        for _ in range(max_iter):
            dist = sq[:, None] - 2 * X @ centres.T + np.einsum("ij,ij->i", centres, centres)
            new = np.argmin(dist, axis=1)
            if np.array_equal(new, labels):
                break
            labels = new
            counts = np.bincount(labels, minlength=k)
            sums = sp.csr_matrix((np.ones(n), (labels, np.arange(n))), shape=(k, n)) @ X
            nonempty = counts > 0
            centres[nonempty] = sums[nonempty] / counts[nonempty, None]
        inertia = float(np.min(dist, axis=1).clip(min=0).sum())
        if inertia < best_inertia:
            best_inertia, best = inertia, labels
    return best


def kway_ncut(
    eigenpairs: Any,
    k: int,
    *,
    method: str = "discretize",
    seed: SeedLike = None,
) -> np.ndarray:
    """Simultaneous k-way normalized cut from the first k eigenvectors.

    Parameters
    ----------
    eigenpairs : Eigenpairs or ndarray, shape (n, >= k)
        Generalised eigenvectors ``y`` (columns in ascending eigenvalue order).
    k : int
        Number of regions wanted (>= 1).
    method : {"discretize", "kmeans"}, default "discretize"
        ``"discretize"``: Yu & Shi (2003) rotation + discretisation (:func:`discretize`).
        ``"kmeans"``: k-means on the row-normalised eigenvectors (Ng, Jordan & Weiss 2002).
    seed : None, int or numpy.random.Generator
        Seeds the random start.

    Returns
    -------
    ndarray of int32, shape (n,)
        Labels ``1..K'`` (``K' <= k``) in order of first node.

    Raises
    ------
    ValueError
        Unknown ``method``, ``k < 1`` or fewer than ``k`` eigenvectors.

    Notes
    -----
    Both methods use the row-normalised embedding ``Diag(Z Z^T)^{-1/2} Z`` with
    ``Z = [y_1 .. y_k]``. Yu & Shi's discretisation searches for the nearest partition
    matrix over all rotations of ``Z``, which makes it independent of the arbitrary basis of
    a degenerate eigenspace; k-means is the common alternative (best of 4 seeded k-means++
    starts here).

    References
    ----------
    S. X. Yu and J. Shi, "Multiclass spectral clustering", ICCV 2003.
    A. Y. Ng, M. I. Jordan and Y. Weiss, "On spectral clustering: analysis and an algorithm",
    NIPS 2002.

    Examples
    --------
    >>> import numpy as np
    >>> V = np.repeat(np.eye(2), 3, axis=0)
    >>> kway_ncut(V, 2, method="kmeans", seed=0).tolist()
    [1, 1, 1, 2, 2, 2]
    """
    if method not in _KWAY_METHODS:
        raise ValueError(f"unknown method {method!r}; valid values: {', '.join(_KWAY_METHODS)}")
    k = int(k)
    V = _check_vectors(eigenpairs, k)
    if k == 1:
        return np.ones(V.shape[0], dtype=np.int32)
    if method == "discretize":
        return discretize(V, seed=seed)
    rng = np.random.default_rng(seed)
    labels = _kmeans(_row_normalise(V), min(k, V.shape[0]), rng)
    return _first_occurrence_labels(labels)
