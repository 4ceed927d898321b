"""Tests of imgcut.runner: options, fingerprints, compute/write split, refusal of existing
outputs, resumability, and agreement with a direct call of the library."""

from __future__ import annotations

import hashlib
import io
import json
import os
import pickle
import warnings

import numpy as np
import pytest
from PIL import Image

import imgcut.runner as runner
from imgcut._errors import ImageReadError, OutputExistsError, OutputFolderError
from imgcut.io import PARTIAL_SUFFIX
from imgcut.runner import (
    OptionError,
    SegmentOptions,
    compute,
    input_sha256,
    options_fingerprint,
    output_paths,
    process_image,
    up_to_date,
    write,
)
from imgcut.segment import segment

FAST = SegmentOptions(n_regions=2, radius=2)


def _two_halves(h: int = 10, w: int = 12) -> np.ndarray:
    rng = np.random.default_rng(0)
    img = np.zeros((h, w), np.uint8)
    img[:, w // 2 :] = 200
    return img + rng.integers(0, 10, img.shape).astype(np.uint8)


@pytest.fixture
def halves(tmp_path):
    path = tmp_path / "halves.png"
    Image.fromarray(_two_halves()).save(path)
    return path


def _listing(folder):
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*"))


# ---------------------------------------------------------------------------------------------
# options


@pytest.mark.parametrize(
    "kwargs, option, text",
    [
        ({"n_regions": 0}, "n_regions", "an integer ≥ 1"),
        ({"n_regions": "many"}, "n_regions", "an integer ≥ 1"),
        ({"n_regions": None, "method": "kway"}, "n_regions", "needs method recursive"),
        ({"radius": 0}, "radius", "> 0"),
        ({"radius": -2.0}, "radius", "> 0"),
        ({"radius": float("nan")}, "radius", "> 0"),
        ({"method": "spectral"}, "method", "one of auto, recursive, kway, boundary"),
        ({"method": "boundary", "radius": 3.0}, "radius", "not used by method boundary"),
        ({"method": "boundary", "eigenvectors": True}, "eigenvectors", "method boundary"),
        ({"cue": "texture"}, "cue", "one of combined, intensity, contour"),
        ({"solver": "magic"}, "solver", "one of auto, twolevel, lobpcg-amg, arpack, dense"),
        ({"max_ncut": 3.0}, "max_ncut", "in (0, 2]"),
        ({"max_ncut": 0.1, "method": "kway"}, "max_ncut", "method recursive only"),
        ({"sigma_edge": 0.0}, "sigma_edge", "> 0"),
        ({"min_area": 0}, "min_area", "≥ 1"),
        ({"tol": 2.0}, "tol", "in (0, 1)"),
        ({"seed": -1}, "seed", "≥ 0"),
        ({"method": "kway", "n_regions": 5, "n_eigenvectors": 3}, "n_eigenvectors", "≥ the"),
        ({"fill": 1.5}, "fill", "opacity in [0, 1]"),
        ({"label_format": "jpeg"}, "label_format", "one of png, tiff"),
        ({"mode": "cells"}, "mode", "one of regions, objects"),
        ({"object_diameter": 12.0}, "object_diameter", "mode objects only"),
        ({"exclude_border": True}, "exclude_border", "mode objects only"),
        ({"mode": "objects", "small_objects": "keep"}, "small_objects", "one of drop, merge"),
        ({"mode": "objects", "foreground": "li"}, "foreground", "one of ncut, otsu"),
        ({"mode": "objects", "eigenvectors": True}, "eigenvectors", "mode regions only"),
        ({"mode": "objects", "pixel_size": 0.5}, "pixel_size", "together with object_diameter"),
        ({"mode": "objects", "object_diameter": -1.0}, "object_diameter", "> 0"),
        ({"plane": -1}, "plane", "index ≥ 0 or 'max'"),
        ({"channel": (0, -1)}, "channel", "indices ≥ 0"),
        ({"max_pixels": 0}, "max_pixels", "≥ 1"),
        ({"scale": "huge"}, "scale", "one of " + ", ".join(runner.SCALES)),
        ({"scale": "multi"}, "scale", "method kway"),
        ({"scale": "multi", "method": "kway", "mode": "objects"}, "scale", "mode objects"),
    ],
)
def test_bad_options_name_the_option_and_the_valid_values(kwargs, option, text):
    with pytest.raises(OptionError) as e:
        SegmentOptions(**kwargs)
    assert e.value.option == option and text in str(e.value)
    assert isinstance(e.value, ValueError)
    again = pickle.loads(pickle.dumps(e.value))  # crosses process boundaries intact
    assert str(again) == str(e.value) and again.option == option


def test_options_round_trip_and_library_kwargs():
    opts = SegmentOptions(n_regions=None, max_ncut=0.2, channel=[1, 0], plane="max", fill=0.3)
    assert opts.channel == (1, 0)
    assert SegmentOptions.from_dict(json.loads(json.dumps(opts.to_dict()))) == opts
    kwargs = opts.segment_kwargs()
    assert kwargs["n_regions"] == runner.AUTO_REGION_CAP and kwargs["max_ncut"] == 0.2
    assert "memory_budget" not in kwargs and "mode" not in kwargs
    # every keyword we pass is a parameter of the library function
    import inspect

    params = inspect.signature(segment).parameters
    assert set(kwargs) <= set(params)
    from imgcut.objects import segment_objects

    objects = SegmentOptions(
        mode="objects", object_diameter=12.0, pixel_size=0.5, radius=2.0, exclude_border=True
    ).segment_kwargs()
    assert set(objects) <= set(inspect.signature(segment_objects).parameters)
    assert objects["radius"] == 2.0 and "n_regions" not in objects and "max_ncut" not in objects
    with pytest.raises(OptionError, match="not an option"):
        SegmentOptions.from_dict({"radious": 3})


def test_fingerprint_is_stable_and_sensitive_to_every_field():
    base = SegmentOptions()
    assert options_fingerprint(base) == options_fingerprint(SegmentOptions())
    changed = {
        "n_regions": 3,
        "max_ncut": 0.5,
        "method": "kway",
        "kway_method": "kmeans",
        "radius": 4.0,
        "cue": "contour",
        "mode": "objects",
        "sigma_feature": 0.2,
        "sigma_distance": 3.0,
        "sigma_edge": 0.1,
        "min_area": 10,
        "connected": False,
        "solver": "arpack",
        "tol": 1e-6,
        "maxiter": 50,
        "seed": 1,
        "n_eigenvectors": 8,
        "memory_budget": 10**9,
        "channel": (0,),
        "plane": 1,
        "max_pixels": 10,
        "label_format": "tiff",
        "fill": 0.5,
        "masks": True,
        "eigenvectors": True,
        "scale": "multi",
    }
    seen = {options_fingerprint(base)}
    for name, value in changed.items():
        fields = base.to_dict() | {name: value}
        if name == "max_ncut":
            fields["method"] = "recursive"
        if name == "eigenvectors":
            fields["mode"] = "regions"
        if name == "scale":  # multi needs k-way; it must differ from the "method": "kway" entry
            fields["method"] = "kway"
        fields["channel"] = None if fields["channel"] is None else tuple(fields["channel"])
        seen.add(options_fingerprint(SegmentOptions(**fields)))
    assert len(seen) == len(changed) + 1


def test_default_count_depends_on_the_method():
    options = SegmentOptions()
    assert options.n_regions == "default"
    assert options.segment_kwargs()["n_regions"] == runner.DEFAULT_REGIONS == 8
    assert options.segment_kwargs("kway")["n_regions"] == 8
    with pytest.raises(OptionError, match="≥ the number of regions \\(8\\)"):
        SegmentOptions(method="kway", n_eigenvectors=4)


def test_automatic_count_gets_the_default_threshold():
    auto = SegmentOptions(n_regions=None, method="recursive")
    assert auto.max_ncut == runner.AUTO_MAX_NCUT and auto.segment_kwargs()["max_ncut"] == 0.01
    # method auto keeps the option unset (a set threshold would rule out the boundary method)
    # and fills it in only when recursive cuts run
    assert SegmentOptions(n_regions=None).max_ncut is None
    assert SegmentOptions(n_regions=None).segment_kwargs("recursive")["max_ncut"] == 0.01
    assert SegmentOptions(n_regions=None, max_ncut=0.3).max_ncut == 0.3  # an explicit one wins
    assert SegmentOptions(n_regions=4).max_ncut is None  # a fixed count needs no threshold


def test_scale_values_and_default_come_from_the_library():
    from imgcut.segment import SCALES

    assert runner.SCALES == tuple(SCALES)
    assert runner.DEFAULT_SCALE == ("auto" if "auto" in runner.SCALES else "single")
    assert SegmentOptions().scale == runner.DEFAULT_SCALE
    kwargs = SegmentOptions(method="kway", n_regions=2, scale="multi").segment_kwargs()
    assert kwargs["scale"] == "multi" and kwargs["method"] == "kway"
    assert "scale" not in SegmentOptions(mode="objects").segment_kwargs()


def test_input_sha256_matches_the_standard_vector(tmp_path):
    path = tmp_path / "abc"
    path.write_bytes(b"abc")
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    assert input_sha256(path) == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    )
    big = tmp_path / "big"
    big.write_bytes(os.urandom(3 * 2**20 + 5))  # crosses the 1 MiB chunk boundaries
    assert input_sha256(big) == hashlib.sha256(big.read_bytes()).hexdigest()


