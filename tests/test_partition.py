"""Tests of imgcut.partition: sweep cuts, recursive and k-way normalized cuts."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from imgcut.partition import (
    Hierarchy,
    SplitRecord,
    discretize,
    kway_ncut,
    recursive_ncut,
    sweep_cut,
)

# ---------------------------------------------------------------------------- helpers


def random_graph(rng: np.random.Generator, n: int, p: float = 0.5, connected: bool = True):
    """Symmetric random weighted graph; a spanning path keeps it connected if asked."""
    A = np.triu(rng.random((n, n)) * (rng.random((n, n)) < p), 1)
    if connected:
        A[np.arange(n - 1), np.arange(1, n)] += rng.random(n - 1) + 0.05
    return sp.csr_matrix(A + A.T)


def eig_reference(W: sp.csr_matrix):
    """Generalised eigenpairs of (D - W) y = lambda D y by dense LAPACK (outside the project)."""
    A = W.toarray()
    d = A.sum(axis=1)
    s = 1.0 / np.sqrt(d)
    L = np.eye(len(d)) - s[:, None] * A * s[None, :]
    lam, V = scipy.linalg.eigh(L)
    return lam, s[:, None] * V


def brute_prefix_costs(W: sp.csr_matrix, y: np.ndarray):
    """Ncut and conductance of every prefix of argsort(y), each cut summed directly."""
    A = W.toarray()
    d = A.sum(axis=1)
    order = np.argsort(y, kind="stable")
    ncut, phi = [], []
    for t in range(1, len(y)):
        a = np.zeros(len(y), bool)
        a[order[:t]] = True
        cut = A[a][:, ~a].sum()
        va, vb = d[a].sum(), d[~a].sum()
        ncut.append((cut / va if va else 0) + (cut / vb if vb else 0))  # Shi & Malik eq. (2)
        phi.append(cut / min(va, vb) if min(va, vb) else 0)
    return np.array(ncut), np.array(phi)


def brute_conductance(W: sp.csr_matrix) -> float:
    """phi(G) = min over all 2^n subsets of cut / min(vol S, vol S-bar) (Chung 1997, ch. 2)."""
    A = W.toarray()
    n = len(A)
    d = A.sum(axis=1)
    S = np.array(list(itertools.product([0, 1], repeat=n))[1:-1], dtype=float)
    cut = ((S @ A) * (1 - S)).sum(axis=1)
    vol = S @ d
    return float(np.min(cut / np.minimum(vol, d.sum() - vol)))


def block_graph(sizes, inner=1.0, outer=0.02, seed=0):
    rng = np.random.default_rng(seed)
    n = sum(sizes)
    A = outer * rng.random((n, n))
    start = 0
    truth = np.zeros(n, int)
    for i, s in enumerate(sizes):
        A[start : start + s, start : start + s] = inner * (0.5 + rng.random((s, s)))
        truth[start : start + s] = i
        start += s
    A = np.triu(A, 1)
    return sp.csr_matrix(A + A.T), truth


def same_partition(a, b) -> bool:
    """Equal up to renaming the labels."""
    a, b = np.asarray(a), np.asarray(b)
    pairs = set(zip(a.tolist(), b.tolist(), strict=True))
    return len(pairs) == len(set(a.tolist())) == len(set(b.tolist()))


# ---------------------------------------------------------------------------- sweep cut


@settings(max_examples=60, deadline=None)
@given(n=st.integers(2, 14), seed=st.integers(0, 2**31 - 1), ties=st.booleans())
def test_sweep_costs_equal_brute_force(n, seed, ties):
    rng = np.random.default_rng(seed)
    W = random_graph(rng, n, connected=bool(seed % 2))
    y = rng.standard_normal(n)
    if ties:
        y = np.round(y)  # repeated values: prefixes inside a tie are not thresholds
    res = sweep_cut(W, y)
    ncut, phi = brute_prefix_costs(W, y)
    np.testing.assert_allclose(res.ncut_values, ncut, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(res.conductance_values, phi, rtol=1e-10, atol=1e-12)
    # The chosen cut is the cheapest threshold (strict in y when one exists).
    ys = np.sort(y)
    strict = ys[1:] > ys[:-1]
    allowed = strict if strict.any() else np.ones(n - 1, bool)
    assert res.ncut == pytest.approx(ncut[allowed].min(), rel=1e-10, abs=1e-12)
    assert res.mask.sum() == res.size_a
    if strict.any():  # the mask is a true threshold set of y
        assert np.array_equal(res.mask, y <= res.threshold)
    assert res.min_conductance == pytest.approx(phi.min(), rel=1e-10, abs=1e-12)


@settings(max_examples=40, deadline=None)
@given(n=st.integers(3, 11), seed=st.integers(0, 2**31 - 1), p=st.floats(0.15, 0.9))
def test_cheeger_inequality_on_random_graphs(n, seed, p):
    rng = np.random.default_rng(seed)
    W = random_graph(rng, n, p=p)
    lam, Y = eig_reference(W)
    lam2 = lam[1]
    res = sweep_cut(W, Y[:, 1])
    phi_star = brute_conductance(W)
    # Cheeger's inequality for the normalized Laplacian (Chung 1997, Theorem 2.2 and its
    # sweep-cut proof): lambda2 / 2 <= phi* <= min_t phi(sweep prefix t) <= sqrt(2 lambda2).
    assert lam2 / 2 <= phi_star + 1e-12
    assert phi_star <= res.min_conductance + 1e-12
    assert res.min_conductance <= np.sqrt(2 * lam2) + 1e-12
    # Ncut of any cut lies between phi and 2 phi, so the chosen cut's Ncut <= 2 sqrt(2 lambda2).
    assert res.conductance <= res.ncut + 1e-12 <= 2 * res.min_conductance + 2e-12


def test_sweep_finds_the_weak_edge_of_a_barbell():
    # Two 5-cliques joined by one edge of weight 0.01: the cut is that edge,
    # Ncut = 0.01/vol(A) + 0.01/vol(B) with vol = 20 + 0.01 on each side (hand computed).
    B = np.ones((5, 5)) - np.eye(5)
    W = sp.block_diag([B, B]).tolil()
    W[4, 5] = W[5, 4] = 0.01
    W = W.tocsr()
    lam, Y = eig_reference(W)
    res = sweep_cut(W, Y[:, 1])
    assert res.mask.tolist() in ([True] * 5 + [False] * 5, [False] * 5 + [True] * 5)
    assert res.ncut == pytest.approx(2 * 0.01 / 20.01, rel=1e-12)
    assert res.cut == pytest.approx(0.01)


def test_sweep_min_size_and_errors():
    rng = np.random.default_rng(1)
    W = random_graph(rng, 10)
    y = np.arange(10.0)
    res = sweep_cut(W, y, min_size=4)
    assert 4 <= res.size_a <= 6
    with pytest.raises(ValueError, match="min_size"):
        sweep_cut(W, y, min_size=6)
    with pytest.raises(ValueError, match="shape"):
        sweep_cut(W, y[:5])
    with pytest.raises(ValueError, match="finite"):
        sweep_cut(W, np.full(10, np.nan))
    with pytest.raises(ValueError, match="square"):
        sweep_cut(sp.csr_matrix(np.ones((2, 3))), np.zeros(2))
    with pytest.raises(ValueError, match="at least 2"):
        sweep_cut(sp.csr_matrix((1, 1)), np.zeros(1))


def test_sweep_is_deterministic_under_ties():
    # A 4-cycle is symmetric: many cuts tie; the first minimum in sorted order is chosen.
    W = sp.csr_matrix(np.array([[0, 1, 0, 1], [1, 0, 1, 0], [0, 1, 0, 1], [1, 0, 1, 0.0]]))
    y = np.array([0.0, 1.0, 2.0, 3.0])
    a = sweep_cut(W, y)
    b = sweep_cut(W, y)
    assert np.array_equal(a.mask, b.mask) and a.size_a == 2  # {0,1} | {2,3}: Ncut 2/4 + 2/4


# ---------------------------------------------------------------------------- k-way


@pytest.mark.parametrize("method", ["discretize", "kmeans"])
@pytest.mark.parametrize("sizes", [(20, 30, 25), (15, 15, 15, 15, 40)])
def test_kway_recovers_block_diagonal_truth(method, sizes):
    W, truth = block_graph(sizes)
    lam, Y = eig_reference(W)
    k = len(sizes)
    labels = kway_ncut(Y, k, method=method, seed=3)
    assert labels.dtype == np.int32
    assert same_partition(labels, truth)
    assert labels[0] == 1 and set(labels.tolist()) == set(range(1, k + 1))


def test_discretize_is_rotation_invariant():
    # Exactly disconnected blocks: the null space is spanned by the block indicators and any
    # orthonormal basis of it is as good; Yu & Shi (2003) search over rotations, so a random
    # rotation of the eigenvectors must not change the partition.
    W, truth = block_graph((12, 18, 10, 20), outer=0.0)
    lam, Y = eig_reference(W)
    Z = Y[:, :4]
    Q, _ = np.linalg.qr(np.random.default_rng(7).standard_normal((4, 4)))
    assert same_partition(discretize(Z @ Q, seed=0), truth)
    assert same_partition(discretize(Z, seed=5), truth)


def test_discretize_deterministic_and_seeded():
    W, truth = block_graph((30, 30, 30), outer=0.3, seed=4)
    lam, Y = eig_reference(W)
    a = discretize(Y[:, :3], seed=11)
    b = discretize(Y[:, :3], seed=11)
    c = discretize(Y[:, :3], seed=np.random.default_rng(11))
    assert np.array_equal(a, b) and np.array_equal(a, c)


def test_discretize_on_a_row_sample_matches_the_full_fit(monkeypatch):
    import sys

    W, truth = block_graph((60, 50, 40), outer=0.3, seed=4)
    lam, Y = eig_reference(W)
    full = discretize(Y[:, :3], seed=2)
    assert same_partition(full, truth)  # block truth by construction
    monkeypatch.setattr(sys.modules["imgcut.partition"], "DISCRETIZE_SAMPLE", 40)
    sampled = discretize(Y[:, :3], seed=2)
    assert same_partition(sampled, truth)
    assert np.array_equal(sampled, discretize(Y[:, :3], seed=2))  # seeded sample


def test_kway_errors():
    Y = np.ones((5, 2))
    with pytest.raises(ValueError, match="valid values: discretize, kmeans"):
        kway_ncut(Y, 2, method="spectral")
    with pytest.raises(ValueError, match="at least 3 eigenvectors"):
        kway_ncut(Y, 3)
    with pytest.raises(ValueError, match="k must be >= 1"):
        kway_ncut(Y, 0)
    with pytest.raises(ValueError, match="finite"):
        discretize(np.full((3, 2), np.nan))
    assert kway_ncut(Y, 1).tolist() == [1] * 5


# ---------------------------------------------------------------------------- recursive


def test_recursive_three_cliques_and_hierarchy():
    B = np.ones((6, 6)) - np.eye(6)
    W = sp.block_diag([B, B, B, B]).tolil()
    W[5, 6] = W[6, 5] = 0.05
    W[11, 12] = W[12, 11] = 0.05
    W[17, 18] = W[18, 17] = 0.2
    W = W.tocsr()
    h = recursive_ncut(W, n_regions=4, seed=0)
    assert isinstance(h, Hierarchy) and h.n_regions == 4
    truth = np.repeat(np.arange(4), 6)
    assert same_partition(h.labels, truth)
    # Cheapest cut first: the 0.2 edge (between cliques 3 and 4) is cut last.
    assert h.splits[-1].ncut > h.splits[0].ncut
    # First the balanced middle cut, then the 0.05 edge inside the left half (hand computed:
    # Ncut of a cut edge w between equal halves of volume V is 2w/V).
    assert same_partition(h.labels_at(2), np.repeat([0, 0, 1, 1], 6))
    assert same_partition(h.labels_at(3), np.repeat([0, 1, 2, 2], 6))
    assert np.array_equal(h.labels_at(4), h.labels)
    assert h.labels_at(1).tolist() == [1] * 24
    # Each level refines the previous one.
    for m in range(1, 4):
        coarse, fine = h.labels_at(m), h.labels_at(m + 1)
        assert len(set(zip(fine.tolist(), coarse.tolist(), strict=True))) == m + 1
    for rec in h.splits:
        assert isinstance(rec, SplitRecord) and rec.kind == "sweep"
        # Cheeger (Chung 1997, Theorem 2.2): lambda2/2 <= phi* <= phi(chosen cut), and the
        # sweep's best conductance <= sqrt(2 lambda2).
        assert rec.cheeger_lower <= rec.conductance + 1e-9
        assert rec.cheeger_holds
        assert rec.cheeger_upper == pytest.approx(np.sqrt(2 * rec.lambda2))
    with pytest.raises(ValueError, match="n_regions must be in 1..4"):
        h.labels_at(5)


def test_recursive_disconnected_graph_splits_for_free():
    B = np.ones((5, 5)) - np.eye(5)
    W = sp.csr_matrix(sp.block_diag([B, B, B]))
    h = recursive_ncut(W, n_regions=3, seed=0)
    assert [r.kind for r in h.splits] == ["components", "components"]
    assert all(r.ncut == 0 and r.lambda2 == 0 for r in h.splits)
    assert same_partition(h.labels, np.repeat([0, 1, 2], 5))


def test_recursive_stops_at_max_ncut_and_min_size():
    B = np.ones((8, 8)) - np.eye(8)
    W = sp.block_diag([B, B]).tolil()
    W[7, 8] = W[8, 7] = 0.01
    W = W.tocsr()
    h = recursive_ncut(W, n_regions=10, max_ncut=0.05, seed=0)
    assert h.n_regions == 2  # inside a clique every cut is expensive (Ncut > 1)
    h = recursive_ncut(W, n_regions=10, min_size=5, seed=0)
    assert h.n_regions == 2  # an 8-clique cannot be split into two sides of >= 5
    assert min(min(r.sizes) for r in h.splits) >= 5


def test_recursive_labels_cover_more_regions_than_nodes():
    W = sp.csr_matrix(np.array([[0, 1.0, 0], [1, 0, 1], [0, 1, 0]]))
    h = recursive_ncut(W, n_regions=10, seed=0)
    assert h.n_regions == 3 and sorted(h.labels.tolist()) == [1, 2, 3]


def test_recursive_is_deterministic():
    rng = np.random.default_rng(0)
    W = random_graph(rng, 40, p=0.2)
    a = recursive_ncut(W, n_regions=5, seed=3)
    b = recursive_ncut(W, n_regions=5, seed=3)
    assert np.array_equal(a.labels, b.labels)
    assert [r.to_dict() for r in a.splits] == [r.to_dict() for r in b.splits]


def test_recursive_errors():
    W = sp.csr_matrix(np.array([[0, 1.0], [1, 0]]))
    with pytest.raises(ValueError, match="n_regions must be >= 1"):
        recursive_ncut(W, n_regions=0)
    with pytest.raises(ValueError, match="max_ncut"):
        recursive_ncut(W, n_regions=2, max_ncut=0)
    with pytest.raises(ValueError, match="min_size"):
        recursive_ncut(W, n_regions=2, min_size=0)
    assert recursive_ncut(W, n_regions=1).labels.tolist() == [1, 1]


def test_recursive_uses_the_fiedler_direction_of_a_degenerate_null_space():
    # Two cliques joined by a 1e-13 edge: lambda_2 ~ 0 is numerically degenerate with
    # lambda_1 = 0, and a solver may return any D-orthonormal basis of that eigenspace, even
    # one whose second column is the constant vector; the cut must still separate the
    # cliques (Shi & Malik 2000, sec. 2: y is D-orthogonal to the constant vector).
    B = np.ones((8, 8)) - np.eye(8)
    W = sp.block_diag([B, B]).tolil()
    W[7, 8] = W[8, 7] = 1e-13
    perm = np.random.default_rng(0).permutation(16)  # node order unrelated to the cliques
    W = W.tocsr()[perm][:, perm]
    truth = (perm >= 8).astype(int)
    lam, Y = eig_reference(W)
    d = np.asarray(W.sum(axis=1)).ravel()
    const = np.ones(16) / np.sqrt(d.sum())  # D-normalised null vector
    split = np.where(truth == 1, 1.0, -1.0) / np.sqrt(d.sum())  # D-orthogonal to it
    Yr = np.column_stack([split, const, Y[:, 2]])  # the constant second: still a valid basis

    class Pairs:  # the fields recursive_ncut reads from an Eigenpairs
        values = lam[:3]
        vectors = Yr
        residuals = np.zeros(3)

    h = recursive_ncut(W, n_regions=2, eigenpairs=Pairs(), seed=0)
    assert same_partition(h.labels, truth)
    assert h.splits[0].ncut < 1e-12


def test_recursive_keeps_dust_out_of_the_region_count():
    # Two 12-cliques joined weakly, plus three isolated 2-node specks. With min_size=5 the
    # specks cannot be regions: the first split is between the cliques (not a free split
    # peeling a speck), and every region holds a clique.
    B = np.ones((12, 12)) - np.eye(12)
    P = np.array([[0, 1.0], [1, 0]])
    W = sp.block_diag([B, B, P, P, P]).tolil()
    W[11, 12] = W[12, 11] = 0.05
    W = W.tocsr()
    h = recursive_ncut(W, n_regions=2, min_size=5, seed=0)
    assert h.n_regions == 2 and h.splits[0].kind == "sweep"
    lab = h.labels
    assert len(set(lab[:12].tolist())) == 1 and len(set(lab[12:24].tolist())) == 1
    assert lab[0] != lab[12]
    # Only dust left to split: asking for more regions cannot make a speck a region.
    h5 = recursive_ncut(W, n_regions=5, min_size=5, max_ncut=0.5, seed=0)
    assert h5.n_regions == 2


@pytest.mark.parametrize(
    "labels",
    [[3, 3, 0, 5, 0, 3], [0], [7, 7, 7], list(range(63, -1, -1)), [2, 100, 2, 1], [-1, 4, -1]],
)
def test_first_occurrence_labels_fast_and_general_paths_agree(labels):
    # reference written out here: number each distinct value by the position of its first
    # occurrence (the contract of the k-way partitions: regions 1..K in order of first node)
    from imgcut.partition import _first_occurrence_labels

    order = {}
    for v in labels:
        order.setdefault(v, len(order) + 1)
    expected = [order[v] for v in labels]
    got = _first_occurrence_labels(np.array(labels))
    assert got.dtype == np.int32 and got.tolist() == expected
