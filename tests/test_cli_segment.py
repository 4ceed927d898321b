"""Tests of ``imgcut segment``: options, outputs, and one-line errors with the right exit code
that leave every file as it was. One test runs the installed executable in a subprocess and
checks its outputs against a direct call of the library."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import tifffile
from PIL import Image
from typer.testing import CliRunner

from imgcut.cli import app
from imgcut.io import read_image
from imgcut.presets import get_preset
from imgcut.runner import BOUNDARY_PRESET, SegmentOptions
from imgcut.segment import segment

ROOT = Path(__file__).resolve().parents[1]
FAST = ["-k", "2", "--radius", "2"]


def _halves(h: int = 10, w: int = 12) -> np.ndarray:
    rng = np.random.default_rng(0)
    img = np.zeros((h, w), np.uint8)
    img[:, w // 2 :] = 200
    return img + rng.integers(0, 10, img.shape).astype(np.uint8)


@pytest.fixture
def work(tmp_path):
    """A folder with one small good image, ``halves.png``."""
    Image.fromarray(_halves()).save(tmp_path / "halves.png")
    return tmp_path


def run(*args: str):
    return CliRunner().invoke(app, ["segment", *map(str, args)])


def snapshot(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` with a hash of its content."""
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def assert_one_line_error(result, code: int, *fragments: str) -> None:
    assert result.exit_code == code, (result.exit_code, result.stderr, result.stdout)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("imgcut segment: error: ")
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])
    assert "Traceback" not in result.output
    assert result.stdout == ""


# ---------------------------------------------------------------------------------------------
# successful runs


def test_default_run_writes_the_four_files_and_a_summary(work):
    result = run(work / "halves.png", "--out", work / "out", *FAST)
    assert result.exit_code == 0, result.stderr
    names = sorted(p.name for p in (work / "out").iterdir())
    assert names == ["halves.json", "halves.labels.png", "halves.overlay.png", "halves.regions.csv"]
    assert "halves.png: 2 regions (10×12 pixels, method recursive)" in result.stdout
    assert str(work / "out" / "halves.overlay.png") in result.stdout
    labels = np.asarray(Image.open(work / "out" / "halves.labels.png"))
    # the library called directly on the same pixels with the same options
    direct = segment(_halves(), **SegmentOptions(n_regions=2, radius=2).segment_kwargs())
    np.testing.assert_array_equal(labels, direct.labels)


def test_outputs_go_beside_the_input_by_default(work):
    assert run(work / "halves.png", *FAST).exit_code == 0
    assert (work / "halves.labels.png").is_file() and (work / "halves.json").is_file()


def test_json_prints_the_record_and_quiet_prints_nothing(work):
    result = run(work / "halves.png", "-o", work / "a", "--json", *FAST)
    assert result.exit_code == 0
    printed = json.loads(result.stdout)  # stdout holds only the JSON record
    assert printed == json.loads((work / "a" / "halves.json").read_text())
    assert "2 regions" in result.stderr  # the summary moved to stderr
    result = run(work / "halves.png", "-o", work / "b", "--quiet", *FAST)
    assert result.exit_code == 0 and result.stdout == "" and result.stderr == ""
    assert (work / "b" / "halves.json").is_file()


def test_optional_outputs(work):
    result = run(
        work / "halves.png",
        "-o",
        work / "o",
        "--masks",
        "--eigenvectors",
        "--fill",
        "0.4",
        "--label-format",
        "tiff",
        *FAST,
    )
    assert result.exit_code == 0, result.stderr
    out = work / "o"
    assert tifffile.imread(out / "halves.labels.tif").max() == 2
    assert sorted(p.name for p in (out / "halves.masks").iterdir()) == [
        "region-0001.png",
        "region-0002.png",
    ]
    assert Image.open(out / "halves.eigenvectors.png").format == "PNG"
    rec = json.loads((out / "halves.json").read_text())
    assert rec["options"]["fill"] == 0.4 and rec["options"]["masks"] is True


def test_channel_and_plane_select_from_a_stack(work):
    stack = np.zeros((2, 3, 10, 12), np.uint16)  # Z, C, Y, X
    stack[1, 2] = _halves().astype(np.uint16) * 100
    tifffile.imwrite(work / "stack.tif", stack, imagej=True, metadata={"axes": "ZCYX"})
    result = run(work / "stack.tif", "-o", work / "o", "--plane", "1", "--channel", "2", *FAST)
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "o" / "stack.json").read_text())
    assert rec["input"]["plane"] == 1 and rec["input"]["channels"] == [2]
    assert rec["result"]["regions"] == 2
    result = run(work / "stack.tif", "-o", work / "p", "--plane", "max", "--channel", "0,2", *FAST)
    assert result.exit_code == 0, result.stderr


