"""Tests for imgcut.hierarchy (watershed over-segmentation and greedy merging)."""

from __future__ import annotations

import numpy as np
import pytest

from imgcut import hierarchy


def _three_strips():
    lab = np.repeat(np.array([[1, 2, 3]]), 6, axis=0).repeat(4, axis=1)
    b = np.zeros(lab.shape)
    b[:, 3:5] = 0.9  # border 1|2
    b[:, 7:9] = 0.2  # border 2|3
    return lab, b


def test_merge_order_and_levels_follow_mean_border_strength():
    # Greedy merging by mean boundary strength (Arbelaez et al. 2011, §4.2): the weak border
    # (0.2) goes first, then the strong one (0.9).
    lab, b = _three_strips()
    h = hierarchy.merge_regions(lab, b)
    assert h.merge_levels.tolist() == pytest.approx([0.2, 0.9])
    assert h.n_regions_at(0.1) == 3
    assert h.n_regions_at(0.5) == 2
    assert h.n_regions_at(0.95) == 1
    two = h.labels_at(0.5)
    assert len(np.unique(two[:, 4:])) == 1 and two[0, 0] != two[0, 11]


def test_levels_are_an_ultrametric_and_nested():
    # Ultrametric property (Arbelaez et al. 2011, §4.2): for any three base regions the two
    # largest pairwise merge levels are equal; and segmentations at t1 < t2 are nested.
    rng = np.random.default_rng(0)
    e = rng.random((40, 50))
    h = hierarchy.boundary_hierarchy(e, smooth=2.0)
    assert np.all(np.diff(h.merge_levels) >= 0)
    assert h.n_base - len(h.merge_levels) == 1  # a connected image ends as one region
    fine, coarse = h.labels_at(0.4), h.labels_at(0.6)
    # every fine region lies inside exactly one coarse region
    pairs = np.unique(np.stack([fine.ravel(), coarse.ravel()]), axis=1)
    assert len(np.unique(pairs[0])) == pairs.shape[1]
    # Ultrametric inequality U(a, c) <= max(U(a, b), U(b, c)) for every triple of base regions,
    # with U(a, b) the first level at which a and b share a region.
    n = h.n_base
    u = np.full((n, n), np.inf)
    for t in np.unique(h.merge_levels)[::-1]:
        comp = h._components(t)
        same = comp[:, None] == comp[None, :]
        u[same] = t
    np.fill_diagonal(u, 0.0)
    bound = np.maximum(u[:, :, None], u[None, :, :])  # max(U(a,b), U(b,c)) indexed [a, b, c]
    assert np.all(u[:, None, :] <= bound + 1e-12)


def test_labels_with_counts_and_raster_numbering():
    lab, b = _three_strips()
    h = hierarchy.merge_regions(lab, b)
    for k in (1, 2, 3):
        out = h.labels_with(k)
        assert out.dtype == np.int32
        assert out.max() == k
        # raster order of first appearance (architecture convention)
        _, first = np.unique(out.ravel(), return_index=True)
        assert np.all(np.diff(first) > 0)
    assert h.labels_with(10).max() == 3


def test_ultrametric_map_thresholds_give_the_same_boundaries():
    lab, b = _three_strips()
    h = hierarchy.merge_regions(lab, b)
    ucm = h.ultrametric_map()
    assert ucm.max() == pytest.approx(0.9)
    seg = h.labels_at(0.5)
    edge = np.zeros(seg.shape, bool)
    edge[:, :-1] |= seg[:, :-1] != seg[:, 1:]
    np.testing.assert_array_equal(edge, ucm > 0.5)


def test_watershed_matches_scikit_image_on_two_basins():
    # Two basins separated by a ridge: skimage.segmentation.watershed reference gives 2 regions
    # split at the ridge.
    e = np.zeros((10, 21))
    e[:, 10] = 1.0
    lab = hierarchy.oversegment(e, smooth=0)
    assert lab.max() == 2
    assert len(np.unique(lab[:, :10])) == 1 and len(np.unique(lab[:, 11:])) == 1


def test_oriented_borders_use_the_tensor():
    # A border whose tensor says "no change across the border" must get strength ~0 even
    # where the isotropic map is high.
    lab = np.repeat(np.array([[1, 2]]), 8, axis=0).repeat(5, axis=1)
    b = np.ones(lab.shape)
    tensor = np.zeros((3,) + lab.shape)
    tensor[2] = 1.0  # change along y only; the border between columns has normal along x
    h = hierarchy.merge_regions(lab, b, tensor=tensor)
    assert h.edge_strength[0] == pytest.approx(0.0, abs=1e-6)
    tensor[0], tensor[2] = 1.0, 0.0
    h = hierarchy.merge_regions(lab, b, tensor=tensor)
    assert h.edge_strength[0] == pytest.approx(1.0)