# ---------------------------------------------------------------------------------------------
# compute and write


def test_compute_writes_nothing_and_agrees_with_the_library(halves):
    before = _listing(halves.parent)
    computed = compute(halves, FAST, keep_labels=True)
    assert _listing(halves.parent) == before
    direct = segment(_two_halves(), **FAST.segment_kwargs())
    np.testing.assert_array_equal(computed.labels, direct.labels)
    assert computed.regions == direct.n_regions == 2
    labels_png = computed.files["halves.labels.png"]
    np.testing.assert_array_equal(np.asarray(Image.open(io.BytesIO(labels_png))), direct.labels)
    assert computed.record["segmentation"]["eigenvalues"] == pytest.approx(
        [float(v) for v in direct.eigenvalues]
    )
    restored = pickle.loads(pickle.dumps(computed))  # travels back from a worker
    assert restored.files == computed.files and restored.record == computed.record


def test_process_image_writes_every_output_and_a_complete_record(halves, tmp_path):
    opts = SegmentOptions(n_regions=2, radius=2, masks=True, eigenvectors=True, label_format="tiff")
    report = process_image(halves, tmp_path / "out" / "deeper", opts)
    assert report.regions == 2 and report.shape == (10, 12)
    for kind in ("labels", "overlay", "regions", "record", "eigenvectors"):
        assert report.outputs[kind].is_file(), kind
    assert report.files[-1] == report.outputs["record"]  # the record is written last
    assert sorted(p.name for p in report.outputs["masks"].iterdir()) == [
        "region-0001.png",
        "region-0002.png",
    ]
    rec = json.loads(report.outputs["record"].read_text())
    assert rec["input"]["sha256"] == input_sha256(halves)
    assert rec["options_fingerprint"] == options_fingerprint(opts)
    assert rec["options"]["label_format"] == "tiff"
    assert set(rec["timings"]) >= {"read", "segment", "render", "write", "total"}
    assert rec["outputs"]["labels"] == "halves.labels.tif"
    assert rec["outputs"]["mask_files"] == [
        "halves.masks/region-0001.png",
        "halves.masks/region-0002.png",
    ]
    assert rec["result"]["regions"] == 2 and rec["result"]["image_pixels"] == 120


