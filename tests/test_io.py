"""Tests of imgcut.io: reading every supported format, selection, guards, atomic writes.

Reference arrays are written by independent encoders (Pillow and tifffile) and must come back
sample for sample; the bomb tests use headers forged by hand after the PNG specification
(ISO/IEC 15948, IHDR chunk) and the TIFF 6.0 specification (baseline IFD tags).
"""

from __future__ import annotations

import doctest
import os
import stat
import struct
import sys
import time
import zlib
from pathlib import Path

import numpy as np
import pytest
import tifffile
from PIL import Image

import imgcut.io as imgio
from imgcut._errors import ImageReadError, ImageTooLargeError
from imgcut.io import atomic_write, read_image, stale_partials

ROOT = Path(__file__).resolve().parents[1]
RNG = np.random.default_rng(7)


def _save_pil(path: Path, array: np.ndarray, **kw) -> Path:
    Image.fromarray(array).save(path, **kw)
    return path


# ---------------------------------------------------------------------------------------------
# formats


@pytest.mark.parametrize(
    "array, name",
    [
        (RNG.integers(0, 256, (9, 13), dtype=np.uint8), "g8.png"),
        (RNG.integers(0, 256, (9, 13, 3), dtype=np.uint8), "rgb.png"),
        (RNG.integers(0, 65536, (9, 13), dtype=np.uint16), "g16.png"),
        (RNG.integers(0, 256, (9, 13), dtype=np.uint8), "g8.bmp"),
        (RNG.integers(0, 256, (9, 13, 3), dtype=np.uint8), "rgb.bmp"),
    ],
)
def test_lossless_pillow_formats_round_trip(tmp_path, array, name):
    # reference: the array Pillow itself encoded must come back sample for sample
    path = _save_pil(tmp_path / name, array)
    img = read_image(path)
    assert img.pixels.dtype == array.dtype
    np.testing.assert_array_equal(img.pixels, array)
    assert img.format in ("PNG", "BMP")


def test_jpeg_decodes_close_to_original(tmp_path):
    smooth = np.linspace(0, 255, 32 * 40).reshape(32, 40).astype(np.uint8)
    rgb = np.stack([smooth, smooth[::-1], np.full_like(smooth, 90)], axis=2)
    img = read_image(_save_pil(tmp_path / "a.jpg", rgb, quality=95))
    assert img.format == "JPEG" and img.pixels.shape == (32, 40, 3)
    # JPEG is lossy; at quality 95 a smooth ramp stays within a few levels (common practice)
    assert np.abs(img.pixels.astype(int) - rgb).mean() < 3


def test_alpha_palette_and_bilevel_are_normalised(tmp_path):
    rgba = RNG.integers(0, 256, (5, 6, 4), dtype=np.uint8)
    img = read_image(_save_pil(tmp_path / "a.png", rgba))
    np.testing.assert_array_equal(img.pixels, rgba[..., :3])
    assert any("alpha" in n for n in img.notes)

    pal = Image.fromarray(RNG.integers(0, 256, (5, 6, 3), dtype=np.uint8)).quantize(8)
    pal.save(tmp_path / "p.png")
    img = read_image(tmp_path / "p.png")
    np.testing.assert_array_equal(img.pixels, np.asarray(pal.convert("RGB")))

    Image.fromarray(np.eye(4, dtype=bool)).save(tmp_path / "b.png")
    img = read_image(tmp_path / "b.png")
    assert img.pixels.dtype == np.uint8 and set(np.unique(img.pixels)) == {0, 255}


def test_format_detected_from_content_not_name(tmp_path):
    array = RNG.integers(0, 65536, (6, 7), dtype=np.uint16)
    path = tmp_path / "really_a_tiff.png"
    tifffile.imwrite(path, array)
    img = read_image(path)
    assert img.format == "TIFF"
    np.testing.assert_array_equal(img.pixels, array)


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.int32, np.float32, np.float64])
def test_tiff_sample_types_round_trip(tmp_path, dtype):
    array = (RNG.random((8, 11)) * 1000).astype(dtype)
    tifffile.imwrite(tmp_path / "a.tif", array, compression="zlib")
    img = read_image(tmp_path / "a.tif")
    assert img.pixels.dtype == dtype
    np.testing.assert_array_equal(img.pixels, array)  # reference: tifffile's own encoding


