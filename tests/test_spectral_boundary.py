"""Tests for imgcut.spectral_boundary (oriented gradients of Laplacian eigenvectors)."""

from __future__ import annotations

import numpy as np
import pytest

from imgcut import spectral_boundary as sb


def _two_boxes():
    # A closed contour (square) inside a frame: the second eigenvector of the
    # intervening-contour graph separates inside from outside (Shi & Malik 2000, §2: the Ncut
    # minimiser cuts along the weakest links, here the only contour).
    e = np.zeros((48, 48))
    e[12, 12:36] = e[35, 12:36] = 1.0
    e[12:36, 12] = e[12:36, 35] = 1.0
    return e


def test_square_contour_is_the_spectral_boundary():
    res = sb.spectral_boundary(_two_boxes(), n_vectors=3, downsample=1, radius=3, sigma_edge=0.3)
    s = res.strength
    on = np.r_[s[12, 16:32], s[35, 16:32], s[16:32, 12], s[16:32, 35]].mean()
    inside = s[18:30, 18:30].mean()
    outside = s[:6, :].mean()
    assert on > 4 * inside and on > 4 * outside
    assert 0 <= s.min() and s.max() <= 1
    assert abs(res.eigenvalues[0]) < 1e-8 and np.all(res.eigenvalues[1:] > 0)
    assert np.all(np.diff(res.eigenvalues) >= -1e-12)


def test_second_eigenvector_is_piecewise_constant_across_the_contour():
    # Cheeger-type behaviour (Chung 1997, ch. 2): with a nearly disconnected inside, the first
    # non-trivial eigenvector is nearly constant on each side; its sign changes at the contour.
    res = sb.spectral_boundary(_two_boxes(), n_vectors=1, downsample=1, radius=3, sigma_edge=0.3)
    v = res.eigenvectors[..., 1]
    inner, outer = v[16:32, 16:32], v[:8, :]
    assert np.sign(inner.mean()) != np.sign(outer.mean())
    assert inner.std() < 0.1 * abs(inner.mean() - outer.mean())


def test_weighting_by_inverse_eigenvalue():
    # Arbelaez et al. 2011, eq. (12): vectors with smaller λ count more.  With two vectors the
    # tensor must equal the sum of the two single-vector gradient tensors weighted 1/λ.
    e = _two_boxes()
    e[24, :] = np.maximum(e[24, :], 0.6)  # a second, weaker contour
    kw = dict(downsample=1, radius=3, sigma_edge=0.3, normalise_percentile=100)
    two = sb.spectral_boundary(e, n_vectors=2, **kw)
    one = sb.spectral_boundary(e, n_vectors=1, **kw)
    lam = two.eigenvalues
    assert 0 < lam[1] < lam[2]
    # Rebuild the unnormalised tensor from the two vectors with weights 1/λ and compare its
    # shape (up to the global normalisation) with the module's result.
    from scipy import ndimage

    ref = np.zeros((48, 48))
    for j in (1, 2):
        v = two.eigenvectors[..., j]
        gx = ndimage.gaussian_filter(v, 1.0, order=(0, 1))
        gy = ndimage.gaussian_filter(v, 1.0, order=(1, 0))
        ref += (gx * gx + gy * gy) / lam[j]
    trace = two.tensor[0] + two.tensor[2]
    np.testing.assert_allclose(trace / trace.max(), ref / ref.max(), atol=1e-5)
    # the second vector adds the weaker contour, which the first alone does not show
    assert two.strength[24, 2:10].mean() > one.strength[24, 2:10].mean()


def test_disconnected_graph_marks_component_borders():
    # A contour so strong that the graph falls apart (weights underflow): the component
    # border must still come out as the strongest boundary, not vanish with the null space.
    res = sb.spectral_boundary(_two_boxes(), n_vectors=2, downsample=1, radius=2, sigma_edge=0.01)
    s = res.strength
    assert np.all(np.isfinite(s)) and s.min() >= 0 and s.max() <= 1
    # the null space is degenerate here (every contour pixel is isolated), so only ask that the
    # contour stands out from the interior
    assert s[12, 16:32].mean() > 3 * s[20:28, 20:28].mean()


def test_downsampled_path_returns_full_resolution():
    e = _two_boxes()
    res = sb.spectral_boundary(e, n_vectors=2, downsample=2, radius=2)
    assert res.strength.shape == e.shape
    assert res.tensor.shape == (3,) + e.shape
    assert res.eigenvectors.shape == (24, 24, 3)
    on = res.strength[12, 16:32].mean()
    assert on > 3 * res.strength[20:28, 20:28].mean()


def test_deterministic():
    a = sb.spectral_boundary(_two_boxes(), n_vectors=2, downsample=2, seed=1)
    b = sb.spectral_boundary(_two_boxes(), n_vectors=2, downsample=2, seed=1)
    np.testing.assert_allclose(a.strength, b.strength, atol=1e-8)


def test_bad_input():
    with pytest.raises(ValueError, match="shape"):
        sb.spectral_boundary(np.zeros((2, 2, 2)))
    with pytest.raises(ValueError, match="NaN"):
        sb.spectral_boundary(np.full((4, 4), np.nan))
    with pytest.raises(ValueError, match="n_vectors"):
        sb.spectral_boundary(np.zeros((8, 8)), n_vectors=0)
    with pytest.raises(ValueError, match="downsample"):
        sb.spectral_boundary(np.zeros((8, 8)), downsample=0)


def test_contrast_normalisation_moves_the_percentile_by_the_power_law():
    # Scaling the tensor by g² scales sqrt(λ_max) by g (λ_max is 1-homogeneous), so with
    # α = 1 the q-th percentile of the local strength lands exactly on the reference, and with
    # α = 1/2 on the geometric mean of reference and original (no clipping: reference below).
    from imgcut.presets import get_preset

    rng = np.random.default_rng(5)
    img = rng.random((40, 48, 3))
    img[:, 24:] = np.clip(img[:, 24:] + 0.4, 0, 1)
    off = sb.global_boundary(img, preset=get_preset("photo", contrast_power=0.0), seed=0)
    q = float(np.percentile(off.local_strength, 90))
    ref = 0.5 * q
    for alpha, expected in ((1.0, ref), (0.5, np.sqrt(ref * q))):
        p = get_preset(
            "photo", contrast_power=alpha, contrast_reference=ref, contrast_percentile=90
        )
        on = sb.global_boundary(img, preset=p, seed=0)
        assert np.percentile(on.local_strength, 90) == pytest.approx(expected, rel=1e-4)
    with pytest.raises(ValueError, match="contrast"):
        sb.global_boundary(img, preset=get_preset("photo", contrast_reference=0.0), seed=0)