def test_default_output_folder_is_beside_the_input(halves):
    report = process_image(halves, None, FAST)
    assert report.out_dir == halves.parent
    assert (halves.parent / "halves.overlay.png").is_file()


def test_existing_outputs_are_refused_before_any_work(halves, tmp_path, monkeypatch):
    out = tmp_path / "out"
    process_image(halves, out, FAST)
    before = {p: p.read_bytes() for p in out.iterdir()}

    def must_not_run(*args, **kwargs):
        raise AssertionError("segmentation ran although outputs exist")

    monkeypatch.setattr(runner, "compute", must_not_run)
    with pytest.raises(OutputExistsError, match=r"halves\.\w+\.?\w*: already exists"):
        process_image(halves, out, FAST)
    assert {p: p.read_bytes() for p in out.iterdir()} == before


def test_overwrite_replaces_and_drops_stale_masks(halves, tmp_path):
    out = tmp_path / "out"
    three = np.zeros((10, 12), np.uint8)
    three[:, 4:8] = 120
    three[:, 8:] = 250
    src = tmp_path / "img.png"
    Image.fromarray(three).save(src)
    first = process_image(src, out, SegmentOptions(n_regions=3, radius=2, masks=True))
    assert first.regions == 3
    Image.fromarray(_two_halves()).save(src)
    (out / f".img.labels.png.abc{PARTIAL_SUFFIX}").write_bytes(b"left by a killed run")
    second = process_image(
        src, out, SegmentOptions(n_regions=2, radius=2, masks=True), overwrite=True
    )
    assert second.regions == 2
    assert sorted(p.name for p in (out / "img.masks").iterdir()) == [
        "region-0001.png",
        "region-0002.png",
    ]
    assert not any(p.name.endswith(PARTIAL_SUFFIX) for p in out.iterdir())


