"""Tests of imgcut.twolevel: edge-following aggregates and the two-level LOBPCG backend."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from imgcut.features import compute_features
from imgcut.graph import affinity_graph
from imgcut.hierarchy import oversegment
from imgcut.spectral import laplacian_eigenpairs, normalized_laplacian
from imgcut.twolevel import MAX_COARSE_FRACTION, tile_aggregates, twolevel_eigenpairs


def _torus(a: int, b: int) -> sp.csr_matrix:
    idx = np.arange(a * b).reshape(a, b)
    rows = np.r_[idx.ravel(), idx.ravel()]
    cols = np.r_[np.roll(idx, 1, axis=0).ravel(), np.roll(idx, 1, axis=1).ravel()]
    W = sp.coo_matrix((np.ones(rows.size), (rows, cols)), shape=(a * b, a * b))
    return (W + W.T).tocsr()


def test_tile_aggregates_cut_segments_by_tiles():
    seg = np.zeros((5, 7), dtype=np.int32)
    seg[:, 4:] = 3
    agg = tile_aggregates(seg, tile=3).reshape(5, 7)
    # same aggregate <=> same segment and same tile
    tiles = (np.arange(5)[:, None] // 3) * 3 + (np.arange(7)[None, :] // 3)
    pairs = {(int(s), int(t)) for s, t in zip(seg.ravel(), tiles.ravel(), strict=True)}
    assert agg.max() + 1 == len(pairs)
    for a in range(agg.max() + 1):
        members = agg == a
        assert np.unique(seg[members]).size == 1 and np.unique(tiles[members]).size == 1
    assert agg[0, 0] == 0  # numbered in raster order of first appearance


def test_tile_aggregates_on_nodes_and_bad_input():
    seg = np.arange(12).reshape(3, 4) // 6
    nodes = np.array([0, 5, 11])
    agg = tile_aggregates(seg, tile=2, nodes=nodes)
    full = tile_aggregates(seg, tile=2)
    assert agg.shape == (3,)
    # restriction keeps the partition of the chosen nodes
    assert (agg[:, None] == agg[None, :]).tolist() == (
        full[nodes][:, None] == full[nodes][None, :]
    ).tolist()
    with pytest.raises(ValueError, match="2-D integer"):
        tile_aggregates(np.zeros((3, 3)))
    with pytest.raises(ValueError, match="tile"):
        tile_aggregates(seg, tile=0)
    with pytest.raises(ValueError, match="flat pixel indices"):
        tile_aggregates(seg, nodes=np.array([12]))


def test_torus_spectrum_closed_form():
    # Normalised Laplacian of the 4-regular torus C_a x C_b: L = I - A/4, eigenvalues
    # 1 - (cos(2 pi i / a) + cos(2 pi j / b)) / 2 (Chung 1997, Spectral Graph Theory, sec. 1.5).
    a, b = 40, 36
    W = _torus(a, b)
    i, j = np.meshgrid(np.arange(a), np.arange(b), indexing="ij")
    exact = np.sort((1 - (np.cos(2 * np.pi * i / a) + np.cos(2 * np.pi * j / b)) / 2).ravel())
    agg = tile_aggregates(np.zeros((a, b), dtype=int), tile=4)
    ep = laplacian_eigenpairs(W, 7, tol=1e-8, seed=0, aggregates=agg)
    assert ep.solver == "twolevel"
    np.testing.assert_allclose(ep.values, exact[:7], atol=1e-8)
    assert ep.residuals.max() <= 1e-8


def _speckled_image(seed: int = 0) -> np.ndarray:
    """Two flat halves with noise and a few isolated specks (tiny, nearly detached patches:
    the structures whose eigenvalues square-block coarse spaces miss)."""
    rng = np.random.default_rng(seed)
    img = np.full((48, 64), 0.2)
    img[:, 32:] = 0.7
    img += 0.02 * rng.standard_normal(img.shape)
    for r, c in ((5, 6), (30, 50), (40, 12), (12, 44)):
        img[r : r + 2, c : c + 2] = 1.0
    return img


def test_same_smallest_set_as_lapack_on_an_image_graph():
    # Reference: LAPACK eigh of the dense normalised Laplacian (3072 nodes).
    img = _speckled_image()
    f = compute_features(img)
    g = affinity_graph(f, radius=3)
    agg = tile_aggregates(oversegment(f.edges, smooth=1.0), nodes=g.nodes)
    ep = laplacian_eigenpairs(g.weights, 8, tol=1e-6, seed=0, aggregates=agg)
    ref = scipy.linalg.eigvalsh(normalized_laplacian(g.weights).toarray(), subset_by_index=[0, 7])
    assert ep.solver == "twolevel"
    np.testing.assert_allclose(ep.values, ref, rtol=1e-3, atol=1e-9)
    assert ep.residuals.max() <= 1e-6


def test_deterministic_for_a_seed():
    img = _speckled_image(1)
    f = compute_features(img)
    g = affinity_graph(f, radius=2)
    agg = tile_aggregates(oversegment(f.edges), nodes=g.nodes)
    a = laplacian_eigenpairs(g.weights, 5, seed=3, aggregates=agg)
    b = laplacian_eigenpairs(g.weights, 5, seed=3, aggregates=agg)
    assert np.array_equal(a.values, b.values) and np.array_equal(a.vectors, b.vectors)


def test_unusable_coarse_space_falls_back_to_lanczos():
    W = _torus(40, 30)
    n = W.shape[0]
    singletons = np.arange(n)  # s = n > MAX_COARSE_FRACTION * n
    assert n > MAX_COARSE_FRACTION * n
    ep = laplacian_eigenpairs(W, 4, tol=1e-8, seed=0, aggregates=singletons)
    assert ep.solver == "arpack"
    assert ep.info.get("twolevel_fallback") == "coarse space unusable"
    assert ep.residuals.max() <= 1e-8
    d = np.asarray(W.sum(axis=1)).ravel()
    u = np.sqrt(d) / np.linalg.norm(np.sqrt(d))
    assert twolevel_eigenpairs(normalized_laplacian(W), d, u, 3, singletons) is None


def test_bad_aggregates_and_missing_aggregates():
    W = _torus(10, 10)
    with pytest.raises(ValueError, match="needs aggregates"):
        laplacian_eigenpairs(W, 3, solver="twolevel")
    with pytest.raises(ValueError, match="aggregates must be an integer array"):
        laplacian_eigenpairs(W, 3, aggregates=np.zeros(5, dtype=int))
    with pytest.raises(ValueError, match="aggregates must be an integer array"):
        laplacian_eigenpairs(W, 3, aggregates=np.zeros(100))


def test_disconnected_graph_with_aggregates():
    # Two tori side by side: eigenvalue 0 twice (one per component, Chung 1997, Lemma 1.7),
    # then the smallest non-zero ones of the pair.
    W1 = _torus(36, 36)
    W = sp.block_diag([W1, W1]).tocsr()
    seg = np.zeros((72, 36), dtype=int)
    agg = tile_aggregates(seg, tile=4)
    ep = laplacian_eigenpairs(W, 4, tol=1e-8, seed=0, aggregates=agg)
    lam1 = 1 - (np.cos(2 * np.pi / 36) + 1) / 2
    np.testing.assert_allclose(ep.values, [0, 0, lam1, lam1], atol=1e-8)


def test_maxiter_honoured_and_reported():
    # solver="twolevel" asked explicitly: no Lanczos fallback, so a one-iteration cap shows
    # as a convergence warning with the iteration count, and "auto" then falls back.
    from imgcut._errors import EigenConvergenceWarning

    img = _speckled_image(2)
    f = compute_features(img)
    g = affinity_graph(f, radius=3)
    agg = tile_aggregates(oversegment(f.edges), nodes=g.nodes)
    with pytest.warns(EigenConvergenceWarning, match="twolevel"):
        ep = laplacian_eigenpairs(
            g.weights, 6, solver="twolevel", tol=1e-12, maxiter=1, seed=0, aggregates=agg
        )
    # scipy reports the start and the final Rayleigh-Ritz as history entries too
    assert 1 <= ep.iterations <= 3 and ep.solver == "twolevel"
    with pytest.warns(EigenConvergenceWarning, match="arpack"):  # the fallback's cap too
        ep = laplacian_eigenpairs(g.weights, 6, tol=1e-8, maxiter=1, seed=0, aggregates=agg)
    assert ep.info.get("twolevel_fallback") == "residuals above tol"


def test_aggregates_split_at_weak_links_and_low_degree_nodes_stand_alone():
    # Nodes 0-2 and 3-5 form two triangles joined by a 1e-9 link, all in one aggregate:
    # the split rule (w_ij >= SPLIT_STRENGTH * min(d_i, d_j)) must separate them. Node 6
    # hangs on by 1e-3 only: degree far below 5 % of the median, so it stands alone.
    from imgcut.twolevel import _coarse_space

    edges = [(0, 1, 1), (1, 2, 1), (0, 2, 1), (3, 4, 1), (4, 5, 1), (3, 5, 1), (2, 3, 1e-9)]
    edges.append((5, 6, 1e-3))
    r, c, w = (np.array(x) for x in zip(*edges, strict=True))
    W = sp.coo_matrix((np.r_[w, w], (np.r_[r, c], np.r_[c, r])), shape=(7, 7)).tocsr()
    d = np.asarray(W.sum(axis=1)).ravel()
    P, s, n_low = _coarse_space(normalized_laplacian(W), d, np.zeros(7, dtype=int))
    agg = np.asarray(P.argmax(axis=1)).ravel()
    assert n_low == 1 and s == 3
    assert len({agg[0], agg[1], agg[2]}) == 1 and len({agg[3], agg[4], agg[5]}) == 1
    assert len({agg[0], agg[3], agg[6]}) == 3
    # columns carry sqrt(d): P^T P is the diagonal of aggregate volumes
    np.testing.assert_allclose(
        np.sort((P.T @ P).diagonal()), np.sort([d[:3].sum(), d[3:6].sum(), d[6]])
    )


def test_segment_accepts_twolevel_on_small_images():
    # "auto" skips the aggregates below 1000 nodes (dense solves); an explicit "twolevel"
    # must still get them instead of failing with "needs aggregates".
    from imgcut import segment

    img = _speckled_image(3)[:20, 20:50]
    res = segment(img, 3, solver="twolevel", radius=2)
    assert res.params["solver"] == "twolevel" and res.residuals.max() <= 1e-5


def test_sparse_coarse_branch_matches_closed_form(monkeypatch):
    # Coarse spaces above _DENSE_COARSE nodes are factored by SuperLU and solved by
    # shift-invert Lanczos; force that branch on the torus (Chung 1997, sec. 1.5).
    import imgcut.twolevel as tl

    monkeypatch.setattr(tl, "_DENSE_COARSE", 10)
    a, b = 40, 36
    i, j = np.meshgrid(np.arange(a), np.arange(b), indexing="ij")
    exact = np.sort((1 - (np.cos(2 * np.pi * i / a) + np.cos(2 * np.pi * j / b)) / 2).ravel())
    agg = tile_aggregates(np.zeros((a, b), dtype=int), tile=4)
    ep = laplacian_eigenpairs(_torus(a, b), 5, tol=1e-8, seed=0, aggregates=agg)
    assert ep.solver == "twolevel" and ep.info["coarse_size"] > 10
    np.testing.assert_allclose(ep.values, exact[:5], atol=1e-8)