def test_tiff_rgb_and_planar_samples(tmp_path):
    rgb = RNG.integers(0, 256, (8, 11, 3), dtype=np.uint8)
    tifffile.imwrite(tmp_path / "rgb.tif", rgb)
    np.testing.assert_array_equal(read_image(tmp_path / "rgb.tif").pixels, rgb)
    planar = RNG.integers(0, 65536, (3, 8, 11), dtype=np.uint16)
    tifffile.imwrite(tmp_path / "planar.tif", planar, photometric="rgb", planarconfig="separate")
    img = read_image(tmp_path / "planar.tif")
    np.testing.assert_array_equal(img.pixels, np.moveaxis(planar, 0, -1))
    assert img.n_channels == 3


def test_hyperstack_plane_channel_and_projection(tmp_path):
    stack = RNG.integers(0, 4096, (3, 2, 8, 11), dtype=np.uint16)  # Z, C, Y, X
    path = tmp_path / "h.tif"
    tifffile.imwrite(path, stack, imagej=True, metadata={"axes": "ZCYX"})
    with pytest.raises(ImageReadError, match=r"h\.tif: multi-plane stack of 3 planes.*--plane"):
        read_image(path)
    img = read_image(path, plane=2)
    np.testing.assert_array_equal(img.pixels, np.moveaxis(stack[2], 0, -1))
    img = read_image(path, plane=1, channel=1)
    np.testing.assert_array_equal(img.pixels, stack[1, 1])
    img = read_image(path, plane="max", channel=[1, 0])
    np.testing.assert_array_equal(img.pixels, np.moveaxis(stack.max(axis=0)[[1, 0]], 0, -1))
    assert img.n_planes == 3 and img.n_channels == 2 and img.source_axes == "ZCYX"
    with pytest.raises(ImageReadError, match=r"--plane 3 is out of range.*3 planes \(0\.\.2\)"):
        read_image(path, plane=3)
    with pytest.raises(ImageReadError, match=r"--channel 2 is out of range.*2 channels"):
        read_image(path, plane=0, channel=2)


def test_plain_pages_need_a_choice_and_can_be_channels(tmp_path):
    pages = RNG.integers(0, 65536, (4, 6, 7), dtype=np.uint16)
    path = tmp_path / "pages.tif"
    tifffile.imwrite(path, pages, photometric="minisblack", metadata=None)
    with pytest.raises(ImageReadError, match=r"4 pages.*--plane.*--channel"):
        read_image(path)
    np.testing.assert_array_equal(read_image(path, plane=3).pixels, pages[3])
    img = read_image(path, channel=[0, 2])
    np.testing.assert_array_equal(img.pixels, np.moveaxis(pages[[0, 2]], 0, -1))


def test_animated_png_frames_are_planes(tmp_path):
    frames = [RNG.integers(0, 256, (5, 6, 3), dtype=np.uint8) for _ in range(3)]
    images = [Image.fromarray(f) for f in frames]
    path = tmp_path / "anim.png"
    images[0].save(path, save_all=True, append_images=images[1:])  # APNG, written by Pillow
    with pytest.raises(ImageReadError, match="3 planes"):
        read_image(path)
    np.testing.assert_array_equal(read_image(path, plane=2).pixels, frames[2])
    np.testing.assert_array_equal(read_image(path, plane="max").pixels, np.max(frames, axis=0))


def test_single_image_accepts_plane_zero_only(tmp_path):
    path = _save_pil(tmp_path / "a.png", np.zeros((4, 4), np.uint8))
    assert read_image(path, plane=0).pixels.shape == (4, 4)
    with pytest.raises(ImageReadError, match="out of range"):
        read_image(path, plane=1)


# ---------------------------------------------------------------------------------------------
# bad files: one line, names the file


def _assert_one_line_naming(exc: BaseException, path: Path) -> None:
    text = str(exc)
    assert "\n" not in text and str(path) in text


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(FileNotFoundError) as e:
        read_image(tmp_path / "nope.png")
    _assert_one_line_naming(e.value, tmp_path / "nope.png")
    with pytest.raises(IsADirectoryError) as e:
        read_image(tmp_path)
    _assert_one_line_naming(e.value, tmp_path)