def test_unusable_output_folders(halves, tmp_path):
    afile = tmp_path / "afile"
    afile.write_text("x")
    with pytest.raises(OutputFolderError, match=r"afile: output folder is not a folder"):
        process_image(halves, afile, FAST)
    with pytest.raises(OutputFolderError, match=r"cannot be made \(.*afile is a file\)"):
        process_image(halves, afile / "sub", FAST)


def test_one_pixel_image_is_a_data_error(tmp_path):
    path = tmp_path / "dot.png"
    Image.fromarray(np.zeros((1, 1), np.uint8)).save(path)
    with pytest.raises(ImageReadError, match=r"dot\.png: image is 1×1 pixel; .* at least 2"):
        process_image(path, tmp_path / "out", FAST)
    assert not (tmp_path / "out").exists()


def test_library_errors_are_prefixed_with_the_file(halves, tmp_path, monkeypatch):
    def refuse(image, options, method):
        raise ValueError("radius too large for this image\nsecond line")

    monkeypatch.setattr(runner, "_segment", refuse)
    with pytest.raises(ValueError, match=r"^.*halves\.png: radius too large for this image$"):
        process_image(halves, tmp_path / "out", FAST)
    assert not (tmp_path / "out").exists()


def test_warnings_are_recorded(halves, tmp_path, monkeypatch):
    from imgcut._errors import EigenConvergenceWarning

    def warn_then_segment(image, options, method):
        warnings.warn(
            "residual 1e-3 above tol 1e-5; raise maxiter", EigenConvergenceWarning, stacklevel=1
        )
        return segment(image, **options.segment_kwargs(method))

    monkeypatch.setattr(runner, "_segment", warn_then_segment)
    report = process_image(halves, tmp_path / "out", FAST)
    assert report.warnings == [
        "EigenConvergenceWarning: residual 1e-3 above tol 1e-5; raise maxiter"
    ]
    assert json.loads(report.outputs["record"].read_text())["warnings"] == report.warnings


