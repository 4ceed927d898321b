"""Tests for imgcut.working_scale: hierarchies of large photographs at a working size."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import sparse
from scipy.sparse.csgraph import connected_components

from imgcut.hierarchy import boundary_hierarchy, image_hierarchy
from imgcut.presets import get_preset
from imgcut.working_scale import (
    _drop_empty_regions,
    _join_levels,
    downsample_image,
    edge_guide,
    upsample_hierarchy,
    working_scale,
)


def test_working_scale_closed_form_and_no_upsampling():
    assert working_scale((2000, 3000, 3), 150_000) == pytest.approx(np.sqrt(150_000 / 6e6))
    assert working_scale((321, 481), 250_000) == 1.0
    assert working_scale((4000, 4000), 0) == 1.0
    assert working_scale((1_000_000, 1), 250_000) == 1.0  # a strip keeps its one pixel
    assert working_scale((100_000, 40), 250_000) == pytest.approx(32 / 40)  # MIN_SIDE
    with pytest.raises(ValueError, match="working_pixels"):
        working_scale((10, 10), -1)


def test_downsample_keeps_dtype_range_and_constant_images():
    img = np.full((90, 120, 3), 173, dtype=np.uint8)
    small = downsample_image(img, 1 / 3)
    assert small.shape == (30, 40, 3) and small.dtype == np.uint8
    assert np.all(small == 173)  # a constant image stays exactly constant
    grey = np.linspace(0.0, 1.0, 100 * 80).reshape(100, 80)
    g = downsample_image(grey, 0.5)
    assert g.dtype == np.float64 and g.shape == (50, 40)
    assert g.min() >= 0.0 and g.max() <= 1.0
    with pytest.raises(ValueError, match="scale"):
        downsample_image(img, 1.5)


def test_join_levels_is_the_minimax_path_level():
    # The ultrametric of a hierarchy built by merging weakest borders first is the single-linkage
    # (minimax path) distance: the smallest threshold t at which the edges with level <= t
    # connect the two regions (Gower & Ross 1969, the minimum-spanning-tree view of single
    # linkage).  Brute force over thresholds with scipy's connected components.
    rng = np.random.default_rng(3)
    h, w = 8, 9
    idx = np.arange(h * w).reshape(h, w)
    edges = np.concatenate(
        [
            np.stack([idx[:, :-1].ravel(), idx[:, 1:].ravel()], 1),
            np.stack([idx[:-1].ravel(), idx[1:].ravel()], 1),
        ]
    )
    levels = np.round(rng.random(len(edges)), 2)
    pairs = rng.integers(0, h * w, size=(120, 2))
    pairs = pairs[pairs[:, 0] != pairs[:, 1]]
    got = _join_levels(h * w, edges, levels, pairs)
    n = h * w
    expected = []
    for a, b in pairs:
        for t in np.unique(levels):
            e = edges[levels <= t]
            g = sparse.coo_matrix((np.ones(len(e)), (e[:, 0], e[:, 1])), shape=(n, n))
            comp = connected_components(g, directed=False)[1]
            if comp[a] == comp[b]:
                expected.append(t)
                break
    np.testing.assert_allclose(got, expected)
    # two pieces that never join
    split = _join_levels(4, np.array([[0, 1], [2, 3]]), np.array([0.1, 0.2]), np.array([[0, 3]]))
    assert np.isinf(split[0])


def _three_band_hierarchy():
    e = np.zeros((30, 45))
    e[:, 14] = 0.4
    e[:, 29] = 0.9
    return replace(boundary_hierarchy(e), boundary=e)


def test_upsampling_without_guide_is_nearest_neighbour_at_every_level():
    h = _three_band_hierarchy()
    big = upsample_hierarchy(h, (90, 135))
    assert big.n_base == h.n_base
    np.testing.assert_array_equal(big.merge_levels, h.merge_levels)
    for t in (0.0, 0.2, 0.5, 1.0):
        small = h.labels_at(t)
        want = np.kron(small, np.ones((3, 3), dtype=small.dtype))
        np.testing.assert_array_equal(big.labels_at(t), want)
    assert big.boundary.shape == (90, 135)
    with pytest.raises(ValueError, match="smaller"):
        upsample_hierarchy(h, (10, 10))


def test_guide_moves_borders_onto_the_full_resolution_edge():
    # A step edge between columns 100 and 101 of a 300-wide image: at a third of the size the
    # border can only sit on a multiple of 3; after snapping it must be on the true edge.
    img = np.zeros((120, 300))
    img[:, 101:] = 1.0
    img += np.random.default_rng(0).normal(0, 0.02, img.shape)
    small = downsample_image(img, 1 / 3)
    gx = np.abs(np.diff(small, axis=1, append=small[:, -1:]))
    h = boundary_hierarchy(gx / gx.max())
    plain = upsample_hierarchy(h, img.shape)
    snapped = upsample_hierarchy(h, img.shape, guide=edge_guide(img))
    # every base region keeps pixels (thin ones are contracted), so counts are exact
    assert len(np.unique(snapped.base_labels)) == snapped.n_base
    for n in (2, 5, 20):
        assert snapped.labels_with(n).max() == min(n, snapped.n_base)

    def border_columns(lab):
        cols = np.flatnonzero(np.any(lab[:, :-1] != lab[:, 1:], axis=0))
        return set(cols.tolist())

    t = 0.5
    assert border_columns(snapped.labels_at(t)) == {100}
    assert border_columns(plain.labels_at(t)) != {100}  # the staircase copy misses it
    for level in (0.3, 0.5, 1.0):  # same number of regions from the first real merges on
        assert snapped.n_regions_at(level) == h.n_regions_at(level)
    u = snapped.ultrametric_map()  # defined for every adjacent pair, new ones included
    assert u.shape == img.shape and np.all(np.isfinite(u))


def test_photo_hierarchy_of_a_large_image_runs_at_the_working_size():
    # Three colour blocks, 240 x 360, with the working size set to 1/9 of the pixels.
    rng = np.random.default_rng(1)
    img = np.zeros((240, 360, 3))
    img[:, :125] = (0.8, 0.2, 0.2)
    img[:, 125:250] = (0.2, 0.7, 0.3)
    img[:, 250:] = (0.2, 0.3, 0.8)
    img = np.clip(img + rng.normal(0, 0.03, img.shape), 0, 1)
    img8 = (img * 255).round().astype(np.uint8)
    preset = get_preset("photo", working_pixels=240 * 360 // 9, ensemble=())
    h = image_hierarchy(img8, preset=preset, seed=0)
    assert h.base_labels.shape == (240, 360)
    lab = h.labels_with(3)
    cols = set(np.flatnonzero(np.any(lab[:, :-1] != lab[:, 1:], axis=0)).tolist())
    assert cols <= {123, 124, 125, 248, 249, 250}  # the block edges, to a pixel
    h2 = image_hierarchy(img8, preset=preset, seed=0)
    np.testing.assert_array_equal(h2.labels_at(), h.labels_at())  # deterministic
    # an image at or below the working size is not resampled at all
    tiny = get_preset("photo", working_pixels=240 * 360, ensemble=())
    full = get_preset("photo", working_pixels=0, ensemble=())
    np.testing.assert_array_equal(
        image_hierarchy(img8, preset=tiny, seed=0).labels_at(),
        image_hierarchy(img8, preset=full, seed=0).labels_at(),
    )


def test_presets_working_size():
    assert get_preset("photo").working_pixels == 250_000
    assert get_preset("fluorescence").working_pixels == 0


def test_contracting_regions_without_pixels_changes_no_segmentation():
    # Reference: the hierarchy with the empty regions kept, whose labels_at(t) is by definition
    # the components of the base graph with edges of level <= t; contracting a region that owns
    # no pixels must give the same pixels at every level and an exact region count.
    rng = np.random.default_rng(5)
    e = ndimage_smooth(rng.random((40, 50)))
    h = boundary_hierarchy(e)
    base = h.base_labels.copy()
    # empty a few regions: give their pixels to the neighbour on their left/top
    victims = rng.choice(np.arange(2, h.n_base + 1), size=min(6, h.n_base - 1), replace=False)
    for v in victims:
        ys, xs = np.nonzero(base == v)
        base[ys, xs] = (
            base[ys, np.maximum(xs.min() - 1, 0)]
            if xs.min() > 0
            else base[np.maximum(ys.min() - 1, 0), xs]
        )
    h0 = replace(h, base_labels=base)
    h1 = _drop_empty_regions(h0)
    assert h1.n_base == len(np.unique(base)) == len(np.unique(h1.base_labels))
    for t in np.unique(np.concatenate([[0.0], h.edge_levels, [2.0]])):
        np.testing.assert_array_equal(h1.labels_at(t), h0.labels_at(t))
    assert len(h1.merge_levels) == h1.n_base - 1


def ndimage_smooth(x):
    from scipy import ndimage

    return ndimage.gaussian_filter(x, 2.0)


def test_invalid_large_images_are_refused_as_small_ones_are():
    # a boolean image is not an image the cues accept, whatever its size
    preset = get_preset("photo", working_pixels=100, ensemble=())
    for shape in ((8, 9, 3), (60, 70, 3)):
        with pytest.raises(ValueError, match="real array"):
            image_hierarchy(np.zeros(shape, dtype=bool), preset=preset)
    nan = np.zeros((60, 70, 3))
    nan[3, 3, 0] = np.nan
    with pytest.raises(ValueError, match="NaN"):
        image_hierarchy(nan, preset=preset)