def test_constant_map_and_single_region():
    h = hierarchy.boundary_hierarchy(np.zeros((12, 9)))
    assert h.n_base == 1
    assert h.labels_at(0.5).max() == 1
    assert h.labels_with(3).max() == 1


def test_bad_input_raises():
    with pytest.raises(ValueError, match="shape"):
        hierarchy.merge_regions(np.ones((3, 3), int), np.zeros((3, 4)))
    with pytest.raises(ValueError, match=">= 1"):
        hierarchy.merge_regions(np.zeros((3, 3), int), np.zeros((3, 3)))
    with pytest.raises(ValueError, match="NaN"):
        hierarchy.boundary_hierarchy(np.full((3, 3), np.nan))
    lab, b = _three_strips()
    h = hierarchy.merge_regions(lab, b)
    with pytest.raises(ValueError, match="n_regions"):
        h.labels_with(0)
    with pytest.raises(ValueError, match="finite"):
        h.labels_at(np.nan)


def test_min_area_merges_small_regions_first_at_level_zero():
    # A 2 x 2 sliver inside a strong ring would otherwise survive to the top level.
    lab = np.ones((20, 20), int)
    lab[:, 10:] = 2
    lab[4:6, 4:6] = 3
    b = np.zeros(lab.shape)
    b[:, 9:11] = 0.3
    b[3:7, 3:7] = 0.9
    b[4:6, 4:6] = 0.9
    plain = hierarchy.merge_regions(lab, b)
    assert plain.n_regions_at(0.5) == 2 and plain.n_regions_at(0.2) == 3
    h = hierarchy.merge_regions(lab, b, min_area=10)
    assert h.merge_levels[0] == 0.0
    assert h.n_regions_at(0.0) == 2  # the sliver is gone at every level >= 0
    assert h.n_regions_at(0.5) == 1
    assert np.all(np.diff(h.merge_levels) >= 0)


def test_image_hierarchy_pipeline_on_a_synthetic_photo():
    # Four flat colour quadrants plus noise: the preset pipeline must give the four quadrants
    # at its default level, identically on a second run with the same seed.
    rng = np.random.default_rng(0)
    img = np.zeros((48, 64, 3))
    img[:24, :32] = (0.8, 0.2, 0.2)
    img[:24, 32:] = (0.2, 0.7, 0.2)
    img[24:, :32] = (0.2, 0.2, 0.8)
    img[24:, 32:] = (0.9, 0.9, 0.3)
    img = np.clip(img + rng.normal(scale=0.02, size=img.shape), 0, 1)
    h = hierarchy.image_hierarchy(img, preset="photo", seed=0)
    lab = h.labels_at()
    assert h.default_level is not None and h.boundary is not None
    assert lab.max() == 4
    for sl in (np.s_[2:20, 2:28], np.s_[2:20, 36:60], np.s_[28:46, 2:28], np.s_[28:46, 36:60]):
        assert len(np.unique(lab[sl])) == 1
    again = hierarchy.image_hierarchy(img, preset="photo", seed=0)
    np.testing.assert_array_equal(again.labels_at(), lab)


def test_size_term_merges_a_small_region_before_a_weaker_border_between_large_ones():
    # Two halves (border 0.5) and a 3 x 3 region inside the left half (border 0.6).  Plain mean
    # strength merges the halves first; with the region-size factor (a / (a + a0))^γ the small
    # region's score is 0.6 * sqrt(9 / (9 + a0)) (closed form of the merge score, see
    # merge_regions Notes), below 0.5, so it merges first at exactly that level.
    lab = np.ones((30, 30), int)
    lab[:, 15:] = 2
    lab[5:8, 5:8] = 3
    b = np.zeros(lab.shape)
    b[:, 14:16] = 0.5
    ring = np.zeros(lab.shape, bool)
    ring[4:9, 4:9] = True
    b[ring] = 0.6
    plain = hierarchy.merge_regions(lab, b)
    assert plain.merge_levels.tolist() == pytest.approx([0.5, 0.6])
    a0 = 90.0
    h = hierarchy.merge_regions(lab, b, size_scale=a0 / lab.size, size_power=0.5)
    assert h.merge_levels[0] == pytest.approx(0.6 * np.sqrt(9 / (9 + a0)))
    assert h.n_regions_at(0.4) == 2  # the small region is gone, the halves are not
    assert np.all(np.diff(h.merge_levels) >= 0)
    # then the two 450-px halves merge at 0.5 times the size factor of 450 px
    big = 450
    assert h.merge_levels[1] == pytest.approx(0.5 * np.sqrt(big / (big + a0)))