def test_write_adds_extra_run_information(halves, tmp_path):
    computed = compute(halves, FAST)
    report = write(computed, tmp_path / "o", extra={"peak_memory_mb": 12.5, "worker": "pid:1"})
    assert report.record["run"] == {"peak_memory_mb": 12.5, "worker": "pid:1"}
    assert pickle.loads(pickle.dumps(report)).regions == report.regions


# ---------------------------------------------------------------------------------------------
# resuming


def test_up_to_date_tracks_input_options_and_outputs(halves, tmp_path):
    out = tmp_path / "out"
    assert up_to_date(halves, out, FAST) is None
    process_image(halves, out, FAST)
    rec = up_to_date(halves, out, FAST)
    assert rec is not None and rec["result"]["regions"] == 2
    assert up_to_date(halves, out, SegmentOptions(n_regions=2, radius=2, seed=1)) is None
    output_paths(halves, out, FAST)["overlay"].unlink()
    assert up_to_date(halves, out, FAST) is None
    process_image(halves, out, FAST, overwrite=True)
    assert up_to_date(halves, out, FAST) is not None
    Image.fromarray(255 - _two_halves()).save(halves)  # the input changed
    assert up_to_date(halves, out, FAST) is None


def test_up_to_date_rejects_a_damaged_record(halves, tmp_path):
    out = tmp_path / "out"
    process_image(halves, out, FAST)
    output_paths(halves, out, FAST)["record"].write_text("{ not json")
    assert up_to_date(halves, out, FAST) is None