def test_objects_mode_labels_objects_on_background(work):
    yy, xx = np.mgrid[:48, :64]
    img = 100.0 + 2000 * np.exp(-((yy - 15) ** 2 + (xx - 18) ** 2) / 40.0)
    img += 2000 * np.exp(-((yy - 32) ** 2 + (xx - 45) ** 2) / 40.0)
    img += np.random.default_rng(0).normal(0, 10, img.shape)
    tifffile.imwrite(work / "spots.tif", img.astype(np.uint16))
    result = run(work / "spots.tif", "-o", work / "o", "--mode", "objects", "--min-area", "10")
    assert result.exit_code == 0, result.stderr
    assert "spots.tif: 2 objects (48×64 pixels)" in result.stdout
    rows = list(csv.DictReader(io.StringIO((work / "o" / "spots.regions.csv").read_text())))
    assert len(rows) == 2 and {"eccentricity", "integrated_intensity"} <= set(rows[0])
    labels = np.asarray(Image.open(work / "o" / "spots.labels.png"))
    assert labels[0, 0] == 0 and set(np.unique(labels)) == {0, 1, 2}


def test_overwrite_replaces_existing_outputs(work):
    assert run(work / "halves.png", "-o", work / "o", *FAST).exit_code == 0
    before = snapshot(work / "o")
    result = run(work / "halves.png", "-o", work / "o", "-k", "1", "--radius", "2", "--overwrite")
    assert result.exit_code == 0, result.stderr
    after = snapshot(work / "o")
    assert after.keys() == before.keys() and after != before
    assert json.loads((work / "o" / "halves.json").read_text())["result"]["regions"] == 1


# ---------------------------------------------------------------------------------------------
# errors: one line, right exit code, nothing written or changed


def _write_bad(work: Path, kind: str) -> Path:
    if kind == "not-an-image":
        path = work / "notes.png"
        path.write_text("these are notes, not pixels\n" * 10)
    elif kind == "truncated":
        path = work / "cut.png"
        Image.fromarray(np.random.default_rng(1).integers(0, 255, (64, 64, 3), np.uint8)).save(path)
        path.write_bytes(path.read_bytes()[:500])
    elif kind == "empty":
        path = work / "empty.tif"
        path.write_bytes(b"")
    elif kind == "one-pixel":
        path = work / "dot.png"
        Image.fromarray(np.zeros((1, 1), np.uint8)).save(path)
    elif kind == "nan":
        path = work / "nan.tif"
        data = np.ones((6, 8), np.float32)
        data[3, 3] = np.nan
        tifffile.imwrite(path, data)
    elif kind == "inf":
        path = work / "inf.tif"
        data = np.ones((6, 8), np.float64)
        data[0, :2] = np.inf
        tifffile.imwrite(path, data)
    elif kind == "stack":
        path = work / "zstack.tif"
        tifffile.imwrite(
            path, np.zeros((4, 6, 8), np.uint16), photometric="minisblack", metadata={"axes": "ZYX"}
        )
    else:  # pragma: no cover
        raise AssertionError(kind)
    return path


@pytest.mark.parametrize(
    "kind, fragments",
    [
        ("not-an-image", ["notes.png: not an image file"]),
        ("truncated", ["cut.png: truncated or corrupt"]),
        ("empty", ["empty.tif: file is empty"]),
        ("one-pixel", ["dot.png: image is 1×1 pixel", "at least 2"]),
        ("nan", ["nan.tif: 1 sample is NaN or infinite"]),
        ("inf", ["inf.tif: 2 samples are NaN or infinite"]),
        ("stack", ["zstack.tif: multi-plane stack of 4 planes", "--plane"]),
    ],
)
def test_data_errors_exit_1(work, kind, fragments):
    path = _write_bad(work, kind)
    before = snapshot(work)
    result = run(path, "-o", work / "out", *FAST)
    assert_one_line_error(result, 1, *fragments)
    assert snapshot(work) == before and not (work / "out").exists()


