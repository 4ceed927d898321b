"""Tests for imgcut.presets (named, frozen parameter sets)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from imgcut import cues, presets


def test_presets_are_frozen_named_dataclasses():
    assert {"photo", "fluorescence"} <= set(presets.PRESETS)
    for name, p in presets.PRESETS.items():
        assert p.name == name
        with pytest.raises(dataclasses.FrozenInstanceError):
            p.n_bins = 3  # type: ignore[misc]
        assert 0 <= p.spectral_weight <= 1
        assert min(p.level_sweep) <= p.default_level <= max(p.level_sweep)
        assert list(p.level_sweep) == sorted(p.level_sweep)


def test_every_preset_runs_the_cues_with_its_options_and_weights():
    # Each preset's options must be accepted by local_cues and its weights must select at least
    # one cue present for a gray and an RGB image.
    rng = np.random.default_rng(0)
    for p in presets.PRESETS.values():
        for img in (rng.random((24, 24)), rng.random((24, 24, 3))):
            c = cues.local_cues(img, **p.cue_options())
            t = cues.combine_cues(c, p.weights())
            assert t.shape == (3, 24, 24)


def test_get_preset_overrides_and_errors():
    p = presets.get_preset("photo", spectral_weight=0.0)
    assert p.spectral_weight == 0.0
    assert presets.PRESETS["photo"].name == "photo"  # original untouched
    assert presets.get_preset(p) is p
    with pytest.raises(ValueError, match="photo"):
        presets.get_preset("nope")
    with pytest.raises(ValueError, match="unknown preset field"):
        presets.get_preset("photo", colour="x")


def test_as_dict_round_trip():
    p = presets.PRESETS["fluorescence"]
    d = p.as_dict()
    assert presets.BoundaryPreset(**d) == p


def test_scale_weights_reach_every_entry():
    # The photo preset weights every cue's finest scale by scale_weights[0], etc.; the combined
    # tensor must equal the hand-made weighted mean of the entries.
    p = presets.get_preset("photo")
    rng = np.random.default_rng(2)
    c = cues.local_cues(rng.random((20, 22, 3)), **p.cue_options())
    w = p.weights()
    by_entry = np.array([w[n] for n in c.names])
    expected = np.tensordot(by_entry / by_entry.sum(), c.tensors, axes=1)
    np.testing.assert_allclose(cues.combine_cues(c, w), expected, rtol=1e-5, atol=1e-7)
    assert w["brightness@2"] == pytest.approx(
        p.scale_weights[0] * dict(p.cue_weights)["brightness"]
    )


def test_merge_fields_reach_the_hierarchy():
    # image_hierarchy must hand the preset's merge-score fields to merge_regions: the levels
    # equal those of a direct call with the same fields on the same boundary.
    from imgcut import hierarchy
    from imgcut.spectral_boundary import global_boundary

    rng = np.random.default_rng(3)
    img = rng.random((32, 40, 3))
    img[:, 20:] += 0.5
    p = presets.get_preset("photo", ensemble=())  # one hierarchy (the ensemble: test_ensemble)
    assert p.size_scale > 0 and p.strength_power != 1.0  # the fitted merge score is on
    assert p.similarity_weight > 0  # and the region-appearance term
    img = np.clip(img / 1.5, 0, 1)
    h = hierarchy.image_hierarchy(img, preset=p, seed=0)
    gb = global_boundary(img, preset=p, seed=0)
    base = hierarchy.oversegment(gb.strength, smooth=p.watershed_smooth)
    feats = cues.quantised_channels(img, gb.texton_labels, n_bins=p.similarity_bins)
    direct = hierarchy.merge_regions(
        base,
        gb.strength,
        tensor=gb.tensor,
        min_area=p.min_area,
        size_scale=p.size_scale,
        size_power=p.size_power,
        strength_power=p.strength_power,
        features=feats,
        similarity_weight=p.similarity_weight,
        similarity_mix=p.similarity_mix,
    )
    np.testing.assert_array_equal(h.edge_levels, direct.edge_levels)
    plain = hierarchy.merge_regions(base, gb.strength, tensor=gb.tensor)
    assert not np.array_equal(plain.edge_levels, direct.edge_levels)
    # merge_options names exactly the preset's fields of merge_regions, spelled out above
    import inspect

    params = inspect.signature(hierarchy.merge_regions).parameters
    assert set(p.merge_options()) <= set(params)
    assert p.merge_options()["similarity_mix"] == p.similarity_mix


def test_fluorescence_keeps_the_plain_mean_merge():
    p = presets.PRESETS["fluorescence"]
    assert (p.size_scale, p.strength_power, p.min_area, p.contrast_power) == (0.0, 1.0, 0, 0.0)
    assert p.similarity_weight == 0.0  # no region-appearance term (not tuned on microscopy)


def test_presets_with_an_ensemble_stay_hashable_printable_and_round_trip():
    # The ensemble field is nested tuples, so a preset stays a frozen, hashable value: usable
    # as a cache key, printed in run records, rebuilt from its dict.
    p = presets.get_preset("photo", ensemble=presets.PHOTO_ENSEMBLE)
    assert hash(p) == hash(presets.get_preset("photo", ensemble=presets.PHOTO_ENSEMBLE))
    assert p != presets.get_preset("photo", ensemble=())
    assert "contrast_power', 0.75" in repr(p)
    assert presets.BoundaryPreset(**p.as_dict()) == p
    for q in presets.PRESETS.values():
        hash(q)
    assert presets.PRESETS["fluorescence"].ensemble == ()


def test_model_sigmas_are_checked_and_reach_the_cues():
    p = presets.get_preset("photo", model_sigmas=(("texture", (3.0,)),))
    assert p.cue_options()["texture_sigmas"] == tuple(sorted((*p.texture_sigmas, 3.0)))
    assert p.weights()["texture@3"] == 0.0  # a model input only, not in the hand combination
    for bad in ((("hue", (2.0,)),), (("colour", (0.0,)),), (("colour",),)):
        with pytest.raises(ValueError, match="model_sigmas"):
            presets.get_preset("photo", model_sigmas=bad)
