"""Smallest eigenpairs of the normalised graph Laplacian of an affinity graph.

The normalized-cut relaxation (Shi & Malik 2000, eq. (6)-(8)) needs the k smallest
solutions of the generalised problem ``(D - W) y = lambda D y``. With
``v = D^1/2 y`` this is the ordinary symmetric problem ``L v = lambda v`` for the
normalised Laplacian ``L = I - D^-1/2 W D^-1/2`` (Chung 1997, section 1.2).

Public names: :func:`laplacian_eigenpairs`, :class:`Eigenpairs`,
:func:`normalized_laplacian`, :func:`connected_components`.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.csgraph as csgraph
import scipy.sparse.linalg as spla

from imgcut._errors import EigenConvergenceWarning

__all__ = [
    "Eigenpairs",
    "laplacian_eigenpairs",
    "normalized_laplacian",
    "connected_components",
    "SOLVERS",
    "DENSE_MAX_NODES",
]

#: Valid values of ``solver`` in :func:`laplacian_eigenpairs`.
SOLVERS = ("auto", "twolevel", "lobpcg-amg", "arpack", "dense")

#: Largest component the ``"dense"`` backend accepts (an n x n float64 array).
DENSE_MAX_NODES = 4000

# ``"auto"`` solves components up to this size densely (LAPACK is faster there).
_AUTO_DENSE_NODES = 1000


@dataclass(frozen=True)
class Eigenpairs:
    """The k smallest eigenpairs of ``(D - W) y = lambda D y``.

    Attributes
    ----------
    values : ndarray, shape (k,)
        Eigenvalues in ascending order (``0 <= lambda <= 2``).
    vectors : ndarray, shape (n, k)
        Generalised eigenvectors ``y = D^-1/2 v``, each with ``y^T D y = 1`` and the
        sign fixed so that the entry of largest magnitude is positive. On an isolated
        node (degree 0) the vector is the node's indicator.
    residuals : ndarray, shape (k,)
        ``||L v - lambda v|| / ||v||`` for the normalised eigenvectors ``v = D^1/2 y``.
    solver : str
        Backend used on the largest component (``"dense"``, ``"twolevel"``, ``"arpack"``
        or ``"lobpcg-amg"``); ``"none"`` when only null vectors were needed.
    iterations : int
        Iterations of the iterative backend summed over components (0 for dense).
    n_components : int
        Number of connected components of the graph (isolated nodes included).
    component_labels : ndarray, shape (n,)
        Component index of every node (components numbered by their first node).
    tol : float
        The requested residual tolerance.
    converged : bool
        True when every residual is at most ``tol``.
    timings : dict
        Seconds spent per stage (``components``, ``setup``, ``solve``, ``check``,
        ``total``).
    info : dict
        Backend details (for example the guard Ritz values of LOBPCG; for ``"twolevel"``
        the coarse-space size, and ``twolevel_fallback`` when Lanczos took over).
    """

    values: np.ndarray
    vectors: np.ndarray
    residuals: np.ndarray
    solver: str
    iterations: int
    n_components: int
    component_labels: np.ndarray
    tol: float
    converged: bool
    timings: dict = field(default_factory=dict)
    info: dict = field(default_factory=dict)

    @property
    def k(self) -> int:
        """Number of eigenpairs returned."""
        return int(self.values.shape[0])


# --------------------------------------------------------------------------- validation


def _check_affinity(W, name: str = "W") -> sp.csr_matrix:
    """Return ``W`` as CSR float64 after checking shape, sign, finiteness and symmetry."""
    if not sp.issparse(W):
        raise ValueError(f"{name} must be a scipy.sparse matrix (CSR, float64, n x n)")
    if W.ndim != 2 or W.shape[0] != W.shape[1]:
        raise ValueError(f"{name} must be square (n x n); got shape {W.shape}")
    if W.shape[0] == 0:
        raise ValueError(f"{name} is empty (0 x 0); the graph needs at least one node")
    W = sp.csr_matrix(W, dtype=np.float64)
    data = W.data
    if data.size and not np.all(np.isfinite(data)):
        raise ValueError(f"{name} has NaN or infinite weights; affinities must be finite")
    if data.size and data.min() < 0:
        raise ValueError(f"{name} has negative weights; affinities must be >= 0")
    # Symmetry: compare W x with W^T x for a fixed random x (two products instead of
    # forming W - W^T, which would cost a full copy of a 10^7-non-zero matrix).
    x = np.random.default_rng(12345).standard_normal(W.shape[0])
    a = W @ x
    b = W.T @ x
    if not np.allclose(a, b, rtol=1e-10, atol=1e-12 * max(1.0, np.abs(a).max(initial=0.0))):
        raise ValueError(f"{name} must be symmetric (W == W.T); it is not")
    return W


def _check_block(x0, n: int) -> np.ndarray:
    x0 = np.asarray(x0, dtype=np.float64)
    if x0.ndim == 1:
        x0 = x0[:, None]
    if x0.ndim != 2 or x0.shape[0] != n:
        raise ValueError(f"x0 must have shape (n, m) with n = {n} rows; got {x0.shape}")
    if not np.all(np.isfinite(x0)):
        raise ValueError("x0 has NaN or infinite entries")
    return x0


# --------------------------------------------------------------------------- public helpers


def connected_components(W) -> tuple[int, np.ndarray]:
    """Connected components of an undirected affinity graph.

    Parameters
    ----------
    W : scipy.sparse matrix, shape (n, n)
        Symmetric non-negative affinities; an edge exists where ``W[i, j] > 0``.

    Returns
    -------
    n_components : int
        Number of components; an isolated node (degree 0) is a component of its own.
    labels : ndarray of int64, shape (n,)
        Component of every node, numbered 0.. in the order of each component's
        first node.

    Raises
    ------
    ValueError
        If ``W`` is not square, sparse, finite, non-negative and symmetric.

    Notes
    -----
    Breadth-first search from ``scipy.sparse.csgraph.connected_components``. The
    multiplicity of the eigenvalue 0 of the normalised Laplacian equals the number
    of components (Chung 1997, Lemma 1.7).

    References
    ----------
    F. R. K. Chung, *Spectral Graph Theory*, AMS 1997.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> W = sp.csr_matrix(([1.0, 1.0], ([0, 1], [1, 0])), shape=(3, 3))
    >>> connected_components(W)
    (2, array([0, 0, 1]))
    """
    return _positive_components(_check_affinity(W))


def _positive_components(W: sp.csr_matrix) -> tuple[int, np.ndarray]:
    """Components of the graph whose edges are the strictly positive entries of ``W``."""
    pattern = sp.csr_matrix(
        ((W.data > 0).astype(np.int8), W.indices.copy(), W.indptr.copy()), shape=W.shape
    )  # copies: eliminate_zeros works in place and must not touch W's index arrays
    pattern.eliminate_zeros()
    n_comp, labels = csgraph.connected_components(pattern, directed=False)
    return int(n_comp), labels.astype(np.int64)


def normalized_laplacian(W) -> sp.csr_matrix:
    """Sparse normalised Laplacian ``L = I - D^-1/2 W D^-1/2``.

    Parameters
    ----------
    W : scipy.sparse matrix, shape (n, n)
        Symmetric non-negative affinities.

    Returns
    -------
    L : scipy.sparse.csr_matrix, shape (n, n), float64
        The normalised Laplacian. On an isolated node (degree 0) the diagonal entry
        is 0, so that the node's indicator is an eigenvector with eigenvalue 0.

    Raises
    ------
    ValueError
        If ``W`` is not square, sparse, finite, non-negative and symmetric.

    Notes
    -----
    ``L_uv = 1 - w_uu/d_u`` on the diagonal when ``d_u > 0`` (0 otherwise) and
    ``-w_uv / sqrt(d_u d_v)`` off it (Chung 1997, section 1.2). Its eigenvalues lie
    in ``[0, 2]``; ``L v = lambda v`` is equivalent to ``(D - W) y = lambda D y``
    with ``y = D^-1/2 v`` (Shi & Malik 2000, eq. (7)).

    References
    ----------
    F. R. K. Chung, *Spectral Graph Theory*, AMS 1997.
    J. Shi, J. Malik, Normalized cuts and image segmentation, IEEE TPAMI 22(8), 2000.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> W = sp.csr_matrix([[0.0, 1.0], [1.0, 0.0]])
    >>> normalized_laplacian(W).toarray()
    array([[ 1., -1.],
           [-1.,  1.]])
    """
    W = _check_affinity(W)
    d = np.asarray(W.sum(axis=1)).ravel()
    return _laplacian_from(W, d)


def _inv_sqrt(d: np.ndarray) -> np.ndarray:
    out = np.zeros_like(d)
    pos = d > 0
    out[pos] = 1.0 / np.sqrt(d[pos])
    return out


def _scaled_affinity(W: sp.csr_matrix, s: np.ndarray) -> sp.csr_matrix:
    """``diag(s) W diag(s)`` by scaling the stored values (no sparse products)."""
    W = sp.csr_matrix(W)
    data = W.data * np.repeat(s, np.diff(W.indptr)) * s[W.indices]
    return sp.csr_matrix((data, W.indices.copy(), W.indptr.copy()), shape=W.shape)


def _laplacian_from(W: sp.csr_matrix, d: np.ndarray) -> sp.csr_matrix:
    S = _scaled_affinity(W, _inv_sqrt(d))  # D^-1/2 W D^-1/2 (Chung 1997, sec. 1.2)
    L = sp.diags((d > 0).astype(np.float64)) - S
    return sp.csr_matrix(L)


def _identity_minus(S: sp.csr_matrix) -> sp.csr_matrix:
    # Every node of a connected component with >= 2 nodes has a positive degree.
    return sp.csr_matrix(sp.identity(S.shape[0], format="csr") - S)


def _fix_signs(Y: np.ndarray) -> np.ndarray:
    """Flip each column so that its entry of largest magnitude is positive."""
    if Y.size == 0:
        return Y
    idx = np.argmax(np.abs(Y), axis=0)
    signs = np.sign(Y[idx, np.arange(Y.shape[1])])
    signs[signs == 0] = 1.0
    return Y * signs


# --------------------------------------------------------------------------- backends


@dataclass
class _Solved:
    values: np.ndarray  # (m,) ascending, nonzero part of the spectrum
    vectors: np.ndarray  # (n_c, m) orthonormal, orthogonal to the null vector
    iterations: int
    solver: str
    info: dict = field(default_factory=dict)


def _start_block(n: int, m: int, rng: np.random.Generator, x0c, u: np.ndarray) -> np.ndarray:
    """Initial block of ``m`` columns: warm-start columns first, random ones after.

    Warm-start columns are deflated against the known null vector ``u``; columns that
    vanish (e.g. the constant eigenvector of a parent region) are dropped.
    """
    cols = np.zeros((n, 0))
    if x0c is not None and x0c.shape[1] > 0:
        X = x0c - np.outer(u, u @ x0c)
        norms = np.linalg.norm(x0c, axis=0)
        keep = np.linalg.norm(X, axis=0) > 1e-8 * np.maximum(norms, 1e-300)
        cols = X[:, keep][:, :m]
    if cols.shape[1] < m:
        R = rng.standard_normal((n, m - cols.shape[1]))
        R -= np.outer(u, u @ R)  # deflate the known null vector D^1/2 1
        cols = np.hstack([cols, R])
    return cols


def _solve_dense(Lc: sp.csr_matrix, m: int) -> _Solved:
    # Direct LAPACK solve: exact to rounding, no iterations, no random start.
    n = Lc.shape[0]
    vals, vecs = scipy.linalg.eigh(Lc.toarray(), subset_by_index=[0, min(m, n - 1)])
    # The component is connected, so eigenvalue 0 is simple and comes first.
    return _Solved(vals[1 : m + 1], vecs[:, 1 : m + 1], 0, "dense")


#: Krylov subspace size of the ``"arpack"`` backend for ``m`` wanted eigenpairs (guards
#: included): ``max(5 m + 10, ARPACK_MIN_BASIS)`` basis vectors, at most 64, and at most
#: ``ARPACK_BASIS_BYTES`` of basis (so 64 on images up to about a megapixel). scipy's
#: default (``2 m + 1``, at least 20) restarts so often on the clustered spectrum of an
#: image graph that it needed 4.3x more products on a BSDS graph with sigma_edge x 4, and
#: 1.55x more CPU at the default sigmas
#: (docs/performance.md).
ARPACK_BASIS_BYTES = 512 * 1024**2

#: Products with ``D^-1/2 W D^-1/2`` run in float32 when ``tol`` is at least this: they
#: move half the bytes, and their rounding (about 1e-7 relative) stays far below the
#: residuals asked for. Residuals are always checked in float64.
FLOAT32_MIN_TOL = 1e-6


#: Extra eigenpairs the ``"arpack"`` backend computes beyond those asked for. With one guard
#: the same k = 3 solve returned 1.145e-6, 2.575e-6 and missed 1.486e-6; with two it did not.
ARPACK_GUARD = 2


#: Smallest Krylov basis of the ``"arpack"`` backend, whatever ``m``: the clustered bottom of
#: an image graph's spectrum needs it even for two wanted pairs (481x321 BSDS graph, k = 3:
#: 7151 products with a basis of 30, 5943 with 48, 4440 with 64; docs/performance.md).
ARPACK_MIN_BASIS = 64


def _arpack_ncv(n: int, m: int) -> int:
    ncv = min(max(5 * m + 10, ARPACK_MIN_BASIS), 64)
    ncv = min(ncv, max(2 * m + 1, ARPACK_BASIS_BYTES // (8 * max(n, 1))))
    return int(min(n - 1, max(ncv, m + 2)))


def _solve_arpack(Sc, u, m, tol, maxiter, rng, x0c) -> _Solved:
    # Largest eigenvalues mu of S = D^-1/2 W D^-1/2 = I - L with the known top eigenvector
    # u = D^1/2 1 / ||.|| deflated (S u = u, so S - u u^T has u in its null space);
    # lambda = 1 - mu. Shift-invert is not used: a sparse LU of a radius-r image graph
    # fills in badly.
    n = Sc.shape[0]
    S = Sc.astype(np.float32) if tol >= FLOAT32_MIN_TOL else Sc
    count = [0]

    def matvec(x):
        count[0] += 1
        x = np.asarray(x, dtype=np.float64).reshape(n, -1)
        y = (S @ x.astype(S.dtype)).astype(np.float64)
        y -= np.outer(u, u @ x)
        return y.reshape(x.shape if x.shape[1] > 1 else (n,))

    op = spla.LinearOperator((n, n), matvec=matvec, dtype=np.float64)
    X = _start_block(n, 1, rng, x0c, u)
    # The random part gives the guard eigenvectors a component to grow from.
    v0 = X.sum(axis=1) + 0.1 * np.linalg.norm(X) / np.sqrt(n) * rng.standard_normal(n)
    v0 -= u * (u @ v0)
    # Two guard eigenpairs beyond the m wanted: at tol 1e-5 Lanczos may otherwise settle on
    # the (m+1)-th eigenvalue instead of the m-th when they are close (seen on BSDS graphs).
    m_req = min(m + ARPACK_GUARD, n - 2)
    ncv = _arpack_ncv(n, m_req)
    # ARPACK's own residual estimate does not see the float32 rounding of the products;
    # asking it for half the tolerance keeps the float64 residuals below tol.
    inner_tol = tol if S.dtype == np.float64 else 0.5 * tol
    iters = maxiter if maxiter is not None else n * 10
    try:
        mu, V = spla.eigsh(op, k=m_req, which="LA", tol=inner_tol, maxiter=iters, v0=v0, ncv=ncv)
    except spla.ArpackNoConvergence as exc:
        # Keep what converged and complete the block by Rayleigh-Ritz on a small
        # Krylov space; the residual check then reports the failure honestly.
        K = [exc.eigenvectors] if exc.eigenvectors is not None else []
        q = v0 / np.linalg.norm(v0)
        kry = [q]
        for _ in range(m + 1):
            q = op.matvec(q)
            q = q / max(np.linalg.norm(q), 1e-300)
            kry.append(q)
        Q, _ = np.linalg.qr(np.hstack(K + [np.array(kry).T]))
        H = Q.T @ (Sc @ Q - np.outer(u, u @ Q))
        mu_all, Z = np.linalg.eigh((H + H.T) / 2)
        order = np.argsort(mu_all)[::-1][:m_req]
        mu, V = mu_all[order], Q @ Z[:, order]
    if S.dtype != np.float64:
        # Rayleigh-Ritz in float64 on the converged vectors removes the float32 rounding
        # from the eigenvalues (the vectors are already accurate to it).
        V, _ = np.linalg.qr(V)
        H = V.T @ (Sc @ V - np.outer(u, u @ V))
        mu, Z = np.linalg.eigh((H + H.T) / 2)
        V = V @ Z
    order = np.argsort(-mu)[:m]
    # Iterations reported as operator applications (ARPACK does not expose restarts).
    info = {"ncv": ncv, "guard_values": (1.0 - np.sort(mu)[::-1][m:]).tolist()}
    return _Solved(1.0 - mu[order], V[:, order], count[0], "arpack", info)


_AMG_GRAPH_FORM = True


def _amg_hierarchy(A: sp.csr_matrix, rng: np.random.Generator):
    import pyamg

    # pyamg estimates spectral radii from a random start drawn from the global NumPy
    # state; seed it from our generator and restore it, so results are reproducible.
    state = np.random.get_state()  # noqa: NPY002 (pyamg reads the legacy state)
    np.random.seed(int(rng.integers(2**31 - 1)))  # noqa: NPY002
    try:
        ml = pyamg.smoothed_aggregation_solver(A, max_coarse=500)
    finally:
        np.random.set_state(state)  # noqa: NPY002
    return ml


def _solve_lobpcg(Lc, u, m, tol, maxiter, rng, x0c, Pc) -> _Solved:
    n = Lc.shape[0]
    # Preconditioner for L + sigma I (P: L itself or the normalised surrogate; the small
    # shift keeps it positive definite, the Laplacian being singular -- common practice,
    # as in scikit-learn's amg mode). Smoothed aggregation assumes constants span the
    # near-null space, but the null vector of a normalised Laplacian is D^1/2 1; so the
    # AMG is built on the graph-Laplacian form K = S (P + sigma I) S with S = D^1/2 (up
    # to a scale), whose null vector is constant, and applied as S K^-1 S.
    A = (Pc if Pc is not None else Lc) + 1e-5 * sp.identity(n, format="csr")
    if _AMG_GRAPH_FORM:
        s = u / u.max()
        K = sp.csr_matrix(sp.diags(s) @ A @ sp.diags(s))
        ml = _amg_hierarchy(K, rng)

        def apply(R):
            R = np.asarray(R)
            R2 = R.reshape(n, -1)
            out = np.empty_like(R2)
            for j in range(R2.shape[1]):
                out[:, j] = s * ml.solve(s * R2[:, j], maxiter=1, cycle="V", tol=1e-30)
            return out.reshape(R.shape)

        M = spla.LinearOperator((n, n), matvec=apply, matmat=apply, dtype=np.float64)
    else:
        M = _amg_hierarchy(sp.csr_matrix(A), rng).aspreconditioner(cycle="V")
    X = _start_block(n, m, rng, x0c, u)
    it = maxiter if maxiter is not None else 200
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        vals, V, hist = spla.lobpcg(
            Lc,
            X,
            M=M,
            Y=u[:, None],
            tol=tol,
            maxiter=it,
            largest=False,
            retResidualNormsHistory=True,
        )
    order = np.argsort(vals)[:m]
    return _Solved(vals[order], V[:, order], max(len(hist) - 1, 0), "lobpcg-amg")


def _solve_twolevel(Lc, Sc, dc, u, m, tol, maxiter, rng, x0c, agg, asked) -> _Solved:
    from imgcut.twolevel import twolevel_eigenpairs

    res = twolevel_eigenpairs(Lc, dc, u, m, agg, tol=tol, maxiter=maxiter, rng=rng)
    if res is not None and (asked == "twolevel" or float(res.residuals.max()) <= tol):
        return _Solved(res.values, res.vectors, res.iterations, "twolevel", dict(res.info))
    # Fallback: Lanczos, warm-started from the two-level vectors when there are any.
    why = "coarse space unusable" if res is None else "residuals above tol"
    start = x0c if res is None else res.vectors
    out = _solve_arpack(Sc, u, m, tol, maxiter, rng, start)
    out.info["twolevel_fallback"] = why
    if res is not None:
        out.iterations += res.iterations
    return out


# --------------------------------------------------------------------------- driver


def _component_solver(solver: str, n_c: int, m: int, has_aggregates: bool = False) -> str:
    if solver == "dense" or n_c <= max(_AUTO_DENSE_NODES if solver == "auto" else 0, 6 * m + 6):
        if n_c > DENSE_MAX_NODES:
            raise ValueError(
                f"solver='dense' handles components of at most {DENSE_MAX_NODES} nodes; "
                f"this one has {n_c}; use solver='auto', 'lobpcg-amg' or 'arpack'"
            )
        return "dense"
    if solver == "auto":
        return "twolevel" if has_aggregates else "arpack"
    return solver


def laplacian_eigenpairs(
    W,
    k: int,
    *,
    solver: str = "auto",
    tol: float = 1e-5,
    maxiter: int | None = None,
    seed=None,
    x0=None,
    surrogate=None,
    aggregates=None,
) -> Eigenpairs:
    """The k smallest eigenpairs of ``(D - W) y = lambda D y``.

    Parameters
    ----------
    W : scipy.sparse matrix, shape (n, n)
        Affinity graph: CSR float64, symmetric, non-negative (see
        ``docs/architecture.md``).
    k : int
        Number of eigenpairs wanted. A graph with fewer than ``k`` nodes gets
        ``min(k, n)`` pairs.
    solver : {"auto", "twolevel", "lobpcg-amg", "arpack", "dense"}, default "auto"
        ``"twolevel"``: LOBPCG with a two-level preconditioner whose coarse space follows
        the image (:mod:`imgcut.twolevel`); needs ``aggregates``. When its coarse space is
        unusable, or (with ``"auto"``) its residuals miss ``tol``, the component is solved
        again by ``"arpack"``, warm-started from its vectors. On the 481×321, radius-5
        benchmark graph it took 12.7× less CPU than ARPACK with the same eigenvalues
        (``benchmarks/bench_eigensolver.py``, docs/performance.md). ``"arpack"``:
        implicitly restarted Lanczos (``scipy.sparse.linalg.eigsh``) on the largest
        eigenvalues of ``D^-1/2 W D^-1/2``, with the null vector deflated, a
        Krylov basis of 64 vectors when memory allows (scipy's default of
        ``2 m + 1`` restarts too often on the clustered spectra of image graphs), two guard
        eigenpairs, float32 products when ``tol >= FLOAT32_MIN_TOL`` and a float64
        Rayleigh-Ritz step at the end; the default for large graphs without aggregates.
        ``"lobpcg-amg"``: LOBPCG preconditioned by a smoothed-aggregation multigrid
        V-cycle (pyamg); on BSDS image graphs at radius 5 it was not faster and at
        tol 1e-5 it can converge to a set that misses one of the k smallest
        eigenvalues (docs/performance.md), so it is no longer the default.
        ``"dense"``: LAPACK ``eigh`` on an n x n array, for components of at most
        ``DENSE_MAX_NODES`` nodes. ``"auto"``: dense for components up to 1000 nodes,
        ``"twolevel"`` above when ``aggregates`` are given, else ``"arpack"``. Components too small
        for an iterative method (under about ``6 k`` nodes) are always solved densely.
    tol : float, default 1e-5
        Residual tolerance ``||L v - lambda v|| / ||v||`` passed to the iterative
        backends; any larger residual triggers an :class:`EigenConvergenceWarning`.
        The dense backend is exact to rounding and always meets it (unless ``tol``
        is below about 1e-14).
    maxiter : int or None, default None
        Iteration limit of the iterative backend (LOBPCG iterations; ARPACK restarts).
        None: 200 for LOBPCG, ``10 n`` for ARPACK. Not used by the direct dense backend.
    seed : None, int or numpy.random.Generator
        Seeds the random start block (LOBPCG) or start vector (ARPACK). The dense
        backend uses no random numbers.
    x0 : array_like, shape (n, m), optional
        Warm start in the space of the returned ``vectors`` (generalised ``y``), e.g.
        a parent region's eigenvectors restricted to this graph or coarse ones
        interpolated. Its columns come first in the start block; random columns fill
        the rest. ARPACK uses the sum of the columns as its start vector.
    surrogate : scipy.sparse matrix, shape (n, n), optional
        A sparser affinity graph on the same nodes (e.g. the 4-neighbour graph with the
        same weights). The multigrid preconditioner is built on its Laplacian,
        normalised with the degrees of ``W``, which is much cheaper than building it
        on ``W``. Only used by ``"lobpcg-amg"``.
    aggregates : array_like of int, shape (n,), optional
        Coarse aggregate of every node, from an over-segmentation of the image cut into
        small tiles (:func:`imgcut.twolevel.tile_aggregates`); used by ``"twolevel"``
        (and makes ``"auto"`` choose it). ``x0`` is not used by that backend: its coarse
        start is better.

    Returns
    -------
    Eigenpairs
        Values ascending, D-normalised vectors with fixed signs, residuals, timings.

    Raises
    ------
    ValueError
        If ``W`` is not a square, finite, non-negative, symmetric sparse matrix, if
        ``k < 1``, ``tol <= 0``, ``maxiter < 1``, ``solver`` is unknown, the shapes of
        ``x0``, ``surrogate`` or ``aggregates`` do not match, ``solver="twolevel"`` is
        asked for without ``aggregates``, or ``solver="dense"`` is asked for a component
        larger than ``DENSE_MAX_NODES``.

    Warns
    -----
    EigenConvergenceWarning
        When some residual exceeds ``tol``.

    Notes
    -----
    With ``v = D^1/2 y`` the generalised problem becomes ``L v = lambda v`` with
    ``L = I - D^-1/2 W D^-1/2`` (Shi & Malik 2000, eq. (7)-(8)); its spectrum lies in
    ``[0, 2]``. The spectrum of a disconnected graph is the union of its components'
    spectra, and each component contributes the eigenvalue 0 with eigenvector
    ``D^1/2 1`` on the component (Chung 1997, Lemma 1.7). Components are therefore
    found first; every component's null vector is known in closed form and is
    deflated from the iterative solvers, and only the non-zero part of each
    component's spectrum is computed, so no solver ever sees a singular
    multi-component problem. When there are at least ``k`` components the result is
    ``k`` null vectors, taken from the components of largest volume (sum of degrees),
    ties broken by first node.

    References
    ----------
    J. Shi, J. Malik, Normalized cuts and image segmentation, IEEE TPAMI 22(8), 2000.
    F. R. K. Chung, *Spectral Graph Theory*, AMS 1997.
    A. V. Knyazev, Toward the optimal preconditioned eigensolver: LOBPCG, SIAM J. Sci.
    Comput. 23(2), 2001.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> n = 6  # path graph 0-1-2-3-4-5
    >>> W = sp.diags([np.ones(n - 1), np.ones(n - 1)], [-1, 1], format="csr")
    >>> ep = laplacian_eigenpairs(W, 3, solver="dense")
    >>> np.round(ep.values, 6)  # 1 - cos(pi j / (n - 1)), Chung 1997, sec. 1.2
    array([0.      , 0.190983, 0.690983])
    """
    t_start = time.perf_counter()
    if solver not in SOLVERS:
        raise ValueError(f"unknown solver {solver!r}; valid solvers: {', '.join(SOLVERS)}")
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise ValueError(f"k must be a positive integer; got {k!r}")
    if not (isinstance(tol, (int, float, np.floating)) and np.isfinite(tol) and tol > 0):
        raise ValueError(f"tol must be a positive finite number; got {tol!r}")
    if maxiter is not None and (
        isinstance(maxiter, bool) or not isinstance(maxiter, (int, np.integer)) or maxiter < 1
    ):
        raise ValueError(f"maxiter must be None or a positive integer; got {maxiter!r}")
    W = _check_affinity(W)
    n = W.shape[0]
    if x0 is not None:
        x0 = _check_block(x0, n)
    if surrogate is not None:
        surrogate = _check_affinity(surrogate, "surrogate")
        if surrogate.shape != W.shape:
            raise ValueError(f"surrogate must have the shape of W {W.shape}; got {surrogate.shape}")
    if aggregates is not None:
        aggregates = np.asarray(aggregates)
        if aggregates.shape != (n,) or not np.issubdtype(aggregates.dtype, np.integer):
            raise ValueError(
                f"aggregates must be an integer array of shape ({n},); "
                f"got {aggregates.dtype} {aggregates.shape}"
            )
    elif solver == "twolevel":
        raise ValueError("solver='twolevel' needs aggregates (imgcut.twolevel.tile_aggregates)")
    rng = np.random.default_rng(seed)
    k = int(min(k, n))
    timings: dict[str, float] = {}

    t0 = time.perf_counter()
    d = np.asarray(W.sum(axis=1)).ravel()
    # csgraph treats stored entries as edges even when their weight underflowed to 0
    # (affinity_graph keeps every pair within the radius), so search on the positive ones.
    n_comp, labels = _positive_components(W)
    sizes = np.bincount(labels, minlength=n_comp)
    volumes = np.bincount(labels, weights=d, minlength=n_comp)
    first = np.full(n_comp, n, dtype=np.int64)
    np.minimum.at(first, labels, np.arange(n, dtype=np.int64))
    timings["components"] = time.perf_counter() - t0

    sqrt_d = np.sqrt(d)
    # Components ordered by volume (desc), then first node.
    comp_order = np.lexsort((first, -volumes))

    def null_vector(c: int) -> np.ndarray:
        v = np.zeros(n)
        idx = labels == c
        if d[idx].sum() > 0:
            v[idx] = sqrt_d[idx] / np.sqrt(d[idx].sum())
        else:  # isolated node: its indicator (Chung 1997 convention L_uu = 0)
            v[idx] = 1.0
        return v

    cand_vals: list[float] = []
    cand_vecs: list[np.ndarray] = []
    n_null = min(n_comp, k)
    for c in comp_order[:n_null]:
        cand_vals.append(0.0)
        cand_vecs.append(null_vector(int(c)))

    total_iters = 0
    solver_used = "none"
    info: dict = {}
    t_setup = 0.0
    t_solve = 0.0
    m_extra = k - n_null  # non-zero eigenvalues needed overall
    if m_extra > 0:
        nonzero_vals: list[np.ndarray] = []
        nonzero_vecs: list[tuple[np.ndarray, np.ndarray]] = []
        for c in comp_order:
            n_c = int(sizes[c])
            m = min(m_extra, n_c - 1)
            if m < 1:
                continue
            idx = np.flatnonzero(labels == c)
            Wc = W[idx][:, idx] if n_comp > 1 else W
            dc = d[idx]
            backend = _component_solver(solver, n_c, m, aggregates is not None)
            Sc = _scaled_affinity(Wc, 1.0 / np.sqrt(dc))
            Lc = None if backend == "arpack" else _identity_minus(Sc)
            u = sqrt_d[idx] / np.sqrt(dc.sum())
            x0c = None
            if x0 is not None:
                x0c = x0[idx] * sqrt_d[idx, None]  # y -> v = D^1/2 y
            ts = time.perf_counter()
            if backend == "dense":
                res = _solve_dense(Lc, m)
            elif backend == "twolevel":
                agg_c = aggregates[idx] if n_comp > 1 else aggregates
                res = _solve_twolevel(Lc, Sc, dc, u, m, tol, maxiter, rng, x0c, agg_c, solver)
            elif backend == "arpack":
                res = _solve_arpack(Sc, u, m, tol, maxiter, rng, x0c)
            else:
                Pc = None
                if surrogate is not None:
                    Sc = surrogate[idx][:, idx] if n_comp > 1 else surrogate
                    ds = np.asarray(Sc.sum(axis=1)).ravel()
                    isq = 1.0 / np.sqrt(dc)
                    # Surrogate Laplacian D_s - W_s normalised with the degrees of W.
                    Pc = sp.csr_matrix(sp.diags(isq) @ (sp.diags(ds) - Sc) @ sp.diags(isq))
                res = _solve_lobpcg(Lc, u, m, tol, maxiter, rng, x0c, Pc)
            t_solve += time.perf_counter() - ts
            if solver_used == "none" or c == comp_order[0]:
                solver_used = res.solver
            total_iters += res.iterations
            info.update(res.info)
            nonzero_vals.append(res.values)
            nonzero_vecs.extend((idx, res.vectors[:, j]) for j in range(res.values.size))
        all_vals = np.concatenate(nonzero_vals) if nonzero_vals else np.empty(0)
        pick = np.argsort(all_vals, kind="stable")[:m_extra]
        for j in pick:
            idx, vec = nonzero_vecs[j]
            v = np.zeros(n)
            v[idx] = vec
            cand_vals.append(float(all_vals[j]))
            cand_vecs.append(v)
    timings["setup"] = t_setup
    timings["solve"] = t_solve

    t0 = time.perf_counter()
    values = np.asarray(cand_vals, dtype=np.float64)
    V = np.column_stack(cand_vecs) if cand_vecs else np.zeros((n, 0))
    V /= np.linalg.norm(V, axis=0)
    order = np.argsort(values, kind="stable")
    values, V = values[order], V[:, order]
    L = _laplacian_from(W, d)
    residuals = np.linalg.norm(L @ V - V * values, axis=0)
    Y = V.copy()
    pos = d > 0
    Y[pos] = V[pos] / sqrt_d[pos, None]  # y = D^-1/2 v (Shi & Malik 2000, eq. (7))
    Y = _fix_signs(Y)
    timings["check"] = time.perf_counter() - t0
    converged = bool(np.all(residuals <= tol))
    if not converged:
        bad = residuals > tol
        warnings.warn(
            f"{int(bad.sum())} of {k} eigenpairs have residuals above tol={tol:g} "
            f"(largest {residuals.max():.2e}) with solver {solver_used!r} after "
            f"{total_iters} iterations; raise maxiter, loosen tol, or try another solver "
            f"(valid: {', '.join(SOLVERS)})",
            EigenConvergenceWarning,
            stacklevel=2,
        )
    timings["total"] = time.perf_counter() - t_start
    return Eigenpairs(
        values=values,
        vectors=Y,
        residuals=residuals,
        solver=solver_used,
        iterations=int(total_iters),
        n_components=int(n_comp),
        component_labels=labels,
        tol=float(tol),
        converged=converged,
        timings=timings,
        info=info,
    )