def test_image_over_max_pixels_exit_1(work):
    before = snapshot(work)
    result = run(work / "halves.png", "--max-pixels", "100", "-o", work / "out")
    assert_one_line_error(
        result,
        1,
        "halves.png: image is 10×12 = 120 pixels",
        "over the limit of 100",
        "--max-pixels",
    )
    assert snapshot(work) == before and not (work / "out").exists()


def test_missing_file_and_folder_exit_2(work):
    before = snapshot(work)
    assert_one_line_error(run(work / "nope.png", "-o", work / "out"), 2, "nope.png: no such file")
    (work / "folder.png").mkdir()
    assert_one_line_error(
        run(work / "folder.png", "-o", work / "out"),
        2,
        "folder.png: is a folder, not an image file",
    )
    assert snapshot(work) == before and not (work / "out").exists()


def test_unwritable_output_folder_exit_2(work):
    (work / "taken").write_text("a file where the output folder should be")
    before = snapshot(work)
    assert_one_line_error(
        run(work / "halves.png", "-o", work / "taken", *FAST),
        2,
        "taken: output folder is not a folder",
    )
    assert_one_line_error(
        run(work / "halves.png", "-o", work / "taken" / "sub", *FAST),
        2,
        "output folder cannot be made",
        "taken is a file",
    )
    assert snapshot(work) == before


@pytest.mark.skipif(
    sys.platform == "win32"
    or not hasattr(__import__("os"), "geteuid")
    or __import__("os").geteuid() == 0,
    reason="permission bits do not stop root (or apply on Windows)",
)
def test_read_only_output_folder_exit_2(work):  # pragma: no cover - CI runs as root
    ro = work / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        assert_one_line_error(run(work / "halves.png", "-o", ro, *FAST), 2, "not writable")
    finally:
        ro.chmod(0o755)


def test_existing_outputs_are_refused_without_overwrite(work):
    assert run(work / "halves.png", "-o", work / "o", *FAST).exit_code == 0
    before = snapshot(work)
    result = run(work / "halves.png", "-o", work / "o", *FAST)
    assert_one_line_error(result, 2, "already exists", "--overwrite")
    assert snapshot(work) == before
    # one optional output that exists is enough to refuse
    (work / "o2" / "halves.masks").mkdir(parents=True)
    (work / "o2" / "halves.masks" / "region-0001.png").write_bytes(b"mine")
    before = snapshot(work)
    assert_one_line_error(
        run(work / "halves.png", "-o", work / "o2", "--masks", *FAST),
        2,
        "region-0001.png: already exists",
    )
    assert snapshot(work) == before


@pytest.mark.parametrize(
    "args, fragments",
    [
        (["-k", "0"], ["--regions must be a count ≥ 1 or 'auto', got 0"]),
        (["-k", "many"], ["--regions must be a count ≥ 1 or 'auto'"]),
        (["-k", "auto", "--method", "kway"], ["--regions", "needs method recursive"]),
        (["--radius", "0"], ["--radius must be > 0"]),
        (["--radius", "-3"], ["--radius must be > 0"]),
        (["--method", "spectral"], ["--method must be one of auto, recursive, kway, boundary"]),
        (["--cue", "texture"], ["--cue must be one of combined, intensity, contour"]),
        (
            ["--solver", "gpu"],
            ["--solver must be one of auto, twolevel, lobpcg-amg, arpack, dense"],
        ),
        (["--max-ncut", "5"], ["--max-ncut must be in (0, 2]"]),
        (["--method", "kway", "--max-ncut", "0.1"], ["--max-ncut", "recursive only"]),
        (["--min-area", "0"], ["--min-area must be an integer ≥ 1"]),
        (["--fill", "1.5"], ["--fill must be an opacity in [0, 1]"]),
        (["--label-format", "jpeg"], ["--label-format must be one of png, tiff"]),
        (["--channel", "a,b"], ["--channel must be an index or comma-separated indices"]),
        (["--plane", "top"], ["--plane must be an index ≥ 0 or 'max'"]),
        (["--sigma-feature", "-1"], ["--sigma-feature must be > 0"]),
        (["--max-pixels", "0"], ["--max-pixels must be an integer ≥ 1"]),
        (["--memory-budget", "0"], ["--memory-budget must be > 0 (GiB)"]),
        (["--mode", "cells"], ["--mode must be one of regions, objects"]),
        (["--object-diameter", "12"], ["--object-diameter must be used with mode objects"]),
        (
            ["--mode", "objects", "--eigenvectors"],
            ["--eigenvectors must be used with mode regions only"],
        ),
        (
            ["--mode", "objects", "--small-objects", "keep"],
            ["--small-objects must be one of drop, merge"],
        ),
    ],
)
def test_nonsense_options_exit_2(work, args, fragments):
    before = snapshot(work)
    result = run(work / "halves.png", "-o", work / "out", *args)
    assert_one_line_error(result, 2, *fragments)
    assert snapshot(work) == before and not (work / "out").exists()