@pytest.mark.parametrize(
    "content, pattern",
    [
        (b"", "file is empty"),
        (b"plain text, certainly not pixels\n" * 5, "not an image"),
    ],
)
def test_empty_and_non_image(tmp_path, content, pattern):
    path = tmp_path / "x.png"
    path.write_bytes(content)
    with pytest.raises(ImageReadError, match=pattern) as e:
        read_image(path)
    _assert_one_line_naming(e.value, path)


@pytest.mark.parametrize("kind", ["png", "jpeg", "tiff"])
def test_truncated_files(tmp_path, kind):
    array = RNG.integers(0, 256, (64, 64, 3), dtype=np.uint8)
    path = tmp_path / f"t.{kind}"
    if kind == "tiff":
        tifffile.imwrite(path, array)
    else:
        _save_pil(path, array, format=kind.upper())
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(ImageReadError, match="truncated or corrupt") as e:
        read_image(path)
    _assert_one_line_naming(e.value, path)


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_float_tiff_with_nan_or_inf(tmp_path, bad):
    array = np.ones((5, 6), np.float32)
    array[2, 3] = bad
    tifffile.imwrite(tmp_path / "f.tif", array)
    with pytest.raises(ImageReadError, match=r"1 sample is NaN or infinite") as e:
        read_image(tmp_path / "f.tif")
    _assert_one_line_naming(e.value, tmp_path / "f.tif")


def test_max_pixels_on_ordinary_images(tmp_path):
    path = _save_pil(tmp_path / "a.png", np.zeros((10, 20), np.uint8))
    assert read_image(path, max_pixels=200).pixels.shape == (10, 20)
    with pytest.raises(ImageTooLargeError, match=r"10×20 = 200 pixels, over the limit of 199"):
        read_image(path, max_pixels=199)
    tifffile.imwrite(tmp_path / "a.tif", np.zeros((10, 20), np.uint16))
    with pytest.raises(ImageTooLargeError, match="over the limit"):
        read_image(tmp_path / "a.tif", max_pixels=199)
    with pytest.raises(ValueError, match="max_pixels must be a positive integer"):
        read_image(path, max_pixels=0)


def _png_chunk(kind: bytes, body: bytes) -> bytes:
    # PNG spec: length, type, data, CRC-32 over type + data
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


def test_forged_png_header_is_refused_before_decoding(tmp_path):
    width = height = 60_000  # 3.6 gigapixels claimed by a 100-byte file
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    data = (
        b"\x89PNG\r\n\x1a\n"
        + _png_chunk(b"IHDR", ihdr)
        + _png_chunk(b"IDAT", zlib.compress(b"\x00" * 64))
        + _png_chunk(b"IEND", b"")
    )
    path = tmp_path / "bomb.png"
    path.write_bytes(data)
    old = Image.MAX_IMAGE_PIXELS
    start = time.perf_counter()
    with pytest.raises(ImageTooLargeError, match="3,600,000,000 pixels") as e:
        read_image(path)
    assert time.perf_counter() - start < 2.0
    _assert_one_line_naming(e.value, path)
    assert Image.MAX_IMAGE_PIXELS == old  # Pillow's global limit is restored


def test_forged_tiff_header_is_refused_before_decoding(tmp_path):
    # TIFF 6.0 baseline: header, one IFD of 12-byte entries (tag, type, count, value), sorted
    entries = [
        (256, 4, 1, 70_000),  # ImageWidth
        (257, 4, 1, 70_000),  # ImageLength
        (258, 3, 1, 8),  # BitsPerSample
        (259, 3, 1, 1),  # Compression: none
        (262, 3, 1, 1),  # Photometric: black is zero
        (273, 4, 1, 8 + 2 + 12 * 9 + 4),  # StripOffsets: right after the IFD
        (277, 3, 1, 1),  # SamplesPerPixel
        (278, 4, 1, 70_000),  # RowsPerStrip
        (279, 4, 1, 70_000 * 70_000 % 2**32),  # StripByteCounts (bogus, never read)
    ]
    ifd = struct.pack("<H", len(entries))
    for tag, typ, count, value in entries:
        fmt = "<HHIH2x" if typ == 3 else "<HHII"
        ifd += struct.pack(fmt, tag, typ, count, value)
    data = b"II*\x00" + struct.pack("<I", 8) + ifd + struct.pack("<I", 0) + b"\x00" * 16
    path = tmp_path / "bomb.tif"
    path.write_bytes(data)
    with pytest.raises(ImageTooLargeError, match="70000×70000") as e:
        read_image(path)
    _assert_one_line_naming(e.value, path)


