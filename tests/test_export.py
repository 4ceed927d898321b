"""Tests of imgcut.export: every output decodes with an independent reader and matches
a reference computed another way (NumPy brute force, scikit-image, Pillow, tifffile)."""

from __future__ import annotations

import csv
import doctest
import io
import json
import subprocess
import sys

import numpy as np
import pytest
import tifffile
from PIL import Image
from skimage.measure import perimeter as sk_perimeter
from skimage.segmentation import find_boundaries

import imgcut.export as export
from imgcut._errors import OutputExistsError
from imgcut.export import (
    display_rgb,
    encode_labels,
    encode_masks,
    output_names,
    record_to_json,
    region_table,
    render_eigenvector_grid,
    render_outputs,
    render_overlay,
    table_to_csv,
    write_files,
    write_outputs,
)


def _blocks(h: int = 12, w: int = 16) -> np.ndarray:
    """Four rectangles, labels 1..4 in raster order, and an unlabelled strip."""
    lab = np.zeros((h, w), np.int32)
    lab[: h // 2, : w // 2] = 1
    lab[: h // 2, w // 2 :] = 2
    lab[h // 2 :, : w // 2] = 3
    lab[h // 2 :, w // 2 :] = 4
    lab[:, -1] = 0
    return lab


# ---------------------------------------------------------------------------------------------
# label image


def test_label_png_is_8_bit_when_possible_and_decodes_exactly():
    lab = _blocks()
    im = Image.open(io.BytesIO(encode_labels(lab)))
    assert im.mode == "L"  # Pillow reports 8-bit grey
    np.testing.assert_array_equal(np.asarray(im), lab)


def test_label_png_switches_to_16_bit():
    lab = np.arange(1, 601, dtype=np.int32).reshape(20, 30)
    im = Image.open(io.BytesIO(encode_labels(lab)))
    assert im.mode.startswith("I")  # 16-bit grey PNG (Pillow mode I;16 or I)
    np.testing.assert_array_equal(np.asarray(im), lab)


def test_label_tiff_and_png_limits():
    lab = np.arange(70_000, dtype=np.int32).reshape(280, 250)
    with pytest.raises(ValueError, match="do not fit a 16-bit PNG; use label_format='tiff'"):
        encode_labels(lab)
    back = tifffile.imread(io.BytesIO(encode_labels(lab, label_format="tiff")))
    assert back.dtype == np.uint32
    np.testing.assert_array_equal(back, lab)  # reference: tifffile decoder
    small = tifffile.imread(io.BytesIO(encode_labels(_blocks(), label_format="tiff")))
    assert small.dtype == np.uint8
    with pytest.raises(ValueError, match="label_format must be one of 'png', 'tiff'"):
        encode_labels(lab, label_format="jpeg")
    with pytest.raises(ValueError, match="2-D integer array"):
        encode_labels(lab.astype(float))


# ---------------------------------------------------------------------------------------------
# overlay


def test_display_rgb_conversions():
    rgb8 = np.random.default_rng(0).integers(0, 256, (4, 5, 3), dtype=np.uint8)
    np.testing.assert_array_equal(display_rgb(rgb8), rgb8)  # 8-bit kept as is
    ramp = np.linspace(100, 4000, 400).reshape(20, 20).astype(np.uint16)
    out = display_rgb(ramp)
    assert out.shape == (20, 20, 3) and out.min() == 0 and out.max() == 255
    assert np.all(np.diff(out[..., 0].ravel().astype(int)) >= 0)  # monotone stretch
    two = np.stack([np.zeros((3, 3)), np.ones((3, 3))], axis=2)
    assert display_rgb(two)[0, 0].tolist() == [0, 255, 0]  # second channel green
    flat = display_rgb(np.full((3, 3), 7.5))
    assert np.isfinite(flat).all() and flat.max() == 0


def test_overlay_draws_scikit_image_boundaries_and_keeps_the_rest():
    rng = np.random.default_rng(1)
    img = rng.integers(0, 256, (12, 16, 3), dtype=np.uint8)
    lab = _blocks()
    out = render_overlay(img, lab, boundary_colour="cyan")
    edge = find_boundaries(lab, mode="thick")  # reference: scikit-image
    assert (out[edge] == [0, 255, 255]).all()
    np.testing.assert_array_equal(out[~edge], img[~edge])


def test_overlay_fill_is_an_alpha_blend():
    img = np.full((12, 16), 100, np.uint8)
    lab = _blocks()
    out = render_overlay(img, lab, fill=0.5, boundary_colour="red")
    colours = export._region_colours(4)
    interior = (lab == 1) & ~find_boundaries(lab, mode="thick")
    r, c = np.argwhere(interior)[0]
    expected = np.round(0.5 * 100 + 0.5 * colours[1].astype(float))
    np.testing.assert_array_equal(out[r, c], expected)
    unlabelled = (lab == 0) & ~find_boundaries(lab, mode="thick")
    assert (out[unlabelled] == 100).all()  # label 0 is never filled
    with pytest.raises(ValueError, match=r"fill must be an opacity in \[0, 1\]"):
        render_overlay(img, lab, fill=1.5)


def test_overlay_auto_colour_avoids_the_image_colour():
    yellow = np.zeros((12, 16, 3), np.uint8)
    yellow[..., :2] = 255
    out = render_overlay(yellow, _blocks())
    edge = find_boundaries(_blocks(), mode="thick")
    assert not (out[edge] == [255, 255, 0]).all(axis=1).any()


def test_overlay_shape_mismatch():
    with pytest.raises(ValueError, match="does not match image"):
        render_overlay(np.zeros((5, 5)), np.zeros((5, 6), np.int32))


# ---------------------------------------------------------------------------------------------
# region table


def test_region_table_matches_brute_force():
    rng = np.random.default_rng(2)
    lab = _blocks(10, 14)
    img = rng.integers(0, 4096, (10, 14, 2)).astype(np.uint16)
    t = region_table(lab, img)
    assert list(t["label"]) == [1, 2, 3, 4]
    rows, cols = np.indices(lab.shape)
    for i, k in enumerate(t["label"]):
        m = lab == k
        assert t["area"][i] == m.sum()
        assert t["centroid_row"][i] == pytest.approx(rows[m].mean())
        assert t["centroid_col"][i] == pytest.approx(cols[m].mean())
        assert t["bbox_min_row"][i] == rows[m].min() and t["bbox_max_row"][i] == rows[m].max() + 1
        assert t["bbox_min_col"][i] == cols[m].min() and t["bbox_max_col"][i] == cols[m].max() + 1
        for c in range(2):
            assert t[f"mean_intensity_{c}"][i] == pytest.approx(img[..., c][m].mean())
            assert t[f"integrated_intensity_{c}"][i] == img[..., c][m].astype(float).sum()
        # an n_r × n_c block of pixels has coordinate variances (n² − 1)/12 (variance of the
        # discrete uniform distribution) and no covariance, so its second-moment ellipse has
        # eccentricity sqrt(1 − var_min / var_max)
        var = sorted([(np.ptp(rows[m]) + 1) ** 2 - 1, (np.ptp(cols[m]) + 1) ** 2 - 1])
        assert t["eccentricity"][i] == pytest.approx(np.sqrt(1 - var[0] / var[1]), abs=1e-9)
        # reference: scikit-image's perimeter estimate of the region on its own
        assert t["perimeter"][i] == pytest.approx(sk_perimeter(m))
    assert t["area"].sum() == np.count_nonzero(lab)


def test_region_table_single_channel_and_csv_round_trip():
    lab = _blocks()
    t = region_table(lab, np.ones(lab.shape, np.float32))
    assert "mean_intensity" in t and "mean_intensity_0" not in t
    rows = list(csv.DictReader(io.StringIO(table_to_csv(t).decode())))
    assert [int(r["label"]) for r in rows] == [1, 2, 3, 4]
    assert sum(int(r["area"]) for r in rows) == np.count_nonzero(lab)
    assert float(rows[0]["centroid_row"]) == pytest.approx(t["centroid_row"][0], rel=1e-9)


# ---------------------------------------------------------------------------------------------
# record, masks, eigenvectors


def test_record_json_is_strict_and_plain():
    rec = {
        "values": np.array([0.0, 1e-5], np.float32),
        "n": np.int64(3),
        "bad": np.inf,
        "ok": np.bool_(True),
        "nested": {"t": (1, 2)},
    }
    back = json.loads(record_to_json(rec))  # strict parser: no NaN/Infinity tokens allowed
    assert back == {
        "values": [0.0, pytest.approx(1e-5)],
        "n": 3,
        "bad": None,
        "ok": True,
        "nested": {"t": [1, 2]},
    }


def test_masks_decode_to_each_region():
    lab = _blocks()
    files = encode_masks(lab)
    assert list(files) == [f"region-000{k}.png" for k in (1, 2, 3, 4)]
    for k, data in enumerate(files.values(), start=1):
        np.testing.assert_array_equal(np.asarray(Image.open(io.BytesIO(data))), (lab == k) * 255)


def test_eigenvector_grid_decodes_and_handles_masked_pixels():
    vecs = np.random.default_rng(3).normal(size=(20, 30, 5))
    vecs[0, 0, :] = np.nan
    png = render_eigenvector_grid(vecs, np.linspace(0, 1e-3, 5))
    im = Image.open(io.BytesIO(png))
    assert im.format == "PNG" and im.width > im.height > 50
    with pytest.raises(ValueError, match=r"shape \(H, W, k\)"):
        render_eigenvector_grid(vecs[..., 0])
    with pytest.raises(ValueError, match="unknown colour map"):
        render_eigenvector_grid(vecs, cmap="no-such-map")


def test_eigenvector_grid_leaves_pyplot_alone():
    code = (
        "import sys, numpy as np; from imgcut.export import render_eigenvector_grid;"
        "render_eigenvector_grid(np.ones((4, 4, 2)));"
        "print('matplotlib.pyplot' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


# ---------------------------------------------------------------------------------------------
# writing


def test_output_names_and_render_outputs():
    names = output_names("cells", label_format="tiff", masks=True, eigenvectors=True)
    assert names == {
        "labels": "cells.labels.tif",
        "overlay": "cells.overlay.png",
        "regions": "cells.regions.csv",
        "record": "cells.json",
        "masks": "cells.masks",
        "eigenvectors": "cells.eigenvectors.png",
    }
    files = render_outputs(
        "cells",
        np.zeros((12, 16)),
        _blocks(),
        label_format="tiff",
        masks=True,
        eigenvector_grid=True,
        eigenvectors=np.ones((12, 16, 2)),
        eigenvalues=np.zeros(2),
    )
    assert "cells.masks/region-0004.png" in files and "cells.json" not in files
    with pytest.raises(ValueError, match="needs the eigenvectors"):
        render_outputs("x", np.zeros((12, 16)), _blocks(), eigenvector_grid=True)


def test_write_files_refuses_existing_without_touching_anything(tmp_path):
    (tmp_path / "b.txt").write_bytes(b"keep")
    with pytest.raises(OutputExistsError, match=r"b\.txt: already exists \(use --overwrite"):
        write_files(tmp_path, {"a.txt": b"new", "b.txt": b"new"})
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b.txt"]
    assert (tmp_path / "b.txt").read_bytes() == b"keep"
    write_files(tmp_path, {"a.txt": b"new", "b.txt": b"new", "sub/c.txt": b"c"}, overwrite=True)
    assert (tmp_path / "b.txt").read_bytes() == b"new" and (tmp_path / "sub/c.txt").exists()


def test_write_outputs_writes_the_record_last(tmp_path, monkeypatch):
    order = []
    real = export.atomic_write

    def spy(path, data, **kw):
        order.append(path.name)
        return real(path, data, **kw)

    monkeypatch.setattr(export, "atomic_write", spy)
    paths = write_outputs(tmp_path, "x", np.zeros((12, 16)), _blocks(), record={"a": 1}, masks=True)
    assert order[-1] == "x.json" and len(order) == 4 + 4
    assert paths["masks"].is_dir() and json.loads(paths["record"].read_text()) == {"a": 1}


def test_docstring_examples_run():
    result = doctest.testmod(export)
    assert result.attempted > 0 and result.failed == 0