def test_option_of_the_wrong_type_is_a_usage_error(work):
    result = run(work / "halves.png", "--radius", "wide")
    assert result.exit_code == 2 and "--radius" in result.stderr
    assert "Traceback" not in result.output


def test_interrupt_exits_130_and_leaves_no_output(work, monkeypatch):
    import imgcut.runner as runner

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(runner, "_segment", interrupted)
    before = snapshot(work)
    result = run(work / "halves.png", "-o", work / "out", *FAST)
    assert_one_line_error(result, 130, "interrupted")
    assert snapshot(work) == before and not (work / "out").exists()


def test_unexpected_library_failure_is_one_line(work, monkeypatch):
    import imgcut.runner as runner

    def broken(*args, **kwargs):
        raise RuntimeError("eigensolver gave up\nafter 3 restarts")

    monkeypatch.setattr(runner, "_segment", broken)
    result = run(work / "halves.png", "-o", work / "out", *FAST)
    assert_one_line_error(result, 1, "halves.png: RuntimeError: eigensolver gave up", "--debug")
    assert not (work / "out").exists()


def test_debug_shows_the_traceback(work):
    path = _write_bad(work, "not-an-image")
    result = run(path, "--debug")
    from imgcut._errors import ImageReadError

    assert isinstance(result.exception, ImageReadError)
    assert "not an image file" in str(result.exception)


# ---------------------------------------------------------------------------------------------
# the installed executable, end to end


@pytest.mark.slow
def test_installed_executable_agrees_with_the_library(tmp_path):
    """The README's run command, through the installed console script, against the library:
    on a colour photograph-like image the default method is the boundary hierarchy."""
    from imgcut.hierarchy import image_hierarchy

    exe = shutil.which("imgcut")
    if exe is None:
        pytest.skip("the imgcut console script is not installed (pip install -e .)")
    sample = ROOT / "sample_images" / "scene.png"
    # the README command plus the masks; defaults otherwise
    proc = subprocess.Popen(
        [exe, "segment", str(sample), "--out", str(tmp_path), "--masks"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        # meanwhile, the library on the same pixels with the same (default) options
        pixels = read_image(sample).pixels
        # no --regions on a photograph: the preset's tuned level of the hierarchy
        direct = image_hierarchy(pixels, preset="photo", seed=0).labels_at()
        stdout, stderr = proc.communicate(timeout=900)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, stderr
    out = {
        k: tmp_path / v
        for k, v in {
            "labels": "scene.labels.png",
            "overlay": "scene.overlay.png",
            "regions": "scene.regions.csv",
            "record": "scene.json",
        }.items()
    }
    for path in out.values():
        assert path.is_file(), path

    labels = np.asarray(Image.open(out["labels"]))
    np.testing.assert_array_equal(labels, direct)  # labels identical
    n_regions = int(direct.max())
    overlay = Image.open(out["overlay"])
    assert overlay.size == (pixels.shape[1], pixels.shape[0]) and overlay.mode == "RGB"
    rows = list(csv.DictReader(io.StringIO(out["regions"].read_text())))
    h, w = pixels.shape[:2]
    assert sum(int(r["area"]) for r in rows) == h * w  # regions tile the image
    assert [int(r["label"]) for r in rows] == list(range(1, n_regions + 1))
    record = json.loads(out["record"].read_text())
    assert record["method"]["asked"] == "auto" and record["method"]["used"] == "boundary"
    assert record["segmentation"]["preset"] == "photo"
    tuned = get_preset(BOUNDARY_PRESET).default_level  # the preset's tuned level, not a copy
    assert record["options"]["n_regions"] == "default" and record["segmentation"]["level"] == tuned
    assert record["input"]["sha256"] == hashlib.sha256(sample.read_bytes()).hexdigest()
    masks = sorted((tmp_path / "scene.masks").iterdir())
    assert len(masks) == n_regions
    for k, mask_path in enumerate(masks, start=1):
        np.testing.assert_array_equal(np.asarray(Image.open(mask_path)) > 0, labels == k)
    assert f"scene.png: {n_regions} regions" in stdout and "method boundary" in stdout


# ---------------------------------------------------------------------------------------------
# --scale


def test_scale_option_lists_the_library_values_and_its_default():
    import typer

    from imgcut.segment import SCALES

    command = typer.main.get_command(app).commands["segment"]
    (param,) = [p for p in command.params if "--scale" in p.opts]
    assert param.default == ("auto" if "auto" in SCALES else "single")
    for value in SCALES:  # the help is built from imgcut.segment.SCALES
        assert f"{value}:" in param.help


def test_scale_multi_runs_kway_and_is_recorded(work):
    result = run(
        work / "halves.png", "-o", work / "o", "--method", "kway", "--scale", "multi", *FAST
    )
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "o" / "halves.json").read_text())
    assert rec["options"]["scale"] == "multi"
    assert rec["segmentation"]["params"]["scale"] == "multi"  # what the library ran
    assert (
        rec["options_fingerprint"]
        == SegmentOptions(n_regions=2, radius=2.0, method="kway", scale="multi").fingerprint()
    )


