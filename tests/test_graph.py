"""Tests of imgcut.graph: the sparse affinity matrix W, its σ defaults, mask and memory guard."""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest
import scipy.sparse as sp

from imgcut._errors import GraphTooLargeError
from imgcut.features import Features, compute_features
from imgcut.graph import AffinityGraph, affinity_graph, estimate_graph_memory

CUES = ("combined", "intensity", "contour")


def _noisy_two_regions(shape=(16, 20), seed=0):
    rng = np.random.default_rng(seed)
    img = np.full(shape, 0.2)
    img[:, shape[1] // 2 :] = 0.8
    return img + rng.normal(0, 0.05, size=shape)


def _brute_force_pairs(shape, radius, mask=None):
    """All ordered pairs (i, j), i != j, with Euclidean distance <= radius: a double loop."""
    h, w = shape
    pairs = set()
    for y0 in range(h):
        for x0 in range(w):
            for y1 in range(h):
                for x1 in range(w):
                    if (y0, x0) == (y1, x1):
                        continue
                    if (y0 - y1) ** 2 + (x0 - x1) ** 2 > radius * radius:
                        continue
                    if mask is not None and not (mask[y0, x0] and mask[y1, x1]):
                        continue
                    pairs.add((y0 * w + x0, y1 * w + x1))
    return pairs


def _pairs_of(graph: AffinityGraph):
    coo = graph.weights.tocoo()
    nodes = graph.nodes
    return set(zip(nodes[coo.row].tolist(), nodes[coo.col].tolist(), strict=True))


# --------------------------------------------------------------------------- matrix properties


@pytest.mark.parametrize("cue", CUES)
def test_w_is_symmetric_nonnegative_zero_diagonal_sorted_csr(cue):
    g = affinity_graph(_noisy_two_regions(), radius=3, cue=cue)
    w = g.weights
    assert sp.issparse(w) and w.format == "csr" and w.dtype == np.float64
    assert w.shape == (320, 320)
    assert abs(w - w.T).max() == 0.0  # exactly symmetric
    assert np.all(w.diagonal() == 0.0)
    assert w.data.min() >= 0.0 and w.data.max() <= 1.0
    assert np.isfinite(w.data).all()
    # indices sorted within every row (compare with scipy's own sort)
    ref = w.copy()
    ref.has_sorted_indices = False
    ref.sort_indices()
    np.testing.assert_array_equal(ref.indices, w.indices)
    assert w.has_sorted_indices
    np.testing.assert_array_equal(g.nodes, np.arange(320))
    assert g.nodes.dtype == np.int64
    np.testing.assert_allclose(g.degrees, np.asarray(w.sum(axis=1)).ravel())


@pytest.mark.parametrize("radius", [1, 1.5, 2, 2.9, 3, 4.2, 6.5, 9, 12.5])
def test_nnz_and_pattern_equal_brute_force(radius):
    shape = (5, 7) if radius < 6 else (14, 16)  # r > 6.4: several 64-bit validity words
    g = affinity_graph(np.random.default_rng(0).random(shape), radius=radius)
    pairs = _brute_force_pairs(shape, radius)
    assert g.weights.nnz == len(pairs)
    assert _pairs_of(g) == pairs
    assert estimate_graph_memory(shape, radius)[0] == len(pairs)


def test_nnz_with_mask_equals_brute_force():
    rng = np.random.default_rng(2)
    mask = rng.random((6, 8)) > 0.35
    g = affinity_graph(rng.random((6, 8)), radius=2.5, mask=mask)
    pairs = _brute_force_pairs((6, 8), 2.5, mask)
    assert g.weights.nnz == len(pairs)
    assert _pairs_of(g) == pairs
    assert estimate_graph_memory((6, 8), 2.5, mask)[0] == len(pairs)


def test_radius_one_excludes_diagonals():
    img = np.random.default_rng(0).random((4, 4))
    # radius 1: 4-neighbours only, 2 * (4*3 + 3*4) = 48 (grid graph edges, both directions)
    assert affinity_graph(img, radius=1).weights.nnz == 48
    # radius 1.5 adds the 2 * 2 * 3 * 3 = 36 diagonal links
    assert affinity_graph(img, radius=1.5).weights.nnz == 84


def test_trivial_images():
    g = affinity_graph(np.ones((1, 1)))
    assert g.weights.shape == (1, 1) and g.weights.nnz == 0
    row = affinity_graph(np.arange(9.0)[None, :], radius=2)
    # single row: 2 * ((9 - 1) + (9 - 2)) links
    assert row.weights.nnz == 30 and row.shape == (1, 9)


# --------------------------------------------------------------------------- closed forms


def test_intensity_weights_match_shi_malik_closed_form():
    # Shi & Malik 2000, eq. (11): w = exp(-|F_i - F_j|^2 / sF^2) * exp(-|X_i - X_j|^2 / sX^2).
    img = np.array([[0.0, 0.2, 0.9], [0.4, 1.0, 0.1], [0.3, 0.6, 0.5]])
    feats = compute_features(img, percentiles=None)  # floats used as they are
    sf, sx = 0.5, 2.0
    g = affinity_graph(feats, radius=2, cue="intensity", sigma_feature=sf, sigma_distance=sx)
    w = g.weights.toarray()

    def expected(a, b):
        (ya, xa), (yb, xb) = a, b
        df = img[ya, xa] - img[yb, xb]
        d2 = (ya - yb) ** 2 + (xa - xb) ** 2
        return math.exp(-(df**2) / sf**2) * math.exp(-d2 / sx**2)

    for a, b in [((0, 0), (0, 1)), ((0, 0), (1, 1)), ((1, 1), (2, 2)), ((0, 2), (2, 2))]:
        i, j = a[0] * 3 + a[1], b[0] * 3 + b[1]
        assert w[i, j] == pytest.approx(expected(a, b), rel=1e-12)
        assert w[j, i] == w[i, j]
    # (0, 0) and (2, 2) are 2.83 > 2 apart: no link (eq. (11), zero beyond r)
    assert w[0, 8] == 0.0
    assert g.sigmas == {"feature": sf, "distance": sx}


def test_contour_weights_match_hand_computed_line_maximum():
    # Malik et al. 2001: w = exp(-max_{p on line ij} E(p)^2 / sE^2), hand-made edge map.
    edges = np.array(
        [
            [0.0, 0.1, 0.0, 0.3],
            [0.0, 0.5, 0.2, 0.0],
            [0.0, 0.0, 0.0, 0.0],
        ]
    )
    feats = Features(
        values=np.zeros((3, 4, 1)),
        edges=edges,
        kind="gray",
        low=np.zeros(1),
        high=np.ones(1),
    )
    se = 0.4
    g = affinity_graph(feats, radius=3, cue="contour", sigma_edge=se)
    w = g.weights.toarray()

    def idx(y, x):
        return y * 4 + x

    # horizontal (0,0)-(0,3): samples (0,0),(0,1),(0,2),(0,3) -> max 0.3
    assert w[idx(0, 0), idx(0, 3)] == pytest.approx(math.exp(-(0.3**2) / se**2), rel=1e-12)
    # diagonal (0,0)-(1,2): L = 2, samples (0,0), (round_half_up(0.5)=1, 1), (1,2) -> 0.5
    assert w[idx(0, 0), idx(1, 2)] == pytest.approx(math.exp(-(0.5**2) / se**2), rel=1e-12)
    # (2,0)-(2,3): whole bottom row is 0 -> weight 1, no distance factor in the pure cue
    assert w[idx(2, 0), idx(2, 3)] == 1.0
    # (1,0)-(2,2): L = 2, samples (1,0), (2,1) [1.5 rounds up], (2,2) -> all 0
    assert w[idx(1, 0), idx(2, 2)] == 1.0
    # (0,3)-(1,2) passes only its end points -> max(0.3, 0.2)
    assert w[idx(0, 3), idx(1, 2)] == pytest.approx(math.exp(-(0.3**2) / se**2), rel=1e-12)


def _dense_reference(values, edges, radius, sf, sx, se, mask):
    """W by a double loop over pixel pairs, straight from the formulas in the docstring."""
    h, w = edges.shape
    ids = [(y, x) for y in range(h) for x in range(w) if mask[y, x]]
    ref = np.zeros((len(ids), len(ids)))
    for a, (y0, x0) in enumerate(ids):
        for b, (y1, x1) in enumerate(ids):
            d2 = (y1 - y0) ** 2 + (x1 - x0) ** 2
            if a == b or d2 > radius**2:
                continue
            # segment samples from the lower-raster pixel: i + floor(s * (j - i) / L + 1/2)
            (ya, xa), (yb, xb) = sorted([(y0, x0), (y1, x1)])
            length = max(abs(yb - ya), abs(xb - xa))
            emax = max(
                edges[
                    ya + math.floor(s * (yb - ya) / length + 0.5),
                    xa + math.floor(s * (xb - xa) / length + 0.5),
                ]
                for s in range(length + 1)
            )
            df2 = float(((values[y0, x0] - values[y1, x1]) ** 2).sum())
            # Shi & Malik 2000 eq. (11) times Malik et al. 2001 intervening contour
            ref[a, b] = math.exp(-df2 / sf**2 - d2 / sx**2 - emax**2 / se**2)
    return ref


@pytest.mark.parametrize(
    "seed, shape, radius",
    [(0, (6, 7), 2.3), (1, (6, 7), 2.3), (2, (9, 11), 7.0)],  # r = 7: 74 offsets, 2 bit words
)
def test_every_weight_equals_brute_force_formula(seed, shape, radius):
    rng = np.random.default_rng(seed)
    img = rng.random((*shape, 3))
    mask = rng.random(shape) > 0.2 if seed else np.ones(shape, dtype=bool)
    feats = compute_features(img)
    sf, sx, se = 0.7, 1.9, 0.3
    g = affinity_graph(
        feats, radius=radius, sigma_feature=sf, sigma_distance=sx, sigma_edge=se, mask=mask
    )
    ref = _dense_reference(feats.values, feats.edges, radius, sf, sx, se, mask)
    np.testing.assert_allclose(g.weights.toarray(), ref, rtol=1e-12, atol=0)


def test_combined_is_product_of_the_two_cues():
    img = _noisy_two_regions((10, 12))
    kw = dict(radius=3, sigma_feature=0.2, sigma_distance=2.0, sigma_edge=0.1)
    wi = affinity_graph(img, cue="intensity", **kw).weights
    wc = affinity_graph(img, cue="contour", **kw).weights
    wb = affinity_graph(img, cue="combined", **kw).weights
    np.testing.assert_allclose(wb.toarray(), wi.multiply(wc).toarray(), rtol=1e-12, atol=1e-300)


@pytest.mark.parametrize("cue", ["intensity", "combined"])
def test_constant_image_gives_purely_spatial_weights(cue):
    img = np.full((7, 8), 123, dtype=np.uint8)
    g = affinity_graph(img, radius=3, cue=cue)
    sx = g.sigmas["distance"]
    coo = g.weights.tocoo()
    ya, xa = np.divmod(g.nodes[coo.row], 8)
    yb, xb = np.divmod(g.nodes[coo.col], 8)
    d2 = (ya - yb) ** 2 + (xa - xb) ** 2
    np.testing.assert_allclose(coo.data, np.exp(-d2 / sx**2), rtol=1e-12)  # eq. (11), F const.


def test_constant_image_contour_cue_is_all_ones():
    g = affinity_graph(np.zeros((6, 6, 3)), radius=2, cue="contour")
    assert np.all(g.weights.data == 1.0)


def test_step_edge_blocks_intervening_contour():
    # Ideal vertical step: pairs straddling the step cross the edge ridge -> w ≈ 0; pairs on
    # one side, away from the ridge, see no edge -> w ≈ 1 (Malik et al. 2001).
    img = np.zeros((20, 30))
    img[:, 15:] = 1.0
    g = affinity_graph(img, radius=4, cue="contour")
    w = g.weights

    def wt(a, b):
        return w[a[0] * 30 + a[1], b[0] * 30 + b[1]]

    for y in (3, 10, 16):
        assert wt((y, 13), (y, 16)) < 1e-3  # across
        assert wt((y, 12), (y + 2, 15)) < 1e-3  # across, oblique
        assert wt((y, 4), (y + 3, 4)) > 0.999  # along the edge, left side
        assert wt((y, 25), (y, 28)) > 0.999  # right side
        assert wt((y, 8), (y + 2, 5)) > 0.999


# --------------------------------------------------------------------------- σ handling


def test_default_sigmas_follow_documented_rules():
    img = _noisy_two_regions()
    feats = compute_features(img)
    g = affinity_graph(feats, radius=4)
    v = feats.values
    d2 = np.concatenate(
        [((v[:, 1:] - v[:, :-1]) ** 2).sum(-1).ravel(), ((v[1:] - v[:-1]) ** 2).sum(-1).ravel()]
    )
    assert g.sigmas["feature"] == pytest.approx(np.sqrt(d2.mean()), rel=1e-12)
    assert g.sigmas["distance"] == pytest.approx(0.8 * 4)
    assert g.sigmas["edge"] == pytest.approx(np.sqrt(np.mean(feats.edges**2)), rel=1e-12)


def test_huge_sigma_switches_factor_off():
    img = _noisy_two_regions((8, 9))
    g = affinity_graph(img, radius=2, cue="intensity", sigma_feature=1e100, sigma_distance=1e100)
    assert np.all(g.weights.data == 1.0)


@pytest.mark.parametrize("name", ["sigma_feature", "sigma_distance", "sigma_edge"])
@pytest.mark.parametrize("value", [0.0, -1.0, np.nan, np.inf, 1e-200, 1e200, "big"])
def test_bad_sigma_rejected(name, value):
    with pytest.raises(ValueError, match=name):
        affinity_graph(np.random.default_rng(0).random((5, 5)), radius=2, **{name: value})


# --------------------------------------------------------------------------- mask


def test_mask_restricts_nodes_and_equals_subgraph():
    rng = np.random.default_rng(4)
    img = rng.random((12, 14))
    mask = np.zeros((12, 14), dtype=bool)
    mask[2:9, 3:12] = True
    mask[5, 5] = False
    kw = dict(radius=3, sigma_feature=0.3, sigma_distance=2.0, sigma_edge=0.2)
    feats = compute_features(img)
    full = affinity_graph(feats, **kw)
    sub = affinity_graph(feats, mask=mask, **kw)
    np.testing.assert_array_equal(sub.nodes, np.flatnonzero(mask))
    expected = full.weights[sub.nodes][:, sub.nodes]
    assert sub.weights.shape == (mask.sum(), mask.sum())
    assert abs(sub.weights - expected).max() == 0.0
    assert sub.weights.nnz == expected.nnz


def test_bad_masks():
    img = np.zeros((5, 6))
    with pytest.raises(ValueError, match=r"boolean array of shape \(5, 6\)"):
        affinity_graph(img, mask=np.ones((6, 5), dtype=bool))
    with pytest.raises(ValueError, match="boolean"):
        affinity_graph(img, mask=np.ones((5, 6), dtype=np.uint8))
    with pytest.raises(ValueError, match="no pixels"):
        affinity_graph(img, mask=np.zeros((5, 6), dtype=bool))


# --------------------------------------------------------------------------- memory


def test_memory_guard_refuses_before_building():
    img = np.random.default_rng(0).random((40, 50))
    nnz, est = estimate_graph_memory(img.shape, 5)
    with pytest.raises(GraphTooLargeError, match="multiscale path or a smaller radius") as info:
        affinity_graph(img, radius=5, memory_budget=est - 1)
    assert isinstance(info.value, MemoryError) and isinstance(info.value, ValueError)
    assert "memory_budget" in str(info.value) and "\n" not in str(info.value)
    assert affinity_graph(img, radius=5, memory_budget=est).weights.nnz == nnz
    assert affinity_graph(img, radius=5, memory_budget=None).weights.nnz == nnz


@pytest.mark.parametrize("budget", [0, -5, "4GB"])
def test_bad_memory_budget(budget):
    with pytest.raises(ValueError, match="memory_budget"):
        affinity_graph(np.zeros((4, 4)), memory_budget=budget)


def test_estimate_for_megapixel_images_is_cheap_and_refused_by_default():
    # 20000 x 20000 at r = 5: about 3.2e10 non-zeros, far beyond the 4 GiB default.
    nnz, est = estimate_graph_memory((20000, 20000), 5)
    assert nnz > 3e10 and est > 4 * 1024**3
    # closed form 2 * sum_offsets (H - dy)(W - |dx|) for r = 1 on 20000^2
    assert estimate_graph_memory((20000, 20000), 1)[0] == 2 * 2 * 20000 * 19999


@pytest.mark.slow
def test_peak_memory_stays_within_estimate():
    img = np.random.default_rng(0).random((150, 160, 3))
    feats = compute_features(img)
    nnz, est = estimate_graph_memory(img.shape, 5)
    tracemalloc.start()
    g = affinity_graph(feats, radius=5)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    stored = g.weights.data.nbytes + g.weights.indices.nbytes + g.weights.indptr.nbytes
    assert g.weights.nnz == nnz
    assert stored <= est and peak <= est
    assert peak / nnz < 20  # bytes per non-zero (issue 6: a naive build peaks near 45)


# --------------------------------------------------------------------------- bad input, dtypes


@pytest.mark.parametrize(
    "bad, match",
    [
        (np.zeros((0, 4)), "empty"),
        (np.zeros((2, 2, 2, 2)), r"\(H, W\) or \(H, W, C\)"),
        (np.zeros((3, 3), dtype=bool), "boolean"),
        (np.array([[1.0, np.nan]]), "NaN or infinite"),
    ],
)
def test_bad_images(bad, match):
    with pytest.raises(ValueError, match=match):
        affinity_graph(bad)


@pytest.mark.parametrize("radius", [0, -1, 0.5, np.nan, np.inf, "five"])
def test_bad_radius(radius):
    with pytest.raises(ValueError, match="radius"):
        affinity_graph(np.zeros((4, 4)), radius=radius)
    with pytest.raises(ValueError, match="radius"):
        estimate_graph_memory((4, 4), radius)


def test_inconsistent_features_rejected():
    good = compute_features(np.zeros((4, 5)))
    bad = Features(values=good.values, edges=np.zeros((5, 4)), kind="gray", low=0, high=1)
    with pytest.raises(ValueError, match=r"\(H, W, C\)"):
        affinity_graph(bad)
    neg = Features(values=good.values, edges=-np.ones((4, 5)), kind="gray", low=0, high=1)
    with pytest.raises(ValueError, match="non-negative"):
        affinity_graph(neg)


def test_bad_cue():
    with pytest.raises(ValueError, match="'combined', 'intensity', 'contour'"):
        affinity_graph(np.zeros((4, 4)), cue="texture")


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.float32, np.float64])
def test_dtypes_give_the_same_graph(dtype):
    rng = np.random.default_rng(9)
    img8 = rng.integers(0, 256, size=(12, 13, 3), dtype=np.uint8)
    if dtype == np.uint8:
        img = img8
    elif dtype == np.uint16:
        img = img8.astype(np.uint16) * 257  # standard 8 -> 16 bit scaling
    else:
        img = (img8 / 255.0).astype(dtype)
    ref = affinity_graph(img8, radius=3).weights
    w = affinity_graph(img, radius=3).weights
    tol = 1e-5 if dtype == np.float32 else 1e-9
    np.testing.assert_array_equal(w.indices, ref.indices)
    np.testing.assert_allclose(w.data, ref.data, rtol=tol, atol=1e-12)
