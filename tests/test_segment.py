"""Tests of imgcut.segment: the whole pipeline on images with known answers."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
import scipy.ndimage as ndi
from scipy.optimize import linear_sum_assignment

from imgcut.partition import SplitRecord
from imgcut.regions import renumber_raster
from imgcut.segment import Segmentation, segment

# ---------------------------------------------------------------------------- helpers


def matched_accuracy(labels: np.ndarray, truth: np.ndarray) -> float:
    """Pixel accuracy after the best one-to-one matching of labels to true regions.

    The matching maximises the total overlap (Hungarian algorithm,
    ``scipy.optimize.linear_sum_assignment``, an implementation outside the project).
    """
    _, lab = np.unique(labels, return_inverse=True)
    _, tru = np.unique(truth, return_inverse=True)
    table = np.zeros((lab.max() + 1, tru.max() + 1))
    np.add.at(table, (lab.ravel(), tru.ravel()), 1)
    rows, cols = linear_sum_assignment(-table)
    return float(table[rows, cols].sum() / truth.size)


def no_warnings_segment(image, *args, **kwargs) -> Segmentation:
    """segment() with every warning turned into an error.

    The known-answer tests use ARPACK (``solver="arpack"``), a reference implementation
    outside the project, so they test the partition and not the default eigensolver; the
    sample-image test below uses the default solver.
    """
    kwargs.setdefault("solver", "arpack")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        return segment(image, *args, **kwargs)


def two_regions(seed=0, shape=(32, 40)):
    rng = np.random.default_rng(seed)
    truth = np.ones(shape, int)
    truth[:, shape[1] // 2 :] = 2
    img = (truth - 1).astype(float) + 0.08 * rng.standard_normal(shape)
    return img, truth


# ---------------------------------------------------------------------------- known answers


@pytest.mark.parametrize("method", ["recursive", "kway"])
def test_two_flat_regions_with_noise(method):
    img, truth = two_regions()
    res = no_warnings_segment(img, 2, method=method, radius=3)
    assert res.n_regions == 2
    assert matched_accuracy(res.labels, truth) >= 0.99
    assert np.array_equal(res.labels, truth)  # a clean vertical step: recovered exactly


@pytest.mark.parametrize("method", ["recursive", "kway"])
def test_four_flat_regions_with_noise(method):
    rng = np.random.default_rng(1)
    truth = np.ones((40, 40), int)
    truth[:20, 20:] = 2
    truth[20:, :20] = 3
    truth[20:, 20:] = 4
    levels = np.array([0, 0.0, 0.35, 0.7, 1.0])
    img = levels[truth] + 0.04 * rng.standard_normal(truth.shape)
    res = no_warnings_segment(img, 4, method=method, radius=3)
    assert res.n_regions == 4
    assert matched_accuracy(res.labels, truth) >= 0.99


def test_nested_shapes_disc_in_square():
    rng = np.random.default_rng(2)
    yy, xx = np.mgrid[:48, :48]
    truth = np.ones((48, 48), int)
    truth[8:40, 8:40] = 2
    truth[(yy - 24) ** 2 + (xx - 24) ** 2 <= 8**2] = 3
    img = np.array([0, 0.1, 0.5, 0.9])[truth] + 0.03 * rng.standard_normal(truth.shape)
    res = no_warnings_segment(img, 3, radius=3)
    assert res.n_regions == 3
    assert matched_accuracy(res.labels, truth) >= 0.99
    # The ring (square minus disc) is one connected region around the disc.
    ring = res.labels == res.labels[10, 10]
    assert ndi.label(ring)[1] == 1 and not ring[24, 24]


def test_16bit_microscopy_field_of_blobs():
    # Bright nuclei on a dim background, 16-bit, camera noise and two hot pixels, like a
    # fluorescence micrograph. Each nucleus is nearly disconnected from the background, so
    # the cheapest cuts split off one nucleus at a time (Ncut ~ 1e-8); after the last one
    # every cut costs far more, and max_ncut stops the recursion at the right count.
    rng = np.random.default_rng(3)
    shape = (72, 72)
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    centres = [(14, 14), (14, 50), (36, 30), (56, 12), (58, 56), (30, 62)]
    truth = np.zeros(shape, int)
    for i, (cy, cx) in enumerate(centres, start=1):
        truth[(yy - cy) ** 2 + (xx - cx) ** 2 <= 7**2] = i
    signal = ndi.gaussian_filter(np.where(truth > 0, 2400.0, 0.0), 0.7)
    img = 600 + signal + rng.normal(0, 60, shape)
    img[5, 40] = img[66, 33] = 65535  # hot pixels
    img = np.clip(img, 0, 65535).astype(np.uint16)
    res = no_warnings_segment(img, 12, radius=3, max_ncut=0.01)
    assert res.n_regions == len(centres) + 1
    assert matched_accuracy(res.labels, truth) >= 0.99
    assert all(s.ncut < 1e-6 for s in res.splits)


# ---------------------------------------------------------------------------- sample images


def _sample(name: str) -> np.ndarray:
    """A scikit-image sample that ships inside its wheel, scaled to at most 40 pixels.

    Downscaled (anti-aliased) so that the recursive solves stay well under a second each;
    the full-size images are exercised by the benchmark, not the unit tests.
    """
    data = pytest.importorskip("skimage.data")
    from skimage.transform import rescale

    img = getattr(data, name)()
    scale = 40 / max(img.shape[:2])
    axis = 2 if img.ndim == 3 else None
    return rescale(img, scale, anti_aliasing=True, channel_axis=axis, preserve_range=True)


@pytest.mark.slow
@pytest.mark.parametrize("name", ["camera", "coins", "astronaut", "coffee"])
def test_sample_images_segment_without_warnings_and_deterministically(name):
    img = _sample(name)
    first = no_warnings_segment(img, 6, seed=5, solver="auto")
    second = no_warnings_segment(img, 6, seed=5, solver="auto")
    assert np.array_equal(first.labels, second.labels)
    assert 2 <= first.n_regions
    assert np.array_equal(renumber_raster(first.labels), first.labels)
    assert np.all(first.residuals <= first.params["tol"])


# ---------------------------------------------------------------------------- result object


def test_result_contents_and_record():
    img, truth = two_regions(shape=(24, 30))
    res = segment(img, 3, radius=2)
    assert res.labels.dtype == np.int32 and res.labels.shape == (24, 30)
    assert np.array_equal(renumber_raster(res.labels), res.labels)
    assert res.eigenvectors.shape == (24, 30, 3) and res.eigenvectors.dtype == np.float32
    assert np.all(np.diff(res.eigenvalues) >= 0) and res.eigenvalues[0] == pytest.approx(
        0, abs=1e-8
    )
    assert res.residuals.shape == res.eigenvalues.shape
    assert all(isinstance(s, SplitRecord) for s in res.splits) and len(res.splits) >= 1
    assert {"features", "graph", "eigensolve", "partition", "postprocess", "total"} <= set(
        res.timings
    )
    for key in ("sigma_feature", "sigma_distance", "sigma_edge", "min_area", "radius", "seed"):
        assert res.params[key] is not None
    assert res.params["radius"] == 2.0 and res.params["n_regions"] == 3
    record = res.to_record()
    text = json.dumps(record)  # plain Python types only
    assert json.loads(text)["n_regions"] == res.n_regions
    assert sum(record["region_areas"]) == img.size
    assert np.array_equal(res.labels_at(res.levels), res.labels)
    assert np.all(res.labels_at(1) == 1)


def test_mask_restricts_the_labels():
    img, truth = two_regions(shape=(30, 30))
    mask = np.zeros(img.shape, bool)
    mask[5:25, 3:27] = True
    res = segment(img, 2, radius=2, mask=mask)
    assert np.all(res.labels[~mask] == 0) and np.all(res.labels[mask] > 0)
    assert np.all(np.isnan(res.eigenvectors[~mask])) and np.all(np.isfinite(res.eigenvectors[mask]))
    assert matched_accuracy(res.labels[mask], truth[mask]) >= 0.99


def test_kway_with_kmeans_and_no_hierarchy():
    img, truth = two_regions()
    res = segment(img, 2, method="kway", kway_method="kmeans", radius=3)
    assert np.array_equal(res.labels, truth)
    assert res.splits == [] and res.hierarchy is None and res.levels == 1
    with pytest.raises(ValueError, match="method='recursive'"):
        res.labels_at(1)


def test_same_seed_same_labels_and_generator_seed():
    img, _ = two_regions(seed=4, shape=(20, 24))
    a = segment(img, 4, radius=2, seed=7)
    b = segment(img, 4, radius=2, seed=7)
    assert np.array_equal(a.labels, b.labels)
    c = segment(img, 4, radius=2, seed=np.random.default_rng(7))
    assert c.params["seed"] == "generator"


# ---------------------------------------------------------------------------- trivial inputs


def test_constant_image_is_one_region():
    # A constant image has no preferred cut; imgcut answers with one region (documented).
    res = segment(np.full((12, 15), 7, dtype=np.uint8), 5, radius=2)
    assert res.n_regions == 1 and np.all(res.labels == 1)
    assert res.params["constant_image"] is True


def test_single_pixel_single_row_and_more_regions_than_pixels():
    one = segment(np.array([[3.0]]), 4)
    assert one.labels.tolist() == [[1]] and one.eigenvalues.tolist() == [0.0]
    step = np.r_[np.zeros(15), np.ones(15)][None, :]
    res = segment(step, 2, radius=2)
    assert res.labels.tolist() == [[1] * 15 + [2] * 15]
    tiny = segment(np.arange(9.0).reshape(3, 3), 20, radius=1.5, min_area=1)
    assert 1 <= tiny.n_regions <= 9
    assert np.array_equal(renumber_raster(tiny.labels), tiny.labels)


# ---------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"n_regions": 0}, "n_regions must be an integer >= 1"),
        ({"n_regions": 2.5}, "n_regions must be an integer >= 1"),
        ({"radius": 0}, "radius must be finite and > 0"),
        ({"radius": -3}, "radius must be finite and > 0"),
        ({"method": "spectral"}, "valid values: auto, recursive, kway"),
        ({"kway_method": "gmm"}, "valid values: discretize, kmeans"),
        ({"cue": "texture"}, "valid values: combined, intensity, contour"),
        ({"solver": "magic"}, "valid values: auto, twolevel, lobpcg-amg, arpack, dense"),
        ({"min_area": 0}, "min_area must be an integer >= 1"),
        ({"max_ncut": -1.0}, "max_ncut must be a number > 0"),
        ({"method": "kway", "n_eigenvectors": 2}, "n_eigenvectors >= n_regions"),
    ],
)
def test_bad_options_raise_value_error(kwargs, match):
    img, _ = two_regions(shape=(8, 8))
    with pytest.raises(ValueError, match=match):
        segment(img, **{"n_regions": 4, **kwargs})


@pytest.mark.parametrize(
    "image",
    [
        np.zeros((0, 5)),
        np.zeros((2, 2, 2, 2)),
        np.ones((4, 4), dtype=bool),
        np.array([[0.0, np.nan], [1.0, 2.0]]),
        np.array([[0.0, np.inf], [1.0, 2.0]]),
    ],
    ids=["empty", "4-D", "boolean", "nan", "inf"],
)
def test_bad_images_raise_value_error(image):
    with pytest.raises(ValueError, match="image"):
        segment(image, 2)


def test_multiscale_path_recovers_four_quadrants():
    """scale='multi' (Cour, Benezit & Shi 2005 pencil) gives the same known answer as the
    single-scale path on four flat quadrants plus noise (ground truth by construction)."""
    import warnings

    from scipy.optimize import linear_sum_assignment

    rng = np.random.default_rng(3)
    truth = np.zeros((64, 96), dtype=int)
    truth[:32, 48:] = 1
    truth[32:, :48] = 2
    truth[32:, 48:] = 3
    img = np.array([0.1, 0.4, 0.7, 1.0])[truth] + 0.03 * rng.standard_normal(truth.shape)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the multiscale solve may stop above tol (documented)
        res = segment(img, n_regions=4, method="kway", scale="multi", radius=3, maxiter=60)
    assert res.params["scale"] == "multi" and res.params["radius_full_resolution"] == 1.5
    table = np.zeros((res.labels.max() + 1, 4))
    np.add.at(table, (res.labels.ravel(), truth.ravel()), 1)
    rows, cols = linear_sum_assignment(-table)
    assert table[rows, cols].sum() / truth.size >= 0.99


def test_scale_auto_switches_on_pixel_count(monkeypatch):
    """scale='auto': k-way cuts of images above AUTO_MULTISCALE_PIXELS take the multiscale
    path with its own tolerance; recursive cuts, masks and small images stay single-scale."""
    import sys
    import warnings

    mod = sys.modules["imgcut.segment"]
    monkeypatch.setattr(mod, "AUTO_MULTISCALE_PIXELS", 1000)
    img = np.zeros((40, 48))
    img[:, 24:] = 1.0
    img += 0.02 * np.random.default_rng(0).standard_normal(img.shape)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        big = segment(img, n_regions=2, method="kway", radius=3)
        masked = segment(img, n_regions=2, method="kway", radius=3, mask=img > -1)
    assert big.params["scale"] == "auto" and big.params["scale_used"] == "multi"
    assert big.params["tol"] == mod.MULTISCALE_TOL and "multiscale" in big.params
    assert masked.params["scale_used"] == "single" and masked.params["tol"] == 1e-5
    rec = segment(img[:, 20:28], n_regions=2, radius=2, method="recursive")  # never multi
    assert rec.params["scale_used"] == "single"
    # method="auto" (the default): k-way where the multiscale path applies, else recursive
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        auto_big = segment(img, n_regions=2, radius=3)
        auto_ncut = segment(img, n_regions=2, radius=3, max_ncut=0.5)
        auto_masked = segment(img, n_regions=2, radius=3, mask=img > -1)
    assert auto_big.params["method_asked"] == "auto"
    assert auto_big.params["method"] == "kway" and auto_big.params["scale_used"] == "multi"
    assert auto_ncut.params["method"] == "recursive"  # max_ncut is a recursive option
    assert auto_masked.params["method"] == "recursive"  # the multiscale path has no mask
    assert (auto_big.labels == big.labels).all()
    monkeypatch.setattr(mod, "AUTO_MULTISCALE_PIXELS", 10**9)
    small = segment(img, n_regions=2, method="kway", radius=3)
    assert small.params["scale_used"] == "single"
    # the answer is the same two halves either way (ground truth by construction)
    for res in (big, small):
        assert (res.labels[:, :24] == 1).all() and (res.labels[:, 24:] == 2).all()


def test_multiscale_path_rejects_recursive_and_mask():
    img = np.zeros((8, 8))
    with pytest.raises(ValueError, match="method='kway'"):
        segment(img, method="recursive", scale="multi")
    # method "auto" takes k-way wherever the multiscale path is asked for
    assert segment(np.zeros((16, 16)), n_regions=2, scale="multi").params["method"] == "kway"
    with pytest.raises(ValueError, match="mask"):
        segment(img, method="kway", scale="multi", mask=np.ones((8, 8), bool))
    with pytest.raises(ValueError, match="scale"):
        segment(img, scale="huge")