@pytest.mark.parametrize(
    "args, fragment",
    [
        (["--scale", "multi"], "--scale multi needs mode regions with method kway"),
        (["--scale", "multi", "--mode", "objects"], "got mode objects"),
        (["--scale", "tiny"], "--scale must be one of auto, single, multi"),
    ],
)
def test_scale_refusals_are_one_line_usage_errors(work, args, fragment):
    before = snapshot(work)
    assert_one_line_error(run(work / "halves.png", "-o", work / "o", *args), 2, fragment)
    assert snapshot(work) == before


# ---------------------------------------------------------------------------------------------
# --regions auto


def _bands() -> np.ndarray:
    """Three flat vertical bands (grey 20, 120, 220) with ±4 noise: three regions."""
    rng = np.random.default_rng(1)
    img = np.repeat(np.array([20.0, 120.0, 220.0]), 10)[None, :].repeat(24, axis=0)
    return (img + rng.uniform(-4, 4, img.shape)).astype(np.uint8)


def test_regions_auto_without_max_ncut_uses_the_documented_threshold(work):
    from imgcut.runner import AUTO_MAX_NCUT

    Image.fromarray(_bands()).save(work / "bands.png")
    result = run(work / "bands.png", "-o", work / "o", "-k", "auto", "--radius", "2")
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "o" / "bands.json").read_text())
    assert rec["options"]["n_regions"] is None and rec["options"]["max_ncut"] is None
    assert rec["method"]["used"] == "recursive"  # a grey image
    assert rec["method"]["max_ncut"] == AUTO_MAX_NCUT  # the threshold the cuts stopped at
    # the three bands are found; every cut made is below the threshold and the cheapest cut
    # inside one flat 24 x 10 band is not (its Ncut is far above 0.01)
    assert rec["result"]["regions"] == 3
    assert all(split["ncut"] < AUTO_MAX_NCUT for split in rec["segmentation"]["splits"])
    labels = np.asarray(Image.open(work / "o" / "bands.labels.png"))
    assert [len(np.unique(labels[:, 10 * i : 10 * i + 10])) for i in range(3)] == [1, 1, 1]
    help_text = " ".join(CliRunner().invoke(app, ["segment", "--help"]).stdout.split())
    assert f"default threshold {AUTO_MAX_NCUT:g}" in help_text.replace("│ ", "")


# ---------------------------------------------------------------------------------------------
# the default method: boundary hierarchy for colour images, recursive cuts otherwise


def _colour_patches() -> np.ndarray:
    """A 48 x 64 RGB image: red, green and blue thirds, with ±6 noise."""
    rng = np.random.default_rng(2)
    img = np.zeros((48, 64, 3))
    img[:, :21] = (200, 40, 40)
    img[:, 21:42] = (40, 180, 60)
    img[:, 42:] = (50, 60, 200)
    return np.clip(img + rng.uniform(-6, 6, img.shape), 0, 255).astype(np.uint8)


