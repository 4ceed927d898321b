"""Tests for imgcut.cues (local brightness, colour and texture gradients)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from imgcut import cues


def _step(h=40, w=40, col=20, lo=0.2, hi=0.8):
    img = np.full((h, w), lo)
    img[:, col:] = hi
    return img


def test_step_between_disjoint_histograms_gives_chi2_one_across_and_zero_along():
    # Chi-squared distance of two disjoint normalised histograms is 1 (Martin, Fowlkes & Malik
    # 2004, eq. (2): ½ Σ (g−h)²/(g+h) with g, h on disjoint bins sums to ½ (1 + 1)).
    h = np.zeros((40, 40, 2), np.float32)
    h[:, :20, 0] = 1
    h[:, 20:, 1] = 1
    t = cues.histogram_gradient_tensor(h, 3.0)
    across = t[0, 10:30, 19:21].mean()
    assert across == pytest.approx(1.0, abs=0.03)
    assert np.abs(t[2, 10:30, 19:21]).max() < 1e-6  # no change along the edge
    assert t[0, 10:30, :8].max() < 1e-3  # flat far from the edge


def test_tensor_steering_matches_rotated_image():
    # Steerability (Freeman & Adelson 1991): the response across a normal at angle a equals the
    # response of the image rotated by a across the x axis.  We compare a diagonal step with
    # the same step rotated back by 45 degrees.
    yy, xx = np.mgrid[0:61, 0:61]
    diag = ((xx + yy) > 60).astype(int)
    h = np.stack([diag == 0, diag == 1], -1).astype(np.float32)
    t = cues.histogram_gradient_tensor(h, 3.0)
    s_normal = cues.oriented_strength(t[:, 30, 30], np.pi / 4)
    s_tangent = cues.oriented_strength(t[:, 30, 30], -np.pi / 4)
    assert s_normal == pytest.approx(1.0, abs=0.05)
    assert s_tangent < 0.05


def test_large_scale_downsampled_path_agrees_with_direct():
    # Block averaging before a wide Gaussian is a standard pyramid approximation; the two
    # paths should agree closely on a smooth step.
    h = np.zeros((64, 64, 2), np.float32)
    h[:, :32, 0] = 1
    h[:, 32:, 1] = 1
    fast = cues.histogram_gradient_tensor(h, 8.0)  # factor 4 internally
    pad = np.pad(h, ((0, 0), (0, 0), (0, 0)))
    s = 8.0
    g0 = ndimage.gaussian_filter1d(pad, s, axis=0)
    sm = ndimage.gaussian_filter1d(g0, s, axis=1)
    dx = ndimage.gaussian_filter1d(g0, s, axis=1, order=1)
    direct = np.pi * s * s / 2 * (dx * dx / np.maximum(sm, 1e-6)).sum(-1)
    assert np.abs(fast[0, 32, 20:44] - direct[32, 20:44]).max() < 0.08


def test_local_cues_rgb_shapes_names_and_determinism():
    rng = np.random.default_rng(1)
    img = (rng.random((30, 40, 3)) * 255).astype(np.uint8)
    a = cues.local_cues(img, seed=3)
    b = cues.local_cues(img, seed=3)
    assert a.names[0].startswith("brightness@")
    assert any(n.startswith("colour_a") for n in a.names)
    assert any(n.startswith("texture") for n in a.names)
    assert a.tensors.shape == (len(a.names), 3, 30, 40)
    np.testing.assert_array_equal(a.tensors, b.tensors)
    np.testing.assert_array_equal(a.texton_labels, b.texton_labels)


def test_colour_only_edge_is_found_by_colour_cue_not_brightness():
    # Red and green of equal CIE L* (skimage.color reference conversion) differ only in a*.
    from skimage.color import lab2rgb

    left = lab2rgb(np.array([[[60.0, 50.0, 30.0]]]))[0, 0]
    right = lab2rgb(np.array([[[60.0, -45.0, 30.0]]]))[0, 0]
    img = np.zeros((30, 40, 3))
    img[:, :20] = left
    img[:, 20:] = right
    c = cues.local_cues(img, texture_sigmas=())
    strength = {
        n: float(np.sqrt(cues._lambda_max(t))[15, 19:21].mean())
        for n, t in zip(c.names, c.tensors, strict=True)
    }
    assert strength["colour_a@4"] > 0.8
    assert strength["brightness@2"] < 0.1


def test_texture_edge_with_equal_mean_brightness():
    # Two textures with the same mean: stripes versus checkerboard.  Brightness histograms are
    # identical on both sides, so the texton cue must carry the boundary (Martin et al. 2004).
    yy, xx = np.mgrid[0:48, 0:64]
    stripes = (xx // 2) % 2
    checks = ((xx // 2) + (yy // 2)) % 2
    img = np.where(xx < 32, stripes, checks).astype(float)
    c = cues.local_cues(img, colour_space="percentile", n_textons=8, seed=0)
    tex = [t for n, t in zip(c.names, c.tensors, strict=True) if n == "texture@4"][0]
    s = np.sqrt(cues._lambda_max(tex))
    assert s[10:38, 30:34].mean() > 2 * s[10:38, 8:20].mean()


def test_combine_and_strength_in_unit_interval():
    # far from the step (> 4 sigma of the largest scale, 8 px) the response must vanish
    c = cues.local_cues(_step(w=100, col=50), colour_space="percentile", n_textons=4)
    t = cues.combine_cues(c, {"brightness": 1.0})
    e = cues.boundary_strength(t)
    assert e.min() >= 0 and e.max() <= 1
    assert e[20, 49:51].mean() > 0.9
    assert e[20, :10].max() < 0.05


def test_constant_image_has_no_boundaries():
    c = cues.local_cues(np.full((20, 20), 7.0), colour_space="percentile", n_textons=4)
    assert np.abs(c.tensors).max() < 1e-6


def test_textons_recover_two_clusters():
    # Two well separated point clouds: k-means with k = 2 must split them (Lloyd 1982).
    r = np.zeros((10, 10, 3))
    r[:, 5:] = 5.0
    r += np.random.default_rng(0).normal(scale=0.01, size=r.shape)
    t = cues.textons(r, n_textons=2, seed=0)
    assert len(np.unique(t[:, :5])) == 1 and len(np.unique(t[:, 5:])) == 1
    assert t[0, 0] != t[0, 9]


def test_filter_bank_steering_matches_direct_derivative():
    # The first-derivative response at θ = 0 is the x-derivative of the Gaussian-smoothed image
    # (scipy.ndimage reference), scaled by σ.
    rng = np.random.default_rng(0)
    g = rng.random((20, 25))
    r = cues.filter_bank_responses(g, n_orientations=4, sigmas=(1.5,))
    ref = ndimage.gaussian_filter(g, 1.5, order=(0, 1)) * 1.5
    np.testing.assert_allclose(r[..., 0], ref, atol=1e-5)


@pytest.mark.parametrize(
    "bad",
    [np.zeros((0, 3)), np.zeros((2, 2, 2, 2)), np.ones((5, 5), bool), np.array([[np.nan, 1.0]])],
)
def test_bad_images_raise(bad):
    with pytest.raises(ValueError):
        cues.local_cues(bad)


def test_bad_options_raise():
    img = _step()
    with pytest.raises(ValueError, match="colour_space"):
        cues.local_cues(img, colour_space="hsv")
    with pytest.raises(ValueError, match="n_bins"):
        cues.local_cues(img, n_bins=1)
    with pytest.raises(ValueError, match="brightness_sigmas"):
        cues.local_cues(img, brightness_sigmas=(0.0,))
    with pytest.raises(ValueError, match="switched off"):
        cues.local_cues(img, brightness_sigmas=(), colour_sigmas=(), texture_sigmas=())
    with pytest.raises(ValueError, match="sigma"):
        cues.histogram_gradient_tensor(np.ones((4, 4, 2)), 0.0)


def test_quantised_channels_bin_lab_values_of_scikit_image():
    # Bins of L, a, b over the module's fixed Lab ranges, computed here from scikit-image's
    # rgb2lab (the reference conversion), plus the texton map as the last channel.
    from skimage.color import rgb2lab

    rng = np.random.default_rng(7)
    img = rng.random((12, 14, 3))
    tex = rng.integers(0, 5, (12, 14))
    q = cues.quantised_channels(img, tex, n_bins=8)
    assert q.shape == (4, 12, 14) and q.dtype == np.int32
    lab = rgb2lab(img)
    for c, (lo, hi) in enumerate(((0.0, 100.0), (-40.0, 60.0), (-40.0, 85.0))):
        t = np.clip((lab[..., c] - lo) / (hi - lo), 0, 1)
        np.testing.assert_array_equal(q[c], np.minimum(np.floor(t * 8), 7))
    np.testing.assert_array_equal(q[3], tex)
    with pytest.raises(ValueError, match="texton_labels"):
        cues.quantised_channels(img, tex[:-1])
    with pytest.raises(ValueError, match="n_bins"):
        cues.quantised_channels(img, n_bins=1)


@pytest.mark.parametrize(
    ("shape", "space"),
    [
        ((12, 14), "lab"),
        ((12, 14, 1), "lab"),
        ((12, 14, 3), "lab"),
        ((12, 14, 3), "percentile"),
        ((12, 14, 2), "lab"),
        ((12, 14, 4), "percentile"),
    ],
)
def test_channel_names_are_the_channels_local_cues_makes(shape, space):
    img = np.random.default_rng(0).random(shape)
    c = cues.local_cues(img, colour_space=space, texture_sigmas=(), n_textons=2)
    made = tuple(dict.fromkeys(n.partition("@")[0] for n in c.names))
    assert made == cues.channel_names(shape, space)