def test_option_validation():
    with pytest.raises(ValueError, match="plane must be an index ≥ 0 or 'max'"):
        read_image("x.png", plane="middle")
    with pytest.raises(ValueError, match="channel indices must be ≥ 0"):
        read_image("x.png", channel=[-1])


def test_record_is_json_ready(tmp_path):
    import json

    path = _save_pil(tmp_path / "a.png", np.zeros((3, 4, 3), np.uint8))
    rec = read_image(path, channel=[2]).to_record()
    assert json.loads(json.dumps(rec))["shape"] == [3, 4] and rec["channels"] == [2]


# ---------------------------------------------------------------------------------------------
# atomic writes


def test_atomic_write_creates_replaces_and_refuses(tmp_path):
    path = tmp_path / "out.bin"
    atomic_write(path, b"one")
    assert path.read_bytes() == b"one"
    atomic_write(path, b"two")
    assert path.read_bytes() == b"two"
    with pytest.raises(FileExistsError, match="already exists"):
        atomic_write(path, b"three", overwrite=False)
    assert path.read_bytes() == b"two"
    assert os.listdir(tmp_path) == ["out.bin"]  # no temporary file left


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX permission bits")
def test_atomic_write_gives_umask_permissions(tmp_path):
    old = os.umask(0o027)
    try:
        path = atomic_write(tmp_path / "p.txt", b"x")
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o640


def test_interrupted_write_leaves_no_file(tmp_path, monkeypatch):
    path = tmp_path / "out.png"
    atomic_write(path, b"old")

    def boom(fd):
        raise KeyboardInterrupt  # as if the user pressed Ctrl-C mid-write

    monkeypatch.setattr(imgio.os, "fsync", boom)
    with pytest.raises(KeyboardInterrupt):
        atomic_write(path, b"new but never finished")
    assert path.read_bytes() == b"old"
    assert sorted(os.listdir(tmp_path)) == ["out.png"]


def test_stale_partials_are_found(tmp_path):
    leftover = tmp_path / f".a.png.x1y2{imgio.PARTIAL_SUFFIX}"
    leftover.write_bytes(b"half")
    (tmp_path / f".b.png.zz{imgio.PARTIAL_SUFFIX}").write_bytes(b"other file's")
    assert stale_partials(tmp_path / "a.png") == [leftover]


def test_write_into_missing_folder_fails_cleanly(tmp_path):
    with pytest.raises(OSError):
        atomic_write(tmp_path / "missing" / "a.txt", b"x")
    assert not (tmp_path / "missing").exists()


# ---------------------------------------------------------------------------------------------
# sample images and docstrings


def test_sample_images_match_their_generator_and_are_small():
    sys.path.insert(0, str(ROOT / "scripts"))
    try:
        import make_sample_images as gen
    finally:
        sys.path.pop(0)
    scene = read_image(ROOT / "sample_images" / "scene.png")
    assert scene.pixels.shape == (240, 320, 3) and scene.pixels.dtype == np.uint8
    np.testing.assert_array_equal(scene.pixels, gen.make_scene())
    nuclei = read_image(ROOT / "sample_images" / "nuclei.tif")
    image, truth = gen.make_nuclei()
    assert nuclei.pixels.dtype == np.uint16 and nuclei.pixels.max() < 4096
    np.testing.assert_array_equal(nuclei.pixels, image)
    assert truth.max() == 24
    for path in (ROOT / "sample_images").iterdir():
        assert path.stat().st_size < 1_000_000, path


def test_docstring_examples_run():
    result = doctest.testmod(imgio, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0
