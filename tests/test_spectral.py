"""Tests of imgcut.spectral: closed-form spectra, backends, components, options."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from imgcut._errors import EigenConvergenceWarning
from imgcut.spectral import (
    SOLVERS,
    Eigenpairs,
    connected_components,
    laplacian_eigenpairs,
    normalized_laplacian,
)

ITERATIVE = ("lobpcg-amg", "arpack")
BACKENDS = ("dense", "lobpcg-amg", "arpack")


# ----------------------------------------------------------------------------- graphs


def path_graph(n: int, *, regular_loops: bool = False) -> sp.csr_matrix:
    """Path 0-1-...-(n-1); with ``regular_loops`` the two ends get a self-loop of weight 1.

    The loops make every degree 2 while ``D - W`` stays the path's combinatorial
    Laplacian, so the normalised Laplacian is exactly half of it.
    """
    W = sp.diags([np.ones(n - 1), np.ones(n - 1)], [-1, 1], format="lil")
    if regular_loops:
        W[0, 0] = 1.0
        W[n - 1, n - 1] = 1.0
    return sp.csr_matrix(W)


def cycle_graph(n: int) -> sp.csr_matrix:
    W = sp.diags([np.ones(n - 1), np.ones(n - 1)], [-1, 1], format="lil")
    W[0, n - 1] = W[n - 1, 0] = 1.0
    return sp.csr_matrix(W)


def grid_graph(rows: int, cols: int, *, regular_loops: bool = False) -> sp.csr_matrix:
    """4-neighbour grid = Cartesian product P_rows x P_cols (raster node order)."""
    A = path_graph(rows)
    B = path_graph(cols)
    W = sp.kron(A, sp.identity(cols)) + sp.kron(sp.identity(rows), B)
    W = sp.csr_matrix(W)
    if regular_loops:
        deg = np.asarray(W.sum(axis=1)).ravel()
        W = sp.csr_matrix(W + sp.diags(4.0 - deg))
    return W


def random_image_graph(rows: int, cols: int, seed: int = 0) -> sp.csr_matrix:
    """8-neighbour grid with Shi-Malik-like weights from a random piecewise image."""
    rng = np.random.default_rng(seed)
    img = (np.arange(cols)[None, :] > cols // 2).astype(float) + 0.1 * rng.standard_normal(
        (rows, cols)
    )
    n = rows * cols
    idx = np.arange(n).reshape(rows, cols)
    rows_i, cols_j, vals = [], [], []
    for dr, dc in ((0, 1), (1, 0), (1, 1), (1, -1)):
        r0, r1 = 0, rows - dr
        c0, c1 = max(0, -dc), cols - max(0, dc)
        a = idx[r0:r1, c0:c1].ravel()
        b = idx[r0 + dr : r1 + dr, c0 + dc : c1 + dc].ravel()
        diff = img.ravel()[a] - img.ravel()[b]
        w = np.exp(-(diff**2) / 0.05) * np.exp(-(dr * dr + dc * dc) / 4.0)
        rows_i += [a, b]
        cols_j += [b, a]
        vals += [w, w]
    return sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows_i), np.concatenate(cols_j))), shape=(n, n)
    )


def reference_values(W, k):
    L = normalized_laplacian(W).toarray()
    return scipy.linalg.eigvalsh(L)[:k]


# ----------------------------------------------------------------------------- closed forms


@pytest.mark.parametrize("n", [2, 7, 40])
def test_path_normalized_laplacian_closed_form(n):
    # Chung 1997 (Spectral Graph Theory), sec. 1.2 examples: the path P_n has normalised
    # Laplacian eigenvalues 1 - cos(pi j / (n - 1)), j = 0..n-1. (Example numbers in
    # these comments are from memory; the formulas were checked numerically with eigh.)
    expected = 1 - np.cos(np.pi * np.arange(n) / (n - 1))
    ep = laplacian_eigenpairs(path_graph(n), n, solver="dense")
    np.testing.assert_allclose(ep.values, expected, atol=1e-12)


@pytest.mark.parametrize("n", [5, 12, 33])
def test_path_combinatorial_closed_form(n):
    # Combinatorial Laplacian of P_n: 2 - 2 cos(pi j / n), j = 0..n-1 (standard result,
    # e.g. Brouwer & Haemers, Spectra of Graphs, 2012, sec. 1.4.4). With unit self-loops
    # at the ends the graph is 2-regular and D - W is unchanged, so L = (D - W) / 2.
    expected = (2 - 2 * np.cos(np.pi * np.arange(n) / n)) / 2
    ep = laplacian_eigenpairs(path_graph(n, regular_loops=True), n, solver="dense")
    np.testing.assert_allclose(ep.values, expected, atol=1e-12)


@pytest.mark.parametrize("n", [3, 8, 25])
def test_cycle_closed_form(n):
    # Chung 1997, sec. 1.2 examples: the cycle C_n has eigenvalues 1 - cos(2 pi j / n).
    expected = np.sort(1 - np.cos(2 * np.pi * np.arange(n) / n))
    ep = laplacian_eigenpairs(cycle_graph(n), n, solver="dense")
    np.testing.assert_allclose(ep.values, expected, atol=1e-12)


@pytest.mark.parametrize("solver", BACKENDS)
def test_grid_is_kronecker_sum_of_paths(solver):
    # The Laplacian of a Cartesian product is the Kronecker sum of the factors'
    # Laplacians, so its eigenvalues are all sums mu_i + nu_j (Brouwer & Haemers 2012,
    # sec. 1.4.6); for paths mu_i = 2 - 2 cos(pi i / a). Self-loops make the grid
    # 4-regular without changing D - W, so the normalised Laplacian is (D - W) / 4.
    a, b, k = 30, 24, 6
    mu = 2 - 2 * np.cos(np.pi * np.arange(a) / a)
    nu = 2 - 2 * np.cos(np.pi * np.arange(b) / b)
    expected = np.sort((mu[:, None] + nu[None, :]).ravel())[:k] / 4
    ep = laplacian_eigenpairs(
        grid_graph(a, b, regular_loops=True), k, solver=solver, seed=1, tol=1e-8
    )
    assert ep.solver == solver
    np.testing.assert_allclose(ep.values, expected, atol=1e-9)
    assert np.all(ep.residuals <= 1e-8)


def test_complete_graph_closed_form():
    # Chung 1997, sec. 1.2 examples: K_n has eigenvalue 0 once and n/(n-1) with multiplicity n-1.
    n = 9
    W = sp.csr_matrix(np.ones((n, n)) - np.eye(n))
    ep = laplacian_eigenpairs(W, n, solver="dense")
    np.testing.assert_allclose(ep.values[0], 0.0, atol=1e-12)
    np.testing.assert_allclose(ep.values[1:], n / (n - 1), atol=1e-12)


# ----------------------------------------------------------------------------- components


def test_zero_multiplicity_equals_components():
    # Chung 1997, Lemma 1.7: the multiplicity of 0 is the number of components.
    W = sp.block_diag([path_graph(10), cycle_graph(7), sp.csr_matrix((1, 1)), path_graph(4)])
    W = sp.csr_matrix(W)
    n_comp, labels = connected_components(W)
    assert n_comp == 4
    assert labels.tolist() == [0] * 10 + [1] * 7 + [2] + [3] * 4
    ep = laplacian_eigenpairs(W, 7, solver="dense")
    assert ep.n_components == 4
    assert np.sum(ep.values < 1e-12) == 4
    np.testing.assert_allclose(ep.values, reference_values(W, 7), atol=1e-12)


@pytest.mark.parametrize("solver", BACKENDS)
def test_disconnected_union_of_spectra(solver):
    # The spectrum of a disjoint union is the union of the spectra (Chung 1997, sec. 1.2);
    # reference: scipy.linalg.eigh on the dense normalised Laplacian.
    W = sp.csr_matrix(sp.block_diag([random_image_graph(18, 20, 0), random_image_graph(22, 25, 1)]))
    k = 6
    ep = laplacian_eigenpairs(W, k, solver=solver, seed=0, tol=1e-8)
    assert ep.n_components == 2
    np.testing.assert_allclose(ep.values, reference_values(W, k), atol=1e-7)
    # Every vector lives on one component.
    for j in range(k):
        support = np.unique(ep.component_labels[np.abs(ep.vectors[:, j]) > 1e-12])
        assert support.size == 1


def test_isolated_nodes_are_components_with_zero_eigenvalue():
    W = sp.csr_matrix(sp.block_diag([path_graph(5), sp.csr_matrix((2, 2))]))
    ep = laplacian_eigenpairs(W, 4, solver="dense")
    assert ep.n_components == 3
    np.testing.assert_allclose(ep.values[:3], 0.0, atol=1e-14)
    # Volume order: the path's null vector first, then the isolated nodes' indicators.
    np.testing.assert_allclose(ep.vectors[5:, 1:3], np.eye(2))
    L = normalized_laplacian(W).toarray()
    assert L[5, 5] == 0.0 and L[6, 6] == 0.0


def test_more_components_than_k():
    W = sp.csr_matrix(sp.block_diag([path_graph(3), path_graph(6), path_graph(4)]))
    ep = laplacian_eigenpairs(W, 2, solver="arpack")
    np.testing.assert_allclose(ep.values, 0.0, atol=1e-14)
    assert ep.solver == "none" and ep.iterations == 0
    # Largest-volume components first: path(6) then path(4).
    assert np.all(ep.component_labels[np.abs(ep.vectors[:, 0]) > 0] == 1)
    assert np.all(ep.component_labels[np.abs(ep.vectors[:, 1]) > 0] == 2)


# ----------------------------------------------------------------------------- backends


@pytest.mark.parametrize("solver", BACKENDS)
def test_backends_agree_with_lapack(solver):
    # Reference: scipy.linalg.eigh (LAPACK) on the dense normalised Laplacian.
    W = random_image_graph(30, 34, seed=3)
    k = 8
    ep = laplacian_eigenpairs(W, k, solver=solver, seed=0, tol=1e-8)
    np.testing.assert_allclose(ep.values, reference_values(W, k), atol=1e-6)
    assert ep.solver == solver
    assert ep.converged and np.all(ep.residuals <= 1e-8)


@pytest.mark.parametrize("solver", BACKENDS)
def test_vectors_are_generalised_and_normalised(solver):
    W = random_image_graph(24, 30, seed=5)
    ep = laplacian_eigenpairs(W, 5, solver=solver, seed=0, tol=1e-9)
    d = np.asarray(W.sum(axis=1)).ravel()
    Y = ep.vectors
    # (D - W) y = lambda D y  (Shi & Malik 2000, eq. (6)).
    lhs = (sp.diags(d) - W) @ Y
    np.testing.assert_allclose(lhs, (d[:, None] * Y) * ep.values, atol=1e-7)
    # y^T D y = I (D-orthonormal).
    np.testing.assert_allclose(Y.T @ (d[:, None] * Y), np.eye(5), atol=1e-8)
    # Sign: the entry of largest magnitude is positive.
    idx = np.argmax(np.abs(Y), axis=0)
    assert np.all(Y[idx, np.arange(5)] > 0)
    # Residuals are what they say they are.
    V = Y * np.sqrt(d)[:, None]
    L = normalized_laplacian(W)
    np.testing.assert_allclose(
        ep.residuals, np.linalg.norm(L @ V - V * ep.values, axis=0), rtol=1e-6, atol=1e-14
    )


@pytest.mark.parametrize("solver", ITERATIVE)
def test_maxiter_honoured(solver):
    W = random_image_graph(40, 40, seed=2)
    with pytest.warns(EigenConvergenceWarning, match="raise maxiter"):
        ep = laplacian_eigenpairs(W, 6, solver=solver, maxiter=1, seed=0, tol=1e-8)
    assert not ep.converged
    assert ep.residuals.max() > 1e-6
    assert ep.values.shape == (6,)


@pytest.mark.parametrize("solver", ITERATIVE)
def test_tol_honoured(solver):
    W = random_image_graph(40, 40, seed=2)
    loose = laplacian_eigenpairs(W, 6, solver=solver, tol=1e-3, seed=0)
    tight = laplacian_eigenpairs(W, 6, solver=solver, tol=1e-9, seed=0)
    assert np.all(loose.residuals <= 1e-3) and np.all(tight.residuals <= 1e-9)
    assert tight.iterations > loose.iterations
    assert loose.residuals.max() > tight.residuals.max()


def test_dense_is_direct():
    # The dense backend is LAPACK: maxiter has no effect and any tol >= 1e-13 is met.
    W = random_image_graph(12, 12, seed=2)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        a = laplacian_eigenpairs(W, 4, solver="dense", maxiter=1, tol=1e-13)
    assert a.iterations == 0 and a.converged


@pytest.mark.parametrize("solver", BACKENDS)
def test_deterministic_with_seed(solver):
    W = random_image_graph(30, 30, seed=4)
    a = laplacian_eigenpairs(W, 5, solver=solver, seed=7)
    b = laplacian_eigenpairs(W, 5, solver=solver, seed=np.random.default_rng(7))
    np.testing.assert_array_equal(a.values, b.values)
    np.testing.assert_array_equal(a.vectors, b.vectors)


@pytest.mark.parametrize(("solver", "k"), [("lobpcg-amg", 5), ("arpack", 2)])
def test_warm_start_used(solver, k):
    # ARPACK takes a single start vector (the sum of the x0 columns), so its warm start
    # only pays off clearly for one wanted vector.
    W = random_image_graph(40, 40, seed=6)
    cold = laplacian_eigenpairs(W, k, solver=solver, seed=0, tol=1e-8)
    warm = laplacian_eigenpairs(W, k, solver=solver, seed=0, tol=1e-8, x0=cold.vectors)
    assert warm.iterations < cold.iterations
    np.testing.assert_allclose(warm.values, cold.values, atol=1e-9)


def test_surrogate_preconditioner_gives_same_spectrum():
    W = random_image_graph(40, 44, seed=8)
    # Surrogate: the 4-neighbour part of the 8-neighbour graph (same weights).
    rows, cols = 40, 44
    r, c = np.divmod(np.arange(rows * cols), cols)
    coo = W.tocoo()
    keep = np.abs(r[coo.row] - r[coo.col]) + np.abs(c[coo.row] - c[coo.col]) == 1
    S = sp.csr_matrix((coo.data[keep], (coo.row[keep], coo.col[keep])), shape=W.shape)
    ep = laplacian_eigenpairs(W, 6, solver="lobpcg-amg", surrogate=S, seed=0, tol=1e-8)
    np.testing.assert_allclose(ep.values, reference_values(W, 6), atol=1e-7)


# ----------------------------------------------------------------------------- edge cases


def test_single_node():
    ep = laplacian_eigenpairs(sp.csr_matrix((1, 1)), 3)
    assert isinstance(ep, Eigenpairs)
    assert ep.values.tolist() == [0.0] and ep.vectors.tolist() == [[1.0]]
    assert ep.n_components == 1


def test_fewer_nodes_than_k_returns_n_pairs():
    ep = laplacian_eigenpairs(path_graph(4), 10)
    assert ep.values.shape == (4,) and ep.vectors.shape == (4, 4)
    np.testing.assert_allclose(ep.values, 1 - np.cos(np.pi * np.arange(4) / 3), atol=1e-12)


@pytest.mark.parametrize("solver", BACKENDS)
def test_constant_image_graph(solver):
    # A constant image gives equal weights: the 4-neighbour grid graph. Reference: eigh.
    W = grid_graph(30, 40)
    ep = laplacian_eigenpairs(W, 4, solver=solver, seed=0, tol=1e-8)
    np.testing.assert_allclose(ep.values, reference_values(W, 4), atol=1e-8)
    # The first vector is constant (y = 1 / sqrt(vol)).
    np.testing.assert_allclose(ep.vectors[:, 0], 1 / np.sqrt(W.sum()), rtol=1e-8)


def test_single_row_image_is_a_path():
    W = grid_graph(1, 300)
    ep = laplacian_eigenpairs(W, 3, seed=0, tol=1e-8)
    # Chung 1997, sec. 1.2 examples (path P_n).
    np.testing.assert_allclose(ep.values, 1 - np.cos(np.pi * np.arange(3) / 299), atol=1e-9)


# ----------------------------------------------------------------------------- bad input


def test_invalid_solver_lists_valid_ones():
    with pytest.raises(ValueError, match="lobpcg-amg, arpack, dense"):
        laplacian_eigenpairs(path_graph(5), 2, solver="lanczos")
    assert set(SOLVERS) == {"auto", "twolevel", "lobpcg-amg", "arpack", "dense"}


@pytest.mark.parametrize(
    ("W", "kwargs", "match"),
    [
        (path_graph(5), {"k": 0}, "k must be a positive integer"),
        (path_graph(5), {"k": 2, "tol": 0.0}, "tol must be"),
        (path_graph(5), {"k": 2, "maxiter": 0}, "maxiter must be"),
        (np.ones((3, 3)), {"k": 2}, "scipy.sparse"),
        (sp.csr_matrix(np.ones((2, 3))), {"k": 2}, "square"),
        (sp.csr_matrix([[0.0, -1.0], [-1.0, 0.0]]), {"k": 2}, "negative"),
        (sp.csr_matrix([[0.0, 1.0], [2.0, 0.0]]), {"k": 2}, "symmetric"),
        (sp.csr_matrix([[0.0, np.nan], [np.nan, 0.0]]), {"k": 2}, "NaN"),
        (path_graph(5), {"k": 2, "x0": np.ones((4, 2))}, "x0 must have shape"),
        (path_graph(5), {"k": 2, "surrogate": path_graph(4)}, "surrogate must have"),
    ],
)
def test_bad_input(W, kwargs, match):
    with pytest.raises(ValueError, match=match):
        laplacian_eigenpairs(W, **kwargs)


def test_dense_refuses_large_components():
    with pytest.raises(ValueError, match="at most"):
        laplacian_eigenpairs(grid_graph(70, 70), 2, solver="dense")


def test_stored_zero_weights_do_not_connect_components():
    """Two blocks joined only by explicitly stored zeros are two components: the
    multiplicity of eigenvalue 0 equals the number of components (Chung 1997, Lemma 1.7)."""
    rows = np.array([0, 1, 2, 3, 1, 2])
    cols = np.array([1, 0, 3, 2, 2, 1])
    vals = np.array([1.0, 1.0, 1.0, 1.0, 0.0, 0.0])  # the 1-2 link is a stored zero
    W = sp.csr_matrix((vals, (rows, cols)), shape=(4, 4))
    assert W.nnz == 6
    n_comp, labels = connected_components(W)
    assert n_comp == 2 and labels.tolist() == [0, 0, 1, 1]
    ep = laplacian_eigenpairs(W, 2, solver="dense")
    assert ep.n_components == 2
    np.testing.assert_allclose(ep.values, [0.0, 0.0], atol=1e-12)
    # the caller's matrix is left as it was
    assert W.nnz == 6 and W.indptr.tolist() == [0, 1, 3, 5, 6]


# ---------------------------------------------------------------------------------------------
# The tuned Lanczos backend (default above 1000 nodes)
# ---------------------------------------------------------------------------------------------


def test_scaled_affinity_matches_the_sparse_product():
    from imgcut.spectral import _scaled_affinity

    W = random_image_graph(9, 11, seed=3)
    s = np.random.default_rng(1).uniform(0.5, 2.0, W.shape[0])
    direct = (sp.diags(s) @ W @ sp.diags(s)).toarray()
    np.testing.assert_allclose(_scaled_affinity(W, s).toarray(), direct, rtol=1e-14, atol=0)


@pytest.mark.parametrize("tol", [1e-5, 1e-9])
def test_auto_lanczos_meets_tol_and_finds_the_smallest_set(tol):
    # Reference: LAPACK eigh on the dense normalised Laplacian (Chung 1997, sec. 1.2). At
    # tol 1e-5 the products run in float32 (FLOAT32_MIN_TOL), at 1e-9 in float64; both must
    # meet tol in float64 and return the k smallest eigenvalues, not a neighbouring set.
    W = random_image_graph(40, 40, seed=8)
    k = 8
    ep = laplacian_eigenpairs(W, k, tol=tol, seed=0)
    assert ep.solver == "arpack" and ep.converged
    assert np.all(ep.residuals <= tol)
    ref = scipy.linalg.eigh(normalized_laplacian(W).toarray(), eigvals_only=True)[:k]
    np.testing.assert_allclose(ep.values, ref, atol=max(tol, 1e-12))
    # The guard pairs lie at or above the last returned eigenvalue.
    assert min(ep.info["guard_values"]) >= ep.values[-1] - tol