def test_docstring_examples_run():
    import doctest

    result = doctest.testmod(runner, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0


# ---------------------------------------------------------------------------------------------
# objects mode


def _spots(h: int = 48, w: int = 64) -> np.ndarray:
    """Two bright Gaussian spots on a dark, noisy 16-bit background."""
    yy, xx = np.mgrid[:h, :w]
    img = 100.0 + 2000 * np.exp(-((yy - 15) ** 2 + (xx - 18) ** 2) / 40.0)
    img += 2000 * np.exp(-((yy - 32) ** 2 + (xx - 45) ** 2) / 40.0)
    img += np.random.default_rng(0).normal(0, 10, img.shape)
    return np.clip(img, 0, 65535).astype(np.uint16)


def test_objects_mode_matches_the_objects_library(tmp_path):
    from imgcut.objects import segment_objects

    path = tmp_path / "spots.tif"
    import tifffile

    tifffile.imwrite(path, _spots())
    opts = SegmentOptions(mode="objects", min_area=10)
    report = process_image(path, tmp_path / "out", opts)
    direct = segment_objects(_spots(), **opts.segment_kwargs())
    labels = np.asarray(Image.open(report.outputs["labels"]))
    np.testing.assert_array_equal(labels, direct.labels)
    assert report.objects == report.regions == direct.n_objects == 2
    rec = json.loads(report.outputs["record"].read_text())
    assert rec["result"]["objects"] == 2 and rec["segmentation"]["mode"] == "objects"
    assert rec["result"]["labelled_pixels"] < rec["result"]["image_pixels"]  # background 0


def test_objects_mode_needs_one_channel(tmp_path):
    path = tmp_path / "rgb.png"
    Image.fromarray(np.zeros((8, 8, 3), np.uint8)).save(path)
    with pytest.raises(ImageReadError, match=r"rgb\.png: objects mode .* 3; .*--channel"):
        process_image(path, tmp_path / "out", SegmentOptions(mode="objects"))


def test_objects_mode_empty_field_gives_header_only_table(tmp_path):
    import tifffile

    noise = 100 + np.random.default_rng(1).normal(0, 10, (40, 50))
    tifffile.imwrite(tmp_path / "empty.tif", noise.astype(np.uint16))
    opts = SegmentOptions(mode="objects", masks=True)
    report = process_image(tmp_path / "empty.tif", tmp_path / "out", opts)
    assert report.regions == report.objects == 0
    table = (tmp_path / "out" / "empty.regions.csv").read_text().splitlines()
    assert len(table) == 1 and table[0].startswith("label,area,")
    assert not np.asarray(Image.open(report.outputs["labels"])).any()
    assert up_to_date(tmp_path / "empty.tif", tmp_path / "out", opts) is not None


def test_choose_method_boundary_for_colour_recursive_otherwise():
    choose = runner.choose_method
    assert choose(SegmentOptions(), (30, 40, 3))[0] == "boundary"
    assert choose(SegmentOptions(), (30, 40))[0] == "recursive"
    assert choose(SegmentOptions(), (30, 40, 2))[0] == "recursive"
    assert choose(SegmentOptions(), (30, 40, 4))[0] == "recursive"
    for graph_option in ({"radius": 3.0}, {"max_ncut": 0.1}, {"eigenvectors": True}):
        method, reason = choose(SegmentOptions(**graph_option), (30, 40, 3))
        assert method == "recursive" and next(iter(graph_option)) in reason
    assert choose(SegmentOptions(method="kway"), (30, 40, 3))[0] == "kway"
    # large grey / microscopy images: k-way on the multiscale graph (scale auto)
    big = (1024, 1024)
    method, reason = choose(SegmentOptions(), big)
    assert method == "kway" and "multiscale" in reason
    assert choose(SegmentOptions(scale="single"), big)[0] == "recursive"
    assert choose(SegmentOptions(n_regions=None), big)[0] == "recursive"  # automatic count
    assert choose(SegmentOptions(), (1024, 1024, 3))[0] == "boundary"
    assert choose(SegmentOptions(method="boundary"), (30, 40))[0] == "boundary"
    assert choose(SegmentOptions(mode="objects"), (30, 40))[0] == "objects"
    with pytest.raises(ValueError, match="boundary"):
        SegmentOptions(method="boundary").segment_kwargs()


def test_boundary_method_on_a_colour_file_records_why(tmp_path):
    from imgcut.hierarchy import image_hierarchy

    rng = np.random.default_rng(3)
    img = np.zeros((40, 48, 3))
    img[:, 24:] = (30, 200, 90)
    img[:, :24] = (210, 60, 30)
    img = np.clip(img + rng.uniform(-5, 5, img.shape), 0, 255).astype(np.uint8)
    Image.fromarray(img).save(tmp_path / "two.png")
    report = process_image(tmp_path / "two.png", tmp_path / "out", SegmentOptions(n_regions=2))
    assert report.record["method"]["used"] == "boundary" and report.regions == 2
    expected = image_hierarchy(img, preset="photo", seed=0).labels_with(2)
    labels = np.asarray(Image.open(report.outputs["labels"]))
    np.testing.assert_array_equal(labels, expected)
    assert report.record["segmentation"]["timings"]["hierarchy"] > 0
    assert report.record["segmentation"]["working_scale"] == 1.0  # small: full resolution
    # the learned boundary model, identified by the hash of its file
    from imgcut.boundary_model import MODEL_DIR

    bm = report.record["segmentation"]["boundary_model"]
    digest = hashlib.sha256((MODEL_DIR / f"{bm['name']}.json").read_bytes()).hexdigest()
    assert bm["sha256"] == digest and bm["applied"] is True


def test_record_says_when_the_boundary_model_did_not_apply(tmp_path):
    # A grey image has no colour cues: the boundary method keeps the hand cue weights and the
    # record says the model was not applied.
    img = np.zeros((40, 48), np.uint8)
    img[:, 24:] = 200
    Image.fromarray(img).save(tmp_path / "grey.png")
    report = process_image(
        tmp_path / "grey.png", tmp_path / "out", SegmentOptions(method="boundary")
    )
    assert report.record["segmentation"]["boundary_model"]["applied"] is False
