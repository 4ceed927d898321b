"""Tests of imgcut.features: validation, normalisation, colour conversion, edge map."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from skimage.color import rgb2lab

from imgcut.features import Features, compute_features, validate_image


def _scene(dtype=np.uint8, shape=(24, 32)):
    """Seeded gray scene in the range of ``dtype``: two flat regions plus noise."""
    rng = np.random.default_rng(7)
    img = np.full(shape, 60.0)
    img[:, shape[1] // 2 :] = 180.0
    img += rng.normal(0, 8, size=shape)
    img = np.clip(img, 0, 255)
    if np.issubdtype(dtype, np.integer):
        return np.round(img).astype(dtype)
    return (img / 255.0).astype(dtype)


# --------------------------------------------------------------------------- validation


@pytest.mark.parametrize(
    "bad, match",
    [
        (np.zeros((0, 5)), "empty"),
        (np.zeros((5, 0)), "empty"),
        (np.zeros((4, 4, 0)), "empty"),
        (np.zeros(5), r"\(H, W\) or \(H, W, C\)"),
        (np.zeros((2, 3, 4, 5)), r"\(H, W\) or \(H, W, C\)"),
        (np.zeros((4, 4), dtype=bool), "boolean"),
        (np.zeros((4, 4), dtype=complex), "complex"),
        (np.array([["a", "b"], ["c", "d"]]), "dtype"),
    ],
)
def test_validate_rejects_bad_arrays(bad, match):
    with pytest.raises(ValueError, match=match):
        validate_image(bad)


@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
def test_validate_rejects_nonfinite(value):
    img = np.zeros((5, 5))
    img[2, 3] = value
    with pytest.raises(ValueError, match="image contains NaN or infinite values"):
        validate_image(img)
    with pytest.raises(ValueError, match="NaN or infinite"):
        compute_features(img)


@pytest.mark.parametrize("shape", [(1, 1), (1, 9), (9, 1), (1, 1, 3), (3, 4, 7)])
def test_trivial_shapes_are_valid(shape):
    img = np.arange(np.prod(shape), dtype=np.float64).reshape(shape)
    f = compute_features(img)
    assert f.values.shape[:2] == shape[:2]
    assert f.edges.shape == shape[:2]
    assert np.isfinite(f.values).all() and np.isfinite(f.edges).all()


def test_validate_returns_same_array():
    img = np.ones((3, 3), dtype=np.uint16)
    assert validate_image(img) is img


# --------------------------------------------------------------------------- normalisation


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.int32, np.float32, np.float64])
def test_gray_values_in_unit_range_and_float64(dtype):
    f = compute_features(_scene(dtype))
    assert isinstance(f, Features)
    assert f.kind == "gray"
    assert f.values.dtype == np.float64 and f.values.shape == (24, 32, 1)
    assert f.edges.dtype == np.float64
    assert f.values.min() == 0.0 and f.values.max() == 1.0
    # Percentile stretch: exactly 0.5 % of pixels lie at or below the low percentile.
    frac_low = np.mean(f.values == 0.0)
    assert 0.0 < frac_low <= 0.02


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.float32, np.float64])
def test_same_scene_in_every_dtype_gives_same_features(dtype):
    # uint8 → uint16 by ×257 maps 255 to 65535 (the standard bit-depth conversion); floats by
    # /255. Percentile normalisation is equivariant to affine maps, so features agree.
    ref = compute_features(_scene(np.uint8))
    img8 = _scene(np.uint8)
    if dtype == np.uint16:
        img = img8.astype(np.uint16) * 257
    elif dtype == np.uint8:
        img = img8
    else:
        img = (img8 / 255.0).astype(dtype)
    f = compute_features(img)
    tol = 1e-6 if dtype == np.float32 else 1e-12
    np.testing.assert_allclose(f.values, ref.values, atol=tol)
    np.testing.assert_allclose(f.edges, ref.edges, atol=tol)


def test_16bit_rgb_normalised_like_8bit():
    rng = np.random.default_rng(3)
    img8 = rng.integers(0, 256, size=(10, 12, 3), dtype=np.uint8)
    f8 = compute_features(img8)
    f16 = compute_features(img8.astype(np.uint16) * 257)
    assert f8.kind == f16.kind == "lab"
    np.testing.assert_allclose(f16.values, f8.values, atol=1e-10)


def test_12bit_hot_pixel_does_not_squash_the_range():
    # A 12-bit micrograph with one saturated hot pixel: a min/max stretch would compress the
    # real signal into [0, 0.06]; the percentile stretch keeps it spanning [0, 1].
    img = np.tile(np.linspace(100, 4000, 64), (64, 1)).astype(np.uint16)
    img[5, 5] = 65535
    v = compute_features(img).values[..., 0]
    assert v.max() == 1.0
    assert np.percentile(v, 90) > 0.85


def test_constant_image_no_division_by_zero():
    for img in (np.full((6, 7), 42, np.uint8), np.full((6, 7, 3), 0.3), np.zeros((6, 7, 5))):
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # a 0/0 would warn
            f = compute_features(img)
        assert np.isfinite(f.values).all()
        assert np.all(f.edges == 0.0)
        if f.kind != "lab":
            assert np.all(f.values == 0.0)


def test_percentiles_none_uses_dtype_range():
    img = np.array([[0, 51], [102, 255]], dtype=np.uint8)
    v = compute_features(img, percentiles=None).values[..., 0]
    np.testing.assert_allclose(v, img / 255.0)


# --------------------------------------------------------------------------- colour


def test_lab_matches_scikit_image_scaled_by_100():
    # Reference: skimage.color.rgb2lab on the same [0, 1] RGB, divided by the documented 100.
    rng = np.random.default_rng(11)
    img = rng.integers(0, 256, size=(8, 9, 3), dtype=np.uint8)
    f = compute_features(img, percentiles=None)
    np.testing.assert_allclose(f.values, rgb2lab(img / 255.0) / 100.0, atol=1e-12)


def test_lab_known_colours():
    # CIE L*a*b* (D65) of sRGB white is (100, 0, 0) by definition; sRGB red is about
    # (53.24, 80.09, 67.20) (standard published value; quoted from memory).
    img = np.array([[[255, 255, 255], [255, 0, 0]]], dtype=np.uint8)
    v = compute_features(img, percentiles=None).values
    np.testing.assert_allclose(v[0, 0], [1.0, 0.0, 0.0], atol=1e-4)
    np.testing.assert_allclose(v[0, 1], [0.5324, 0.8009, 0.6720], atol=2e-4)


def test_multichannel_is_per_channel():
    rng = np.random.default_rng(5)
    base = rng.random((10, 11, 5))
    scaled = base * np.array([1, 10, 1000, 0.01, 3])  # per-channel gains
    f0 = compute_features(base)
    f1 = compute_features(scaled)
    assert f1.kind == "channels" and f1.values.shape == (10, 11, 5)
    np.testing.assert_allclose(f1.values, f0.values, atol=1e-12)


def test_channels_mode_on_three_channels_skips_lab():
    img = np.random.default_rng(1).random((6, 6, 3))
    f = compute_features(img, color="channels")
    assert f.kind == "channels"
    assert f.values.min() >= 0 and f.values.max() <= 1


def test_bad_options():
    img = np.zeros((5, 5, 2))
    with pytest.raises(ValueError, match="'auto', 'lab', 'channels'"):
        compute_features(img, color="hsv")
    with pytest.raises(ValueError, match="needs an \\(H, W, 3\\)"):
        compute_features(img, color="lab")
    for pct in [(50, 50), (-1, 99), (1, 101), (1,), "ab", (np.nan, 99)]:
        with pytest.raises(ValueError, match="percentiles"):
            compute_features(img, percentiles=pct)
    for scales in [(), (0.0,), (-1.0,), (np.inf,), 0]:
        with pytest.raises(ValueError, match="edge_scales"):
            compute_features(img, edge_scales=scales)
    with pytest.raises(ValueError, match=r"must lie in \[0, 1\]"):
        compute_features(np.full((4, 4, 3), 2.0), percentiles=None)


# --------------------------------------------------------------------------- edges


@pytest.mark.parametrize("s", [1.0, 2.0, 3.0])
def test_edge_of_linear_ramp_is_scale_times_slope(s):
    # Gaussian smoothing preserves linear functions, so ∇(G_s * v) = slope exactly (up to the
    # kernel truncation); with the γ = 1 normalisation (Lindeberg 1998) E = s · slope.
    slope = 0.01
    img = np.tile(np.arange(60) * slope, (30, 1))
    f = compute_features(img, percentiles=None, edge_scales=(s,))
    centre = f.edges[10:20, 20:40]
    np.testing.assert_allclose(centre, s * slope, rtol=2e-3)


def test_step_edge_response_is_scale_invariant():
    # Closed form: the derivative of a Gaussian-blurred unit step peaks at 1/(s·sqrt(2π)), so
    # s·|∇| peaks at 1/sqrt(2π) ≈ 0.399 for every s (Lindeberg 1998, γ = 1). Pixel sampling
    # (the step lies between two pixels) lowers the discrete peak at small s.
    img = np.zeros((40, 80))
    img[:, 40:] = 1.0
    peaks = []
    for s in (1.0, 2.0, 4.0):
        e = compute_features(img, percentiles=None, edge_scales=(s,)).edges
        peaks.append(e[20].max())
        # the peak sits at the step
        assert abs(int(np.argmax(e[20])) - 39.5) <= 0.5
    expected = 1.0 / np.sqrt(2 * np.pi)
    np.testing.assert_allclose(peaks, expected, rtol=0.1)
    multi = compute_features(img, percentiles=None, edge_scales=(1.0, 2.0, 4.0)).edges
    np.testing.assert_allclose(multi[20].max(), max(peaks))
    # away from the step the edge map is (numerically) zero
    assert multi[:, :20].max() < 1e-3 * multi.max()


def test_colour_edge_is_frobenius_norm_over_channels():
    # Two channels stepping together give sqrt(2) times the one-channel response.
    one = np.zeros((20, 30, 2))
    one[:, 15:, 0] = 1.0
    two = one.copy()
    two[:, 15:, 1] = 1.0
    e1 = compute_features(one, percentiles=None).edges
    e2 = compute_features(two, percentiles=None).edges
    np.testing.assert_allclose(e2, np.sqrt(2) * e1, rtol=1e-12, atol=1e-15)
    assert (e1 >= 0).all()
