"""Tests of the learned boundary model (imgcut.boundary_model)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from imgcut import boundary_model as bm
from imgcut import cues
from imgcut.presets import get_preset


def _edge_tensor(strength: float, normal_angle: float) -> np.ndarray:
    """``s² n nᵀ`` as (Txx, Txy, Tyy), shape (3, 1, 1): an ideal edge with unit normal n."""
    c, s = np.cos(normal_angle), np.sin(normal_angle)
    return (strength**2 * np.array([c * c, c * s, s * s])).reshape(3, 1, 1).astype(np.float32)


@pytest.mark.parametrize("angle", [0.0, 0.4, np.pi / 2, 2.5])
def test_oriented_features_of_an_ideal_edge(angle):
    # For T = s² n nᵀ the strength across n is s, along it 0, and the smaller eigenvalue 0
    # (closed form of a rank-one quadratic form).  The square root turns the float32 rounding
    # of the tensor (~1e-8) into ~1e-4 for the zero components.
    t = _edge_tensor(0.6, angle)
    f = bm.oriented_features(t[None], t)
    np.testing.assert_allclose(f.ravel(), [0.6, 0.0, 0.0], atol=3e-4)


def test_oriented_features_of_an_isotropic_tensor_and_a_second_cue():
    # An isotropic tensor c·I answers sqrt(c) in every direction; a second cue with an edge
    # perpendicular to the combined orientation answers only "along".
    iso = np.array([0.25, 0.0, 0.25], np.float32).reshape(3, 1, 1)
    combined = _edge_tensor(0.5, 0.0)  # normal along x
    other = _edge_tensor(0.8, np.pi / 2)  # normal along y
    f = bm.oriented_features(np.stack([iso, other]), combined).ravel()
    np.testing.assert_allclose(f, [0.5, 0.0, 0.5, 0.8, 0.0], atol=1e-6)
    f = bm.oriented_features(iso[None], iso).ravel()
    np.testing.assert_allclose(f, [0.5, 0.5, 0.5], atol=1e-6)


def test_oriented_features_rejects_mismatched_shapes():
    with pytest.raises(ValueError, match="tensors"):
        bm.oriented_features(np.zeros((2, 3, 4, 4)), np.zeros((3, 4, 5)))


def test_logistic_fit_matches_scikit_learn():
    # With no hidden layer the fit is unpenalised logistic regression, a convex problem with
    # one optimum: compare with scikit-learn's solver (an independent implementation).
    sklearn_lm = pytest.importorskip("sklearn.linear_model")
    rng = np.random.default_rng(3)
    x = rng.normal(size=(3000, 3))
    y = (x @ [1.5, -2.0, 0.5] + 0.3 + rng.logistic(size=3000) > 0).astype(float)
    m = bm.fit_boundary_model(x, y, cue_names=("a@1",), n_hidden=0, max_iter=500)
    ref = sklearn_lm.LogisticRegression(C=np.inf, tol=1e-10, max_iter=5000).fit(x, y)
    np.testing.assert_allclose(bm.boundary_probability(m, x), ref.predict_proba(x)[:, 1], atol=2e-4)


def test_hidden_layer_learns_what_logistic_regression_cannot():
    # XOR of the signs of two inputs: no linear rule beats chance, one hidden layer can.
    rng = np.random.default_rng(0)
    x = rng.uniform(-1, 1, size=(4000, 3))
    y = ((x[:, 0] > 0) ^ (x[:, 1] > 0)).astype(float)
    lin = bm.fit_boundary_model(x, y, cue_names=("a@1",), n_hidden=0)
    mlp = bm.fit_boundary_model(x, y, cue_names=("a@1",), n_hidden=8, max_iter=500)
    acc = lambda m: float(np.mean((bm.boundary_probability(m, x) > 0.5) == y))  # noqa: E731
    assert acc(lin) < 0.6
    assert acc(mlp) > 0.95


def test_fit_is_deterministic_and_checks_shapes():
    rng = np.random.default_rng(1)
    x, y = rng.random((500, 3)), rng.random(500)
    a = bm.fit_boundary_model(x, y, cue_names=("a@1",), n_hidden=4, max_iter=50)
    b = bm.fit_boundary_model(x, y, cue_names=("a@1",), n_hidden=4, max_iter=50)
    np.testing.assert_array_equal(a.hidden_weights, b.hidden_weights)
    with pytest.raises(ValueError, match="features"):
        bm.fit_boundary_model(x, y[:10])


def test_strength_map_is_monotone_and_matches_quantiles():
    rng = np.random.default_rng(2)
    p = rng.beta(0.5, 3, 20000)
    e = rng.random(20000) ** 2
    kp, ke = bm.fit_strength_map(p, e, 101)
    assert np.all(np.diff(kp) > 0) and np.all(np.diff(ke) >= 0)
    mapped = np.interp(p, kp, ke)
    # equal marginals: the mapped values have the quantiles of e
    q = [0.1, 0.5, 0.9]
    np.testing.assert_allclose(np.quantile(mapped, q), np.quantile(e, q), atol=0.01)


def _toy_model(cue_names=("b@1",), hidden=0) -> bm.BoundaryModel:
    f = 2 * len(cue_names) + 1
    return bm.BoundaryModel(
        name="toy",
        cue_names=cue_names,
        mean=np.zeros(f),
        scale=np.ones(f),
        hidden_weights=np.zeros((f, hidden)),
        hidden_bias=np.zeros(hidden),
        output_weights=np.r_[6.0, np.zeros(hidden - 1 if hidden else f - 1)],
        output_bias=-3.0,
        map_probability=np.array([0.0, 1.0]),
        map_strength=np.array([0.0, 0.9]),
    )


def test_apply_keeps_orientation_and_sets_strength():
    angles = np.array([[0.2, 1.0], [2.0, 3.0]])
    s = np.array([[0.3, 0.7], [0.5, 0.1]])
    c, si = np.cos(angles), np.sin(angles)
    t = np.stack([s**2 * c * c, s**2 * c * si, s**2 * si * si]).astype(np.float32)
    t[0] += 0.01  # a little isotropic part
    t[2] += 0.01
    ct = cues.CueTensors(("b@1",), t[None], np.zeros((2, 2), np.int32))
    out = bm.apply_boundary_model(_toy_model(), ct, t)
    # same eigenvectors: the orientation angle of the tensor is unchanged
    ang = lambda u: 0.5 * np.arctan2(2 * u[1], u[0] - u[2])  # noqa: E731
    np.testing.assert_allclose(ang(out), ang(t), atol=1e-5)
    feats = bm.oriented_features(t[None], t)
    expected = 0.9 * bm.boundary_probability(_toy_model(), feats)
    np.testing.assert_allclose(cues.boundary_strength(out), expected, atol=1e-5)


def test_apply_names_missing_cues():
    t = np.zeros((1, 3, 2, 2), np.float32)
    ct = cues.CueTensors(("x@1",), t, np.zeros((2, 2), np.int32))
    with pytest.raises(ValueError, match=r"b@1"):
        bm.apply_boundary_model(_toy_model(), ct, t[0])


def test_save_load_round_trip_and_bad_files(tmp_path):
    m = _toy_model(("b@1", "t@2"), hidden=3)
    path = bm.save_boundary_model(m, tmp_path / "m.json")
    with pytest.raises(FileExistsError):
        bm.save_boundary_model(m, path)  # never replaced unless asked
    assert [p.name for p in tmp_path.iterdir()] == ["m.json"]  # no temporary left behind
    back = bm.load_boundary_model(path)
    x = np.random.default_rng(0).random((5, 5))
    np.testing.assert_allclose(bm.boundary_probability(back, x), bm.boundary_probability(m, x))
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    with pytest.raises(ValueError, match="bad.json"):
        bm.load_boundary_model(bad)
    d = json.loads(path.read_text())
    d["scale"] = d["scale"][:-1]
    short = tmp_path / "short.json"
    short.write_text(json.dumps(d))
    with pytest.raises(ValueError, match="inconsistent"):
        bm.load_boundary_model(short)
    with pytest.raises(ValueError, match="neither a packaged model"):
        bm.load_boundary_model(tmp_path / "missing.json")


def test_packaged_model_matches_the_photo_preset():
    p = get_preset("photo")
    m = bm.load_boundary_model(p.boundary_model)
    assert m.provenance["split"] == "BSDS500 train"  # tuned on train, never val
    img = np.random.default_rng(0).random((24, 26, 3))
    c = cues.local_cues(img, **p.cue_options())
    assert set(m.cue_names) <= set(c.names)
    out = bm.apply_boundary_model(m, c, cues.combine_cues(c, p.weights()))
    assert out.shape == (3, 24, 26) and np.isfinite(out).all()


def test_model_scales_do_not_change_the_hand_combination():
    # The scales computed only for the model get weight 0: the hand-weighted tensor is the
    # same as without them.
    p = get_preset("photo")
    q = get_preset("photo", model_sigmas=(), boundary_model="")
    img = np.random.default_rng(1).random((30, 32, 3))
    a = cues.combine_cues(cues.local_cues(img, **p.cue_options()), p.weights())
    b = cues.combine_cues(cues.local_cues(img, **q.cue_options()), q.weights())
    np.testing.assert_allclose(a, b, atol=1e-6)


def test_grey_photos_keep_the_hand_weighted_strength():
    # The packaged model reads colour cues; a grey image has none, so the preset falls back to
    # the hand-weighted tensor instead of failing.
    from imgcut.spectral_boundary import global_boundary

    img = np.zeros((30, 34))
    img[:, 17:] = 1.0
    img += np.random.default_rng(4).normal(0, 0.05, img.shape)
    with_model = global_boundary(img, preset=get_preset("photo"))
    without = global_boundary(img, preset=get_preset("photo", boundary_model=""))
    np.testing.assert_array_equal(with_model.tensor, without.tensor)
