"""Tests for imgcut.ensemble (one hierarchy from the mean of several contour maps)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from imgcut import ensemble, hierarchy
from imgcut.presets import PHOTO_ENSEMBLE, get_preset


def _nested_map() -> np.ndarray:
    # Four blocks with borders of three clearly different strengths: the left pair and the
    # right pair are split by weak vertical lines (0.2, 0.35), the halves by a strong horizontal
    # line (0.8): a hierarchy with merges at about 0.2, 0.35 and 0.8.
    e = np.zeros((40, 60))
    e[:20, 29:31] = 0.2
    e[20:, 29:31] = 0.35
    e[19:21, :] = 0.8
    return e


def _same_partition_off_borders(a: np.ndarray, b: np.ndarray, border: np.ndarray) -> bool:
    """True when ``a`` and ``b`` agree up to renaming on every pixel away from the borders."""
    keep = ~border
    pairs = np.unique(np.stack([a[keep], b[keep]]), axis=1)
    # one-to-one: every label of a meets one label of b and vice versa
    return len(np.unique(pairs[0])) == len(np.unique(pairs[1])) == pairs.shape[1]


def test_combine_is_the_mean_of_rescaled_maps_in_closed_form():
    # Definition M = (1/K) Σ U_k · level / r_k, checked by hand on a single border pixel.
    u1 = np.zeros((5, 5))
    u1[2, 2] = 0.4
    u2 = np.zeros((5, 5))
    u2[2, 2] = 0.9
    m = ensemble.combine_ultrametric_maps([u1, u2], [0.4, 0.6], level=0.5, dilation=1)
    assert m[2, 2] == pytest.approx((0.4 * 0.5 / 0.4 + 0.9 * 0.5 / 0.6) / 2)
    assert np.count_nonzero(m) == 1


def test_dilation_is_a_square_grey_dilation_of_each_map():
    # scipy.ndimage.grey_dilation with a 3 x 3 footprint is the reference (a local maximum).
    rng = np.random.default_rng(0)
    u = [rng.random((12, 9)), rng.random((12, 9))]
    m = ensemble.combine_ultrametric_maps(u, [1.0, 2.0], level=1.0, dilation=3)
    ref = (
        ndimage.grey_dilation(u[0], size=(3, 3), mode="nearest")
        + ndimage.grey_dilation(u[1] / 2.0, size=(3, 3), mode="nearest")
    ) / 2
    np.testing.assert_allclose(m, ref, rtol=1e-15, atol=0)
    assert m.shape == (12, 9) and m.dtype == np.float64


def test_combine_is_symmetric_in_member_order_bit_for_bit():
    rng = np.random.default_rng(1)
    maps = [rng.random((16, 20)) for _ in range(5)]
    refs = [0.5, 0.525, 0.5, 0.55, 0.45]
    m = ensemble.combine_ultrametric_maps(maps, refs)
    for perm in ([4, 3, 2, 1, 0], [2, 0, 4, 1, 3]):
        other = ensemble.combine_ultrametric_maps([maps[i] for i in perm], [refs[i] for i in perm])
        np.testing.assert_array_equal(other, m)
    h1 = ensemble.ensemble_hierarchy(maps, refs)
    h2 = ensemble.ensemble_hierarchy(maps[::-1], refs[::-1])
    np.testing.assert_array_equal(h1.edge_levels, h2.edge_levels)
    np.testing.assert_array_equal(h1.labels_at(0.6), h2.labels_at(0.6))


def test_identical_members_give_the_single_member_map():
    u = ndimage.gaussian_filter(np.random.default_rng(2).random((10, 10)), 1)
    one = ensemble.combine_ultrametric_maps([u], [0.7])
    three = ensemble.combine_ultrametric_maps([u, u, u], [0.7, 0.7, 0.7])
    np.testing.assert_allclose(three, one, rtol=1e-15)


def test_one_member_reproduces_the_plain_hierarchy_at_matched_levels():
    # The ensemble of one hierarchy, with its reference at the common level, must give the same
    # nested partitions as the hierarchy itself (up to pixels on the borders), at levels
    # between its merges.  (Without the 3 x 3 dilation the new watershed borders straddle the
    # one-pixel ridges of the map, half on the ridge and half beside it, and every level
    # drops to about half: the reason for the dilation.)
    dilation = 3
    h = hierarchy.boundary_hierarchy(_nested_map())
    lv = h.merge_levels  # about 0.2, 0.35, 0.8 (raised a little by the junction pixels)
    assert len(lv) == 3 and lv[0] < 0.3 < lv[1] < 0.5 < lv[2] < 0.9
    u = h.ultrametric_map()
    e = ensemble.ensemble_hierarchy([u], [0.5], level=0.5, dilation=dilation, default_level=0.5)
    assert e.default_level == 0.5 and e.boundary.shape == u.shape
    border = ndimage.binary_dilation(u > 0, iterations=2)
    for t in (0.1, 0.3, 0.5, 0.9):
        assert e.n_regions_at(t) == h.n_regions_at(t), t
        assert _same_partition_off_borders(e.labels_at(t), h.labels_at(t), border), t


def test_reference_levels_rescale_the_hierarchy_levels():
    # A member with reference r is cut at level t·r/level: scaling r by 2 halves the levels.
    u = hierarchy.boundary_hierarchy(_nested_map()).ultrametric_map()
    a = ensemble.ensemble_hierarchy([u], [0.5])
    b = ensemble.ensemble_hierarchy([u], [1.0])
    np.testing.assert_allclose(b.merge_levels, a.merge_levels / 2, rtol=1e-12)


def test_invalid_inputs_raise_clear_errors():
    u = np.zeros((6, 6))
    with pytest.raises(ValueError, match="K >= 1"):
        ensemble.combine_ultrametric_maps([], [])
    with pytest.raises(ValueError, match="one shape"):
        ensemble.combine_ultrametric_maps([u, np.zeros((6, 5))], [1, 1])
    with pytest.raises(ValueError, match="one level per map"):
        ensemble.combine_ultrametric_maps([u, u], [1.0])
    with pytest.raises(ValueError, match="> 0"):
        ensemble.combine_ultrametric_maps([u], [0.0])
    with pytest.raises(ValueError, match="odd integer"):
        ensemble.combine_ultrametric_maps([u], [1.0], dilation=2)
    bad = u.copy()
    bad[0, 0] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        ensemble.combine_ultrametric_maps([bad], [1.0])
    with pytest.raises(ValueError, match="may not override"):
        ensemble.member_presets(get_preset("photo", ensemble=(((("n_textons", 8),), 0.5),)))
    with pytest.raises(ValueError, match="reference level"):
        ensemble.member_presets(get_preset("photo", ensemble=(((), -1.0),)))
    with pytest.raises(ValueError, match="pair"):
        ensemble.member_presets(get_preset("photo", ensemble=((0.5,),)))
    with pytest.raises(ValueError, match="no ensemble members"):
        ensemble.ensemble_image_hierarchy(np.zeros((8, 8)), preset=get_preset("photo", ensemble=()))


def test_photo_ensemble_members_are_the_documented_variants():
    members = ensemble.member_presets(get_preset("photo", ensemble=PHOTO_ENSEMBLE))
    assert [r for _, r in members] == [0.5, 0.525, 0.5, 0.55, 0.45]
    assert all(m.ensemble == () for m, _ in members)
    assert [m.contrast_power for m, _ in members] == [0.5, 0.75, 0.5, 0.5, 0.5]
    assert [m.strength_power for m, _ in members] == [0.5, 0.5, 1.0, 0.5, 0.5]
    assert [(m.similarity_mix, m.similarity_weight) for m, _ in members] == [
        ("sum", 0.2),
        ("sum", 0.2),
        ("sum", 0.2),
        ("product", 0.05),
        ("sum", 0.35),
    ]


def test_ensemble_pipeline_on_a_synthetic_photo_is_deterministic():
    # Four flat colour quadrants plus noise (as the single-preset pipeline test): the ensemble
    # hierarchy must separate them at its default level, the same way on a second run, and
    # image_hierarchy must hand an ensemble preset to the ensemble.
    rng = np.random.default_rng(0)
    img = np.zeros((48, 64, 3))
    img[:24, :32] = (0.8, 0.2, 0.2)
    img[:24, 32:] = (0.2, 0.7, 0.2)
    img[24:, :32] = (0.2, 0.2, 0.8)
    img[24:, 32:] = (0.9, 0.9, 0.3)
    img = np.clip(img + rng.normal(scale=0.02, size=img.shape), 0, 1)
    p = get_preset("photo", ensemble=PHOTO_ENSEMBLE)
    h = ensemble.ensemble_image_hierarchy(img, preset=p, seed=0)
    lab = h.labels_at()
    assert lab.shape == (48, 64) and lab.dtype == np.int32
    assert h.default_level == p.default_level
    assert lab.max() == 4
    for sl in (np.s_[3:20, 3:28], np.s_[3:20, 36:60], np.s_[28:45, 3:28], np.s_[28:45, 36:60]):
        assert len(np.unique(lab[sl])) == 1
    via = hierarchy.image_hierarchy(img, preset=p, seed=0)
    np.testing.assert_array_equal(via.edge_levels, h.edge_levels)
    np.testing.assert_array_equal(via.labels_at(), lab)


def test_shared_cues_give_the_members_own_hierarchies():
    # Sharing the cues, boundary maps, watershed and channels between members must not change
    # anything: the ensemble equals the mean of each member's own image_hierarchy map.
    rng = np.random.default_rng(3)
    img = np.clip(rng.normal(0.5, 0.05, (40, 56, 3)), 0, 1)
    img[:, 28:] += (0.3, -0.2, 0.1)
    img[20:, :20] -= 0.25
    img = np.clip(img, 0, 1)
    p = get_preset("photo", ensemble=PHOTO_ENSEMBLE)
    members = ensemble.member_presets(p)
    own = [hierarchy.image_hierarchy(img, preset=m, seed=0).ultrametric_map() for m, _ in members]
    expected = ensemble.ensemble_hierarchy(own, [r for _, r in members])
    h = ensemble.ensemble_image_hierarchy(img, preset=p, seed=0)
    np.testing.assert_array_equal(h.boundary, expected.boundary)
    np.testing.assert_array_equal(h.edge_levels, expected.edge_levels)
