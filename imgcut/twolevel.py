"""Two-level preconditioned LOBPCG for the normalised Laplacian of a pixel graph.

The smallest eigenvalues of an image's normalised Laplacian are tiny and crowded
(1e-6 … 1e-4 on a 481×321 photograph with radius 5), because the good cuts of a photograph
are the nearly disconnected ones. Krylov methods then need thousands of products, and
multigrid coarse spaces made of square blocks miss the eigenvectors that live on small,
nearly detached patches. This module builds a coarse space that follows the image instead:

* **aggregates** = the basins of an over-segmentation of the image (watershed of the edge
  map) cut into small square tiles, so that each aggregate lies on one side of every image
  edge and is small enough for the smooth variation inside a region;
* every node whose degree is below ``LOW_DEGREE`` × the median degree is an aggregate of its
  own: such nodes sit on strong edges and in thin or tiny patches, and the eigenvectors of
  the smallest eigenvalues are often concentrated on them (on BSDS val 101085 the third
  one has 90 % of its mass on two pixels of degree 0.004, against a median of 11).

The coarse operator is the Galerkin projection ``Pᵀ L P`` with ``P = D^1/2 ×`` (aggregate
indicators), factored once (sparse LU). Its lowest eigenvectors, prolongated, start a
block LOBPCG (Knyazev 2001) whose preconditioner is a symmetric two-level cycle: a damped
Jacobi step, the coarse correction, a damped Jacobi step (two-grid method; e.g. Trottenberg,
Oosterlee & Schüller, *Multigrid*, 2001, ch. 2; details from memory).

Public names: :func:`tile_aggregates`, :func:`twolevel_eigenpairs`, :data:`LOW_DEGREE`,
:data:`TILE`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.csgraph as csgraph
import scipy.sparse.linalg as spla

__all__ = [
    "TILE",
    "LOW_DEGREE",
    "GUARD",
    "TwoLevelResult",
    "tile_aggregates",
    "twolevel_eigenpairs",
]

#: Side of the square tiles that cut the over-segmentation's basins (pixels). Measured on
#: BSDS val 101085 (481×321, radius 5, k = 8) with Felzenszwalb segments in place of the
#: watershed basins, before the other rules here: tiles of 16 px took 80 LOBPCG iterations,
#: 10 px 24 (one run each; docs/performance.md, session 5).
TILE = 10

#: Nodes whose degree is below this fraction of the median degree become aggregates of their
#: own. With Felzenszwalb segments × 10-px tiles, 0.01 still missed the eigenvalue 1.486e-6
#: of BSDS val 101085 (a 14-pixel wedge whose pixels have degree about 1); 0.05 found it
#: (docs/performance.md, session 5).
LOW_DEGREE = 0.05

#: Aggregates are split into the connected pieces of their links with
#: ``w_ij >= SPLIT_STRENGTH * min(d_i, d_j)``. Without it the grey version of BSDS val
#: 101085 lost the eigenvalue 9.65e-6, whose vector lives on a one-pixel line (5 pixels of
#: degree 0.6-1.8) between two columns of near-zero degree (docs/performance.md).
SPLIT_STRENGTH = 0.01

#: Extra eigenpairs carried in the LOBPCG block beyond those asked for.
GUARD = 4

#: Coarse solves use ``Pᵀ (L + SHIFT I) P``: ``L`` is singular (its null vector D^1/2 1 is
#: in the coarse space), and the shift is small against the eigenvalues sought.
SHIFT = 1e-6

#: Damping of the Jacobi steps (the diagonal of L is 1 and its spectrum lies in [0, 2], so
#: ω < 1 keeps the cycle positive definite).
OMEGA = 0.6

#: Largest coarse space factored (sparse LU): beyond it the caller falls back to Lanczos.
#: Coarse spaces of 25 000 nodes (481×321 photographs) were measured; this cap is a guard
#: on memory for very large single-scale graphs, not a measured optimum.
MAX_COARSE_NODES = 150_000

#: The coarse space is not used when it would have more than this fraction of the nodes
#: (a noise image shatters the over-segmentation, and the coarse factor would cost more
#: than it saves); the caller then falls back to Lanczos.
MAX_COARSE_FRACTION = 0.35

#: LOBPCG restarts from its current block when it stops early with residuals above tol.
MAX_RESTARTS = 3

# Coarse problems up to this size are solved with dense LAPACK.
_DENSE_COARSE = 1500


@dataclass
class TwoLevelResult:
    """Output of :func:`twolevel_eigenpairs`.

    Attributes
    ----------
    values : ndarray, shape (m,)
        Ritz values, ascending (the null eigenvalue excluded).
    vectors : ndarray, shape (n, m)
        Orthonormal Ritz vectors ``v`` of ``L`` (orthogonal to ``u``).
    residuals : ndarray, shape (m,)
        ``‖L v − λ v‖`` of each pair.
    iterations : int
        LOBPCG iterations.
    info : dict
        ``coarse_size``, ``low_degree_nodes``, ``coarse_values`` (the lowest coarse
        eigenvalues, a cheap upper estimate of the fine ones).
    """

    values: np.ndarray
    vectors: np.ndarray
    residuals: np.ndarray
    iterations: int
    info: dict = field(default_factory=dict)


def tile_aggregates(segments, *, tile: int = TILE, nodes=None) -> np.ndarray:
    """Aggregates of graph nodes: over-segmentation basins cut into square tiles.

    Parameters
    ----------
    segments : array_like of int, shape (H, W)
        Labels of an over-segmentation of the image (any integers), for example
        :func:`imgcut.hierarchy.oversegment` of the edge map.
    tile : int, default TILE
        Side of the square tiles in pixels (>= 1).
    nodes : array_like of int, optional
        Flat pixel indices of the graph's nodes (``AffinityGraph.nodes``); None: every pixel
        in raster order.

    Returns
    -------
    ndarray, shape (n,), int64
        Aggregate index of every node, ``0 .. s-1``; two nodes share an aggregate when they
        have the same label and lie in the same tile. Numbered in raster order of their
        first node.

    Raises
    ------
    ValueError
        For a ``segments`` that is not a 2-D integer array, ``tile < 1`` or node indices
        outside the image.

    Examples
    --------
    >>> import numpy as np
    >>> seg = np.zeros((4, 6), dtype=int); seg[:, 3:] = 1
    >>> tile_aggregates(seg, tile=2).reshape(4, 6)
    array([[0, 0, 1, 2, 3, 3],
           [0, 0, 1, 2, 3, 3],
           [4, 4, 5, 6, 7, 7],
           [4, 4, 5, 6, 7, 7]])
    """
    seg = np.asarray(segments)
    if seg.ndim != 2 or seg.size == 0 or not np.issubdtype(seg.dtype, np.integer):
        raise ValueError(
            f"segments must be a non-empty 2-D integer array; got {seg.dtype} {seg.shape}"
        )
    if isinstance(tile, bool) or not isinstance(tile, (int, np.integer)) or tile < 1:
        raise ValueError(f"tile must be an integer >= 1; got {tile!r}")
    h, w = seg.shape
    tiles_x = -(-w // tile)
    tile_id = (np.arange(h) // tile)[:, None] * tiles_x + (np.arange(w) // tile)[None, :]
    _, seg_id = np.unique(seg.ravel(), return_inverse=True)
    key = seg_id.astype(np.int64) * int(tile_id.max() + 1) + tile_id.ravel()
    if nodes is not None:
        nodes = np.asarray(nodes)
        if nodes.ndim != 1 or (nodes.size and (nodes.min() < 0 or nodes.max() >= seg.size)):
            raise ValueError(f"nodes must be flat pixel indices in [0, {seg.size})")
        key = key[nodes]
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    rank = np.empty(first.size, dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(first.size)
    return rank[inverse.ravel()]  # numbered in order of first appearance


def _coarse_space(Lc: sp.csr_matrix, degrees: np.ndarray, aggregates: np.ndarray):
    """Prolongation ``P`` (n × s, entries ``sqrt(d_i)``) with low-degree singletons."""
    n = Lc.shape[0]
    agg = np.asarray(aggregates, dtype=np.int64).copy()
    low = degrees < LOW_DEGREE * np.median(degrees)
    agg[low] = agg.max() + 1 + np.arange(int(low.sum()))
    if SPLIT_STRENGTH > 0:
        # Split every aggregate into the connected pieces of its strong links
        # (w_ij >= SPLIT_STRENGTH * min(d_i, d_j)): a one-pixel line cut off by near-zero
        # weights is its own piece even when the watershed basin runs across it.
        r = np.repeat(np.arange(n, dtype=Lc.indices.dtype), np.diff(Lc.indptr))
        same = agg[r] == agg[Lc.indices]  # links inside an aggregate only
        r, c, v = r[same], Lc.indices[same], Lc.data[same]
        dr, dc = degrees[r], degrees[c]
        # w_ij = -L_ij sqrt(d_i d_j) >= SPLIT_STRENGTH min(d_i, d_j)
        keep = (r != c) & (-v * np.sqrt(dr * dc) >= SPLIT_STRENGTH * np.minimum(dr, dc))
        G = sp.csr_matrix((np.ones(int(keep.sum())), (r[keep], c[keep])), shape=(n, n))
        agg = csgraph.connected_components(G, directed=False)[1].astype(np.int64)
    else:
        agg = np.unique(agg, return_inverse=True)[1]
    s = int(agg.max()) + 1
    P = sp.csr_matrix((np.sqrt(degrees), (np.arange(n), agg)), shape=(n, s))
    return P, s, int(low.sum())


def twolevel_eigenpairs(
    Lc: sp.csr_matrix,
    degrees: np.ndarray,
    u: np.ndarray,
    m: int,
    aggregates: np.ndarray,
    *,
    tol: float = 1e-5,
    maxiter: int | None = None,
    rng: np.random.Generator | None = None,
) -> TwoLevelResult | None:
    """The ``m`` smallest non-zero eigenpairs of a connected graph's normalised Laplacian.

    Parameters
    ----------
    Lc : scipy.sparse.csr_matrix, shape (n, n)
        ``L = I − D^-1/2 W D^-1/2`` of one connected component.
    degrees : ndarray, shape (n,)
        Its degrees ``d`` (all positive).
    u : ndarray, shape (n,)
        The unit null vector ``D^1/2 1 / ‖·‖`` (deflated: the result is orthogonal to it).
    m : int
        Number of non-zero eigenpairs wanted (>= 1).
    aggregates : ndarray of int, shape (n,)
        Aggregate of every node (:func:`tile_aggregates`); low-degree nodes are split off
        here.
    tol : float, default 1e-5
        Residual tolerance ``‖L v − λ v‖`` handed to LOBPCG.
    maxiter : int, optional
        LOBPCG iterations (default 100).
    rng : numpy.random.Generator, optional
        Seeds the coarse eigensolver's start vector.

    Returns
    -------
    TwoLevelResult or None
        None when the coarse space is unusable (too few aggregates for ``m`` plus guards,
        more than ``MAX_COARSE_FRACTION`` of the nodes or more than ``MAX_COARSE_NODES``);
        the caller then uses another
        backend. Residuals are reported, not enforced: the caller checks them.

    Notes
    -----
    With ``P`` the prolongation (column ``a`` = ``D^1/2`` times the indicator of aggregate
    ``a``), the coarse matrix is ``A_c = Pᵀ L P`` (the Galerkin projection, equal to
    ``Pᵀ_agg (D − W) P_agg``) and ``M_c = Pᵀ P`` (diagonal: the aggregates' volumes). The
    start block is ``P`` times the eigenvectors 2 … m + GUARD + 1 of ``(A_c, M_c)`` (the
    first is the constant, whose prolongation is ``u``). The preconditioner applied to a
    block ``R`` is the symmetric two-grid cycle ``x = ωR``, ``x += P C⁻¹ Pᵀ (R − L x)``,
    ``x += ω (R − L x)`` with ``C = A_c + SHIFT · M_c``; it is symmetric positive definite
    for ``0 < ω < 1``. LOBPCG (scipy) then iterates with the constraint ``u``.

    References
    ----------
    A. V. Knyazev, Toward the optimal preconditioned eigensolver: LOBPCG, SIAM J. Sci.
    Comput. 23(2), 2001.
    U. Trottenberg, C. W. Oosterlee, A. Schüller, *Multigrid*, Academic Press 2001 (two-grid
    cycle; from memory).
    J. Shi and J. Malik, Normalized cuts and image segmentation, IEEE TPAMI 22(8), 2000.

    Examples
    --------
    A 12 × 12 grid whose left and right halves are joined weakly; aggregates are 3 × 3
    tiles of one segment:

    >>> import numpy as np, scipy.sparse as sp
    >>> from imgcut.spectral import normalized_laplacian
    >>> h = w = 12
    >>> idx = np.arange(h * w).reshape(h, w)
    >>> rows = np.r_[idx[:, :-1].ravel(), idx[:-1, :].ravel()]
    >>> cols = np.r_[idx[:, 1:].ravel(), idx[1:, :].ravel()]
    >>> wts = np.where((cols % w == w // 2) & (rows % w == w // 2 - 1), 1e-3, 1.0)
    >>> W = sp.coo_matrix((wts, (rows, cols)), shape=(h * w, h * w))
    >>> W = (W + W.T).tocsr()
    >>> d = np.asarray(W.sum(axis=1)).ravel()
    >>> u = np.sqrt(d) / np.linalg.norm(np.sqrt(d))
    >>> agg = tile_aggregates(np.zeros((h, w), dtype=int), tile=3)
    >>> res = twolevel_eigenpairs(normalized_laplacian(W), d, u, 2, agg, tol=1e-8)
    >>> bool(res.values[0] < 1e-3 < res.values[1]), bool(res.residuals.max() < 1e-6)
    (True, True)
    """
    n = Lc.shape[0]
    rng = np.random.default_rng(rng)
    aggregates = np.asarray(aggregates)
    if aggregates.shape != (n,):
        raise ValueError(f"aggregates must have shape ({n},); got {aggregates.shape}")
    P, s, n_low = _coarse_space(Lc, degrees, aggregates)
    b = min(m + GUARD, n - 2)
    if s < b + 2 or s > MAX_COARSE_FRACTION * n or s > MAX_COARSE_NODES:
        return None
    Pt = P.T.tocsr()
    Ac = (Pt @ (Lc @ P)).tocsc()
    Ac = 0.5 * (Ac + Ac.T)
    mass = np.asarray(P.multiply(P).sum(axis=0)).ravel()  # volumes of the aggregates
    C = (Ac + sp.diags(SHIFT * mass)).tocsc()

    if s <= _DENSE_COARSE:
        Cd = C.toarray()
        factor = scipy.linalg.cho_factor(Cd)

        def coarse_solve(B):
            return scipy.linalg.cho_solve(factor, B)

        cvals, cvecs = scipy.linalg.eigh(Ac.toarray(), np.diag(mass), subset_by_index=[0, b])
    else:
        lu = spla.splu(C)

        def coarse_solve(B):
            return lu.solve(np.asarray(B))

        opinv = spla.LinearOperator((s, s), matvec=lu.solve, dtype=np.float64)
        cvals, cvecs = spla.eigsh(
            Ac,
            k=b + 1,
            M=sp.diags(mass).tocsc(),
            sigma=-SHIFT,
            OPinv=opinv,
            which="LM",
            tol=1e-8,
            v0=rng.standard_normal(s),
        )
    order = np.argsort(cvals)
    cvals, cvecs = cvals[order], cvecs[:, order]
    X = P @ cvecs[:, 1 : b + 1]  # the first coarse vector is the constant: u itself
    X -= np.outer(u, u @ X)

    def apply(R):
        R = np.asarray(R)
        R2 = R.reshape(n, -1)
        x = OMEGA * R2
        r = R2 - Lc @ x
        x = x + P @ coarse_solve(Pt @ r)
        r = R2 - Lc @ x
        x = x + OMEGA * r
        return x.reshape(R.shape)

    M = spla.LinearOperator((n, n), matvec=apply, matmat=apply, dtype=np.float64)
    budget = maxiter if maxiter is not None else 100
    iterations = 0
    restarts = 0
    while True:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            vals, X, hist = spla.lobpcg(
                Lc,
                X,
                M=M,
                Y=u[:, None],
                tol=0.5 * tol,  # margin: LOBPCG's residuals are of its own last iterate
                maxiter=budget - iterations,
                largest=False,
                retResidualNormsHistory=True,
            )
        iterations += max(len(hist) - 1, 1)
        order = np.argsort(vals)
        vals, X = vals[order], X[:, order]
        residuals = np.linalg.norm(Lc @ X[:, :m] - X[:, :m] * vals[:m], axis=0)
        # scipy's LOBPCG stops early when its Gram matrices become ill-conditioned (seen
        # on BSDS val 143090, whose spectrum starts 1e-15, 1.7e-8, 8.2e-8: one pair stuck
        # at residual 6e-4 after 21 of 100 iterations); a restart from the current block
        # drops the stale search directions and goes on.
        if residuals.max() <= tol or iterations >= budget or restarts >= MAX_RESTARTS:
            break
        restarts += 1
    vals, V = vals[:m], X[:, :m]
    info = {
        "coarse_size": s,
        "low_degree_nodes": n_low,
        "coarse_values": cvals[1 : b + 1].tolist(),
        "restarts": restarts,
    }
    return TwoLevelResult(vals, V, residuals, iterations, info)