def test_colour_image_defaults_to_the_boundary_hierarchy(work):
    from imgcut.hierarchy import image_hierarchy

    Image.fromarray(_colour_patches()).save(work / "rgb.png")
    result = run(work / "rgb.png", "-o", work / "o", "-k", "3")
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "o" / "rgb.json").read_text())
    assert rec["method"]["asked"] == "auto" and rec["method"]["used"] == "boundary"
    assert "colour" in rec["method"]["reason"]
    labels = np.asarray(Image.open(work / "o" / "rgb.labels.png"))
    expected = image_hierarchy(_colour_patches(), preset="photo", seed=0).labels_with(3)
    np.testing.assert_array_equal(labels, expected)
    # the three colour thirds come out as the three regions
    assert labels.max() == 3
    assert [len(np.unique(labels[:, a:b])) for a, b in ((0, 19), (23, 40), (44, 64))] == [1, 1, 1]


def test_boundary_auto_count_uses_the_presets_level(work):
    from imgcut.hierarchy import image_hierarchy
    from imgcut.presets import get_preset

    Image.fromarray(_colour_patches()).save(work / "rgb.png")
    result = run(work / "rgb.png", "-o", work / "o", "-k", "auto", "--method", "boundary")
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "o" / "rgb.json").read_text())
    assert rec["method"]["used"] == "boundary" and "asked for" in rec["method"]["reason"]
    assert rec["segmentation"]["level"] == get_preset("photo").default_level
    labels = np.asarray(Image.open(work / "o" / "rgb.labels.png"))
    np.testing.assert_array_equal(
        labels, image_hierarchy(_colour_patches(), preset="photo", seed=0).labels_at()
    )


def test_grey_image_and_graph_options_keep_recursive_cuts(work):
    result = run(work / "halves.png", "-o", work / "g", *FAST)
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "g" / "halves.json").read_text())
    assert rec["method"]["used"] == "recursive" and rec["method"]["reason"].startswith("grey")

    Image.fromarray(_colour_patches()).save(work / "rgb.png")
    result = run(work / "rgb.png", "-o", work / "c", *FAST)  # --radius: a graph option
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "c" / "rgb.json").read_text())
    assert rec["method"]["used"] == "recursive" and "radius" in rec["method"]["reason"]


def test_boundary_refuses_options_it_does_not_use(work):
    before = snapshot(work)
    result = run(work / "halves.png", "-o", work / "o", "--method", "boundary", "--radius", "3")
    assert_one_line_error(result, 2, "--radius is not used by method boundary")
    assert snapshot(work) == before


def _colour_patches_large() -> np.ndarray:
    """A 96 x 128 RGB image: the three thirds of ``_colour_patches`` at twice the size."""
    return np.repeat(np.repeat(_colour_patches(), 2, axis=0), 2, axis=1)


def test_working_pixels_resamples_large_photos_and_is_recorded(work):
    # 96 x 128 = 12 288 pixels; --working-pixels 3072 asks for a copy at half the side
    img = _colour_patches_large()
    Image.fromarray(img).save(work / "rgb.png")
    result = run(work / "rgb.png", "-o", work / "o", "-k", "3", "--working-pixels", "3072")
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "o" / "rgb.json").read_text())
    assert rec["segmentation"]["working_scale"] == pytest.approx(0.5)
    assert rec["segmentation"]["preset_params"]["working_pixels"] == 3072
    assert rec["options"]["working_pixels"] == 3072
    labels = np.asarray(Image.open(work / "o" / "rgb.labels.png"))
    assert labels.shape == (96, 128) and labels.max() == 3
    # the borders land on the colour edges of the full-size image (columns 41|42 and 83|84)
    cols = set(np.flatnonzero(np.any(labels[:, :-1] != labels[:, 1:], axis=0)).tolist())
    assert cols <= {40, 41, 42, 82, 83, 84}
    # 0 = full resolution
    result = run(work / "rgb.png", "-o", work / "f", "-k", "3", "--working-pixels", "0")
    assert result.exit_code == 0, result.stderr
    rec = json.loads((work / "f" / "rgb.json").read_text())
    assert rec["segmentation"]["working_scale"] == 1.0


def test_working_pixels_is_refused_where_it_cannot_apply(work):
    before = snapshot(work)
    result = run(work / "halves.png", "-o", work / "o", "--working-pixels", "-5")
    assert_one_line_error(result, 2, "--working-pixels must be an integer ≥ 0")
    result = run(
        work / "halves.png", "-o", work / "o", "--method", "recursive", "--working-pixels", "0"
    )
    assert_one_line_error(result, 2, "--working-pixels must be used by method boundary only")
    assert snapshot(work) == before