def test_strength_power_is_a_power_mean_along_the_border():
    # Border pixel pairs alternate between strength 0.04 and 0.64: the plain mean is 0.34, the
    # power mean with p = 1/2 is ((0.2 + 0.8) / 2)^2 = 0.25 (definition of the power mean).
    lab = np.repeat(np.array([[1, 2]]), 8, axis=0).repeat(4, axis=1)
    b = np.zeros(lab.shape)
    b[:, 3:5] = np.where(np.arange(8) % 2 == 0, 0.04, 0.64)[:, None]
    assert hierarchy.merge_regions(lab, b).merge_levels[0] == pytest.approx(0.34)
    h = hierarchy.merge_regions(lab, b, strength_power=0.5)
    assert h.merge_levels[0] == pytest.approx(0.25)
    assert h.edge_strength[0] == pytest.approx(0.25)


def test_merge_options_are_validated():
    lab, b = _three_strips()
    for kw, msg in (
        ({"size_scale": -0.1}, "size_scale"),
        ({"size_power": -1.0}, "size_power"),
        ({"strength_power": 0.0}, "strength_power"),
    ):
        with pytest.raises(ValueError, match=msg):
            hierarchy.merge_regions(lab, b, **kw)


def test_appearance_term_merges_alike_regions_before_a_weaker_border():
    # Strips 1 | 2 | 3 with borders 0.5 (1|2) and 0.4 (2|3); strips 1 and 2 share one colour
    # bin, strip 3 another.  Border strength alone merges 2|3 first.  With the appearance term
    # the chi-squared distance (Martin, Fowlkes & Malik 2004: ½ Σ (g−h)²/(g+h)) is 0 for the
    # alike pair and 1 for disjoint one-bin histograms, so the "sum" keys are
    # 0.5·0.5 + 0.5·0 = 0.25 and 0.5·0.4 + 0.5·1 = 0.7 (closed form of the Notes' score).
    lab = np.repeat(np.array([[1, 2, 3]]), 6, axis=0).repeat(4, axis=1)
    b = np.zeros(lab.shape)
    b[:, 3:5] = 0.5
    b[:, 7:9] = 0.4
    feat = (lab == 3).astype(np.int64)[None]
    plain = hierarchy.merge_regions(lab, b, features=feat)  # weight 0: border only
    assert plain.merge_levels.tolist() == pytest.approx([0.4, 0.5])
    h = hierarchy.merge_regions(lab, b, features=feat, similarity_weight=0.5, similarity_mix="sum")
    assert h.merge_levels[0] == pytest.approx(0.25)
    assert h.n_regions_at(0.3) == 2 and h.labels_at(0.3)[0, 0] == h.labels_at(0.3)[0, 5]
    # after the merge, region {1,2} still has histogram (1, 0) against (0, 1): key 0.7
    assert h.merge_levels[1] == pytest.approx(0.7)
    # geometric mix: 0.5^(1/2) · 0^(1/2) = 0 for the alike pair
    g = hierarchy.merge_regions(lab, b, features=feat, similarity_weight=0.5)
    assert g.merge_levels[0] == pytest.approx(0.0)
    assert g.merge_levels[1] == pytest.approx(np.sqrt(0.4 * 1.0))


def test_region_chi2_matches_its_definition():
    # Mean over channels of ½ Σ (g−h)²/(g+h) of normalised histograms (Martin et al. 2004),
    # written out with np.histogram on two random regions with two channels.
    rng = np.random.default_rng(5)
    base = np.ones((10, 12), np.int32)
    base[:, 6:] = 2
    feat = np.stack([rng.integers(0, 4, base.shape), rng.integers(0, 3, base.shape)])
    hist, c = hierarchy._region_histograms(base, feat)
    area = np.bincount(base.ravel() - 1).astype(float)
    got = hierarchy._chi2_rows(hist[0], area[0], hist[[1]], area[[1]], c)[0]
    ref = 0.0
    for ch, nb in zip(feat, (4, 3), strict=True):
        g = np.histogram(ch[base == 1], bins=np.arange(nb + 1))[0] / 60.0
        h = np.histogram(ch[base == 2], bins=np.arange(nb + 1))[0] / 60.0
        s = g + h
        ref += 0.5 * np.sum(np.where(s > 0, (g - h) ** 2 / np.where(s > 0, s, 1), 0.0)) / 2
    assert got == pytest.approx(ref, rel=1e-12)


def test_appearance_options_are_validated():
    lab, b = _three_strips()
    with pytest.raises(ValueError, match="similarity_weight"):
        hierarchy.merge_regions(lab, b, similarity_weight=1.5)
    with pytest.raises(ValueError, match="similarity_mix"):
        hierarchy.merge_regions(lab, b, similarity_mix="max")
    with pytest.raises(ValueError, match="features"):
        hierarchy.merge_regions(lab, b, features=np.zeros((1, 2, 2), int), similarity_weight=0.2)
    with pytest.raises(ValueError, match="features"):
        hierarchy.merge_regions(
            lab, b, features=-np.ones((1,) + lab.shape, int), similarity_weight=0.2
        )
