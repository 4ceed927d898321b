"""Tests for imgcut/multiscale.py: grid transfer operators, the Galerkin hierarchy, the
multiscale pencil's eigenpairs and recovery of known regions."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from imgcut import multiscale as ms
from imgcut._errors import EigenConvergenceWarning
from imgcut.features import compute_features
from imgcut.graph import affinity_graph
from imgcut.multiscale import (
    coarsen_features,
    galerkin_graph,
    multiscale_eigenpairs,
    multiscale_problem,
    prolongation,
    restriction,
)
from imgcut.partition import kway_ncut


def _image(h, w, seed=0):
    rng = np.random.default_rng(seed)
    img = np.zeros((h, w))
    img[:, w // 2 :] = 1.0
    img[: h // 3] += 0.5
    return img + 0.05 * rng.standard_normal((h, w))


def _dense_pencil(prob, s=0):
    n = prob.shapes[s][0] * prob.shapes[s][1]
    eye = np.eye(n)
    return prob.apply(s, eye), prob.apply(s, eye, mass=True)


# --------------------------------------------------------------------------- operators


@pytest.mark.parametrize("shape", [(4, 6), (5, 7), (1, 9), (3, 3)])
@pytest.mark.parametrize("factor", [1, 2, 3])
def test_prolongation_restriction_preserve_constants(shape, factor):
    P = prolongation(shape, factor)
    C = restriction(shape, factor)
    nc = P.shape[1]
    np.testing.assert_allclose(P @ np.full(nc, 3.5), 3.5)  # P 1 = 1
    np.testing.assert_allclose(C @ np.full(P.shape[0], -2.0), -2.0)  # C 1 = 1
    np.testing.assert_allclose((C @ P).toarray(), np.eye(nc), atol=1e-15)  # C P = I
    # every pixel belongs to exactly one block
    np.testing.assert_array_equal(np.asarray(P.sum(axis=1)).ravel(), 1.0)


def test_restriction_is_block_mean():
    x = np.arange(20.0).reshape(4, 5)
    got = (restriction((4, 5), 2) @ x.ravel()).reshape(2, 3)
    # independent: block means by explicit slicing (partial last column)
    want = np.array(
        [[x[i : i + 2, j : j + 2].mean() for j in range(0, 5, 2)] for i in range(0, 4, 2)]
    )
    np.testing.assert_allclose(got, want)


def test_galerkin_graph_preserves_degrees_and_quotient():
    img = _image(9, 11)
    W = affinity_graph(img, radius=2).weights
    Gc = galerkin_graph(W, (9, 11))
    P = prolongation((9, 11), 2)
    np.testing.assert_allclose((Gc - P.T @ W @ P).toarray(), 0, atol=1e-12)
    # row sums of the coarse graph are the block sums of the fine degrees (P^T d)
    d = np.asarray(W.sum(axis=1)).ravel()
    np.testing.assert_allclose(np.asarray(Gc.sum(axis=1)).ravel(), P.T @ d, rtol=1e-12)
    # Rayleigh quotient of z on the coarse graph = that of P z on the fine graph
    z = np.random.default_rng(1).standard_normal(Gc.shape[0])
    dc = np.asarray(Gc.sum(axis=1)).ravel()
    q_c = (z @ (dc * z) - z @ (Gc @ z)) / (z @ (dc * z))
    y = P @ z
    q_f = (y @ (d * y) - y @ (W @ y)) / (y @ (d * y))
    assert q_c == pytest.approx(q_f, rel=1e-12)


@pytest.mark.parametrize("shape", [(9, 11), (8, 6), (1, 7), (7, 1)])
@pytest.mark.parametrize("chunk_rows", [1 << 22, 4, 1])
def test_galerkin_graph_equals_the_matrix_product_in_chunks(shape, chunk_rows):
    W = affinity_graph(_image(*shape), radius=2).weights
    before = W.copy()
    Gc = galerkin_graph(W, shape, chunk_rows=chunk_rows)
    P = prolongation(shape, 2)
    np.testing.assert_allclose((Gc - P.T @ W @ P).toarray(), 0, atol=1e-12)
    assert Gc.has_sorted_indices
    # the aggregation reads W's arrays through views: it must not write into them
    np.testing.assert_array_equal(W.data, before.data)
    np.testing.assert_array_equal(W.indices, before.indices)


def test_galerkin_graph_rejects_wrong_shape():
    with pytest.raises(ValueError, match="grid of shape"):
        galerkin_graph(sp.identity(6, format="csr"), (2, 2))


def test_coarsen_features_keeps_thin_edges():
    img = np.zeros((8, 8))
    img[:, 3] = 1.0  # a one-pixel line
    f = compute_features(img)
    c = coarsen_features(f)
    assert c.values.shape == (4, 4, 1)
    v = f.values[..., 0]
    np.testing.assert_allclose(c.values[..., 0], v.reshape(4, 2, 4, 2).mean(axis=(1, 3)))
    assert c.edges.max() == pytest.approx(f.edges.max())  # block maxima


def test_bad_options():
    with pytest.raises(ValueError, match="factor"):
        prolongation((4, 4), 0)
    with pytest.raises(ValueError, match="shape"):
        prolongation((0, 4), 2)
    with pytest.raises(ValueError, match="levels"):
        multiscale_problem(_image(8, 8), levels=0)
    with pytest.raises(ValueError, match="cue"):
        multiscale_problem(_image(8, 8), cue="colour")
    with pytest.raises(ValueError, match="radius_fine"):
        multiscale_problem(_image(8, 8), radius_fine=0.5)
    with pytest.raises(ValueError, match="preconditioner"):
        multiscale_eigenpairs(_image(8, 8), 2, preconditioner="ilu")
    with pytest.raises(ValueError, match="k must"):
        multiscale_eigenpairs(_image(8, 8), 0)


# --------------------------------------------------------------------------- the pencil


@pytest.mark.parametrize("shape", [(6, 8), (7, 9), (6, 9), (7, 8), (1, 5), (3, 1)])
def test_grid_block_operators_match_the_prolongation_matrix(shape):
    # P (and P^T) built independently as a sparse matrix by prolongation(); the fast
    # strided operators must agree with it for every parity of the grid
    grid = ms._Grid(shape)
    P = prolongation(shape, 2).toarray()
    rng = np.random.default_rng(1)
    x = rng.standard_normal((shape[0] * shape[1], 3))
    z = rng.standard_normal((P.shape[1], 3))
    np.testing.assert_allclose(grid.block_sum(x), P.T @ x, atol=1e-12)
    np.testing.assert_allclose(grid.expand(z), P @ z, atol=1e-12)
    y = x.copy()
    grid.add_expanded(y, z)
    np.testing.assert_allclose(y, x + P @ z, atol=1e-12)
    y = np.asfortranarray(x)  # not C-contiguous: must still be updated in place
    grid.add_expanded(y, z)
    np.testing.assert_allclose(y, x + P @ z, atol=1e-12)
    np.testing.assert_allclose(grid.average(x), (P / P.sum(axis=0)).T @ x, atol=1e-12)


@pytest.mark.parametrize("bottom", [700, 20])
def test_vcycle_is_a_convergent_symmetric_preconditioner(monkeypatch, bottom):
    # bottom=20 sends the cycle through extra aggregates below the coarsest level
    monkeypatch.setattr(ms, "_DENSE_BOTTOM", bottom)
    prob = multiscale_problem(_image(16, 14), levels=2)
    sigma = 0.01
    vc = ms._VCycle(prob, sigma)
    assert (len(vc.extra) > 0) == (bottom == 20)
    A, B = _dense_pencil(prob)
    M = A + sigma * B
    n = M.shape[0]
    V = vc(0, np.eye(n))  # the preconditioner as a matrix
    # A symmetric V-cycle (same smoother before and after, Galerkin coarse levels, exact
    # bottom solve) is a symmetric positive definite operator whose error propagation
    # I - V M contracts in the M-norm (Trottenberg, Oosterlee & Schueller, Multigrid,
    # 2001, sec. 2.4 / 6.2 for aggregation-type cycles).
    np.testing.assert_allclose(V, V.T, atol=1e-10 * np.abs(V).max())
    assert np.linalg.eigvalsh((V + V.T) / 2).min() > 0
    Ms = scipy.linalg.sqrtm(M).real
    E = Ms @ (np.eye(n) - V @ M) @ np.linalg.inv(Ms)
    assert np.linalg.norm(E, 2) < 1 - 1e-3


def test_pencil_is_symmetric_psd_with_constant_null_vector():
    prob = multiscale_problem(_image(12, 10), levels=3)
    A, B = _dense_pencil(prob)
    np.testing.assert_allclose(A, A.T, atol=1e-12)
    np.testing.assert_allclose(B, B.T, atol=1e-12)
    np.testing.assert_allclose(A @ np.ones(A.shape[0]), 0, atol=1e-10)
    assert np.linalg.eigvalsh(B).min() > 0
    # generalised eigenvalues in [0, 2] like any normalized Laplacian (Chung 1997, sec. 1.2)
    lam = scipy.linalg.eigh(A, B, eigvals_only=True)
    assert lam.min() > -1e-10 and lam.max() < 2 + 1e-10


def test_levels_are_galerkin_projections_and_bound_the_fine_spectrum():
    prob = multiscale_problem(_image(16, 14), levels=3)
    A0, B0 = _dense_pencil(prob, 0)
    fine = scipy.linalg.eigh(A0, B0, eigvals_only=True)
    for s in (1, 2):
        P = prolongation(prob.shapes[0], 2)
        for t in range(1, s):
            P = P @ prolongation(prob.shapes[t], 2)
        P = P.toarray()
        As, Bs = _dense_pencil(prob, s)
        np.testing.assert_allclose(P.T @ A0 @ P, As, atol=1e-10 * np.abs(As).max())
        np.testing.assert_allclose(P.T @ B0 @ P, Bs, atol=1e-10 * np.abs(Bs).max())
        coarse = scipy.linalg.eigh(As, Bs, eigvals_only=True)
        # Courant-Fischer min-max (Rayleigh-Ritz on range(P)): the j-th Ritz value is an
        # upper bound of the j-th eigenvalue, mu_j >= lambda_j (Parlett 1998, thm 11.4.1;
        # Cauchy interlacing for the B-orthonormalised projection).
        assert np.all(coarse >= fine[: coarse.size] - 1e-10)


def test_coarse_level_diagonals_and_l1_bound():
    prob = multiscale_problem(_image(10, 12), levels=3)
    A, B = _dense_pencil(prob)
    np.testing.assert_allclose(prob.diagonal(0), np.diag(A), rtol=1e-12)
    np.testing.assert_allclose(prob.diagonal(0, mass=True), np.diag(B), rtol=1e-12)
    M = A + 0.1 * B
    l1 = prob.l1_diagonal(0, 0.1)
    # an upper bound of the absolute row sums, hence (Gershgorin's circle theorem) the
    # spectrum of l1^-1 M lies in (0, 1] and the l1-Jacobi smoother converges
    assert np.all(l1 >= np.abs(M).sum(axis=1) * (1 - 1e-12))
    s = 1 / np.sqrt(l1)
    top = np.linalg.eigvalsh(s[:, None] * M * s[None, :]).max()
    assert top <= 1 + 1e-12


def test_eigenpairs_match_dense_reference_and_reach_tol():
    img = _image(24, 20)
    prob = multiscale_problem(img, levels=3)
    A, B = _dense_pencil(prob)
    ref = scipy.linalg.eigh(A, B, eigvals_only=True, subset_by_index=[0, 3])
    ep = multiscale_eigenpairs(None, 4, problem=prob, tol=1e-6, maxiter=500, seed=0)
    assert ep.converged and np.all(ep.residuals <= 1e-6)
    # the eigenvalues agree with LAPACK's generalised eigh (scipy.linalg.eigh) on (A, B)
    np.testing.assert_allclose(ep.values, ref, atol=1e-8)
    # residual computed independently: ||D^-1/2 (A y - lam B y)|| / ||D^1/2 y||, D = diag(B)
    dB = np.diag(B)
    for j in range(4):
        y = ep.vectors[:, j]
        r = np.linalg.norm((A @ y - ep.values[j] * (B @ y)) / np.sqrt(dB))
        assert r / np.linalg.norm(np.sqrt(dB) * y) <= 1e-6
    # B-orthonormal
    np.testing.assert_allclose(ep.vectors.T @ B @ ep.vectors, np.eye(4), atol=1e-8)


def test_deterministic_and_warns_when_maxiter_too_small():
    img = _image(32, 32)
    with pytest.warns(EigenConvergenceWarning, match="residuals above"):
        a = multiscale_eigenpairs(img, 3, levels=3, seed=3, tol=1e-9, maxiter=2)
    with pytest.warns(EigenConvergenceWarning, match="residuals above"):
        b = multiscale_eigenpairs(img, 3, levels=3, seed=3, tol=1e-9, maxiter=2)
    np.testing.assert_array_equal(a.vectors, b.vectors)


def test_single_level_is_the_plain_graph():
    img = _image(12, 12)
    ep = multiscale_eigenpairs(img, 3, levels=1, radius_coarse=3, seed=0)
    from imgcut.spectral import laplacian_eigenpairs

    ref = laplacian_eigenpairs(affinity_graph(img, radius=3).weights, 3, solver="dense")
    np.testing.assert_allclose(ep.values, ref.values, atol=1e-10)


def test_k_one_is_the_constant_vector():
    ep = multiscale_eigenpairs(_image(20, 20), 1, levels=2, seed=0)
    assert ep.values.tolist() == [0.0] and ep.vectors.shape == (400, 1)
    assert np.ptp(ep.vectors) == 0


def test_constant_image():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ep = multiscale_eigenpairs(np.full((32, 32), 7.0), 3, levels=3, seed=0, maxiter=300)
    assert ep.values[0] == 0.0 and np.all(np.diff(ep.values) >= 0)


def _four_regions_1mp():
    """1024 x 1024: four flat regions (a half, a disc, a quarter band) plus noise 0.03."""
    h = w = 1024
    rng = np.random.default_rng(0)
    yy, xx = np.mgrid[0:h, 0:w]
    truth = np.zeros((h, w), dtype=int)
    truth[:, w // 2 :] = 1
    truth[(yy - 300) ** 2 + (xx - 260) ** 2 < 180**2] = 2
    truth[h * 3 // 4 :, : w // 2] = 3
    img = np.array([0.1, 0.9, 0.5, 0.3])[truth] + 0.03 * rng.standard_normal((h, w))
    return img, truth


def _pixel_accuracy(labels, truth) -> float:
    """Fraction of pixels right under the best one-to-one matching of labels to classes
    (Hungarian assignment, scipy.optimize.linear_sum_assignment)."""
    from scipy.optimize import linear_sum_assignment

    _, labels = np.unique(np.ravel(labels), return_inverse=True)
    table = np.zeros((labels.max() + 1, truth.max() + 1))
    np.add.at(table, (labels, truth.ravel()), 1)
    r, c = linear_sum_assignment(-table)
    return float(table[r, c].sum() / truth.size)


@pytest.mark.slow
def test_one_megapixel_known_regions():
    img, truth = _four_regions_1mp()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ep = multiscale_eigenpairs(img, 4, seed=0, tol=1e-4, maxiter=30)
    # measured 0.9964 (residual 1.3e-3 after 30 iterations); 0.896 with maxiter=10
    assert _pixel_accuracy(kway_ncut(ep, 4, seed=0), truth) >= 0.99


# --------------------------------------------------------------------------- relaxation


@pytest.mark.parametrize("dtype, atol", [(np.float64, 1e-12), (np.float32, 1e-5)])
def test_compatible_relaxation_keeps_block_means_and_lowers_the_fine_energy(dtype, atol):
    from imgcut.multiscale import _compatible_relaxation

    img = _image(32, 40)
    prob = multiscale_problem(img, levels=3)
    grid = prob._levels[0].grid
    rng = np.random.default_rng(1)
    target = rng.standard_normal((grid.coarse[0] * grid.coarse[1], 3))
    Y0 = grid.expand(target)
    Y = _compatible_relaxation(prob, 0, target, steps=8, dtype=dtype)
    assert Y.dtype == np.float64
    # the constraint C y = target holds after every step (the coarse terms are unchanged)
    np.testing.assert_allclose(grid.average(Y), target, atol=atol)
    # and y^T L(W_0) y, the only part of the Rayleigh quotient left free, went down
    W = prob.fine_graph.weights
    L = sp.diags(np.asarray(W.sum(axis=1)).ravel()) - W
    before = np.einsum("ij,ij->j", Y0, L @ Y0)
    after = np.einsum("ij,ij->j", Y, L @ Y)
    assert np.all(after < before)


def test_relaxed_levels_reach_the_requested_residual():
    img = _image(48, 40)
    prob = multiscale_problem(img, levels=3)
    A, B = _dense_pencil(prob)
    ref = scipy.linalg.eigh(A, B, eigvals_only=True, subset_by_index=[0, 2])
    ep = multiscale_eigenpairs(None, 3, problem=prob, tol=1e-6, maxiter=500, relax_levels=2)
    assert ep.info["relaxed_levels"] == 2
    assert ep.converged and np.all(ep.residuals <= 1e-6)
    # eigenvalues of LAPACK's generalised eigh (scipy.linalg.eigh) on the explicit pencil
    np.testing.assert_allclose(ep.values, ref, atol=1e-8)


def test_relax_levels_auto_and_errors():
    from imgcut.multiscale import RELAX_MIN_PIXELS, _relaxed_levels

    side = int(np.sqrt(RELAX_MIN_PIXELS)) + 1
    shapes = [(4 * side, 4 * side), (2 * side, 2 * side), (side, side), (side // 2, side // 2)]
    assert _relaxed_levels(shapes, "auto") == 3
    assert _relaxed_levels(shapes[2:], "auto") == 1
    assert _relaxed_levels([(8, 8)], "auto") == 0  # the coarsest level is solved, never relaxed
    assert _relaxed_levels(shapes, 9) == 3
    for bad in (-1, 1.5, "all", True):
        with pytest.raises(ValueError, match="relax_levels"):
            _relaxed_levels(shapes, bad)


@pytest.mark.slow
def test_one_megapixel_known_regions_through_segment_defaults():
    """``imgcut.segment(img, 4, method="kway")`` on 1 MP picks the multiscale path by itself
    (scale="auto") and, with its default tolerance, recovers regions known by construction."""
    import imgcut

    img, truth = _four_regions_1mp()
    with warnings.catch_warnings():
        warnings.simplefilter("error", EigenConvergenceWarning)  # the default run meets tol
        res = imgcut.segment(img, 4, method="kway", seed=0)
    assert res.params["scale_used"] == "multi"
    # measured 0.9998 (20 LOBPCG iterations allowed per coarse level; 10 merged a region: 0.896)
    assert _pixel_accuracy(res.labels, truth) >= 0.99


def test_coarsest_solve_falls_back_to_lapack_when_lanczos_runs_out(monkeypatch):
    import sys

    from imgcut.spectral import laplacian_eigenpairs

    mod = sys.modules["imgcut.multiscale"]
    monkeypatch.setattr(mod, "_COARSE_RESTARTS", 1)  # Lanczos cannot converge in one restart
    img = _image(45, 40)
    with warnings.catch_warnings():
        warnings.simplefilter("error", EigenConvergenceWarning)  # no warning leaks out
        ep = multiscale_eigenpairs(img, 4, levels=1, radius_coarse=3, seed=0)
    ref = laplacian_eigenpairs(affinity_graph(img, radius=3).weights, 4, solver="dense")
    assert "dense" in ep.solver
    np.testing.assert_allclose(ep.values, ref.values, atol=1e-10)


def test_scale_auto_keeps_thin_strips_single_scale(monkeypatch):
    import sys

    import imgcut

    monkeypatch.setattr(sys.modules["imgcut.segment"], "AUTO_MULTISCALE_PIXELS", 100)
    strip = np.zeros((8, 120))
    strip[:, 60:] = 1.0
    res = imgcut.segment(strip, 2, method="kway", radius=2)
    assert res.params["scale_used"] == "single"  # fewer than 16 rows: no coarse levels


def test_vcycle_bottom_solve_survives_a_weightless_node():
    # A coarsest node whose affinities all underflowed to 0 is its own component (one zero
    # eigenvalue per component, Chung 1997): the bottom solve must stay defined and finite.
    prob = multiscale_problem(_image(16, 14), levels=2)
    G = prob._levels[-1].G.tolil()
    G[0, :] = 0
    G[:, 0] = 0
    prob._levels[-1].G = sp.csr_matrix(G)
    prob._finish()
    vc = ms._VCycle(prob, 0.01)
    out = vc(0, np.random.default_rng(0).standard_normal((16 * 14, 3)))
    assert np.all(np.isfinite(out))


@pytest.mark.parametrize("s", [0, 1, 2])  # 2: the coarsest level, no coarse terms
def test_rayleigh_ritz_matches_the_dense_pencil(s):
    # Ritz values, B-orthonormality and residual norms of the lean (block-free) Rayleigh-Ritz
    # step against the same quantities from the explicit dense pencil (A, B) and LAPACK
    prob = multiscale_problem(_image(22, 18), levels=3)
    A, B = _dense_pencil(prob, s)
    n = A.shape[0]
    X = np.random.default_rng(3).standard_normal((n, 4))
    lam, V, res = ms._rayleigh_ritz(prob, s, X.copy(), 4)
    # reference: the constant B-deflated, then Ritz pairs of (Q^T A Q, Q^T B Q)
    one = np.ones(n)
    Xd = X - np.outer(one, (one @ B @ X) / (one @ B @ one))
    ref = scipy.linalg.eigh(Xd.T @ A @ Xd, Xd.T @ B @ Xd, eigvals_only=True)
    np.testing.assert_allclose(lam, ref, rtol=1e-9, atol=1e-14)
    np.testing.assert_allclose(V.T @ B @ V, np.eye(4), atol=1e-9)
    dB = np.diag(B)
    R = A @ V - (B @ V) * lam
    expected = np.linalg.norm(R / np.sqrt(dB)[:, None], axis=0) / np.linalg.norm(
        V * np.sqrt(dB)[:, None], axis=0
    )
    np.testing.assert_allclose(res, expected, rtol=1e-8)
