"""Tests of imgcut.groundtruth: .mat, label images, folders, dataset layouts."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.io as sio
import tifffile
from PIL import Image

from imgcut.groundtruth import (
    GroundTruthError,
    find_dataset,
    read_bsds_mat,
    read_ground_truth,
    read_label_image,
)


def _write_mat(path, segs, with_boundaries=True):
    # The BSDS layout: a 1 x K cell array of structs (scipy.io writes an object array of
    # dicts as a cell array of structs).
    cells = np.empty((1, len(segs)), dtype=object)
    for k, s in enumerate(segs):
        d = {"Segmentation": s.astype(np.uint16)}
        if with_boundaries:
            d["Boundaries"] = (s != np.roll(s, 1, axis=1)).astype(np.uint8)
        cells[0, k] = d
    sio.savemat(path, {"groundTruth": cells})


def test_read_bsds_mat_roundtrip(tmp_path):
    a = np.array([[1, 1, 2], [1, 2, 2]])
    b = np.array([[1, 1, 1], [2, 2, 2]])
    _write_mat(tmp_path / "x.mat", [a, b])
    gt = read_bsds_mat(tmp_path / "x.mat")
    assert gt.n_humans == 2 and gt.shape == (2, 3)
    assert np.array_equal(gt.segmentations[0], a) and gt.segmentations[0].dtype == np.int32
    assert gt.boundaries is not None and gt.boundaries[0].dtype == bool


def test_read_bsds_mat_single_human(tmp_path):
    _write_mat(tmp_path / "one.mat", [np.array([[1, 2], [1, 2]])], with_boundaries=False)
    gt = read_ground_truth(tmp_path / "one.mat")
    assert gt.n_humans == 1 and gt.boundaries is None


def test_real_bsds_file(shared_data):
    # Outside source: the BSDS500 README (shared data) documents K = 4..9 humans per image,
    # uint16 labels from 1 (no 0), image size 321x481 or 481x321.
    f = shared_data / "bsds500" / "val" / "groundTruth" / "3096.mat"
    gt = read_bsds_mat(f)
    assert 4 <= gt.n_humans <= 9
    assert gt.shape in ((321, 481), (481, 321))
    assert all(s.min() >= 1 for s in gt.segmentations)


def test_mat_errors(tmp_path):
    sio.savemat(tmp_path / "other.mat", {"foo": np.zeros(3)})
    with pytest.raises(GroundTruthError, match="other.mat.*groundTruth"):
        read_bsds_mat(tmp_path / "other.mat")
    (tmp_path / "junk.mat").write_bytes(b"not a mat file")
    with pytest.raises(GroundTruthError, match="junk.mat"):
        read_bsds_mat(tmp_path / "junk.mat")
    with pytest.raises(GroundTruthError, match="no such file"):
        read_bsds_mat(tmp_path / "missing.mat")


def test_label_images_png_and_tiff(tmp_path):
    lab = np.array([[0, 1, 1], [300, 300, 2]], dtype=np.uint16)
    Image.fromarray(lab).save(tmp_path / "m.png")
    tifffile.imwrite(tmp_path / "m.tif", lab)
    assert read_label_image(tmp_path / "m.png").tolist() == lab.tolist()
    assert read_label_image(tmp_path / "m.tif").tolist() == lab.tolist()


def test_label_image_errors(tmp_path):
    rgb = np.zeros((2, 2, 3), np.uint8)
    rgb[0, 0] = (255, 0, 0)
    Image.fromarray(rgb).save(tmp_path / "c.png")
    with pytest.raises(GroundTruthError, match="c.png.*colour"):
        read_label_image(tmp_path / "c.png")
    tifffile.imwrite(tmp_path / "f.tif", np.array([[0.5, 1.0]], np.float32))
    with pytest.raises(GroundTruthError, match="non-integer"):
        read_label_image(tmp_path / "f.tif")
    (tmp_path / "bad.png").write_bytes(b"xx")
    with pytest.raises(GroundTruthError, match="bad.png"):
        read_label_image(tmp_path / "bad.png")


def test_grey_rgb_label_image_is_accepted(tmp_path):
    rgb = np.zeros((2, 2, 3), np.uint8)
    rgb[0, 0] = 7
    Image.fromarray(rgb).save(tmp_path / "g.png")
    assert read_label_image(tmp_path / "g.png").tolist() == [[7, 0], [0, 0]]


def test_folder_of_label_images(tmp_path):
    for k in range(3):
        Image.fromarray(np.full((4, 5), k + 1, np.uint8)).save(tmp_path / f"h{k}.png")
    gt = read_ground_truth(tmp_path)
    assert gt.n_humans == 3 and [int(s[0, 0]) for s in gt.segmentations] == [1, 2, 3]
    with pytest.raises(GroundTruthError, match="unknown ground-truth format"):
        (tmp_path / "x.txt").write_text("x")
        read_ground_truth(tmp_path / "x.txt")


def test_find_dataset_layouts(tmp_path, shared_data):
    d = find_dataset(shared_data / "bsds500" / "val")
    assert d.layout == "bsds" and len(d.items) == 100  # README: 100 val images
    d = find_dataset(shared_data / "bbbc039")
    assert d.layout == "masks" and len(d.items) == 35  # README: 35 fields
    with pytest.raises(GroundTruthError, match="pick a split folder: train, val"):
        find_dataset(shared_data / "bsds500")


def test_find_dataset_unmatched_and_errors(tmp_path):
    (tmp_path / "images").mkdir()
    (tmp_path / "masks").mkdir()
    for n in ("a", "b"):
        Image.fromarray(np.zeros((3, 3), np.uint8)).save(tmp_path / "images" / f"{n}.png")
    Image.fromarray(np.zeros((3, 3), np.uint8)).save(tmp_path / "masks" / "a.png")
    d = find_dataset(tmp_path)
    assert d.layout == "masks" and [i.name for i in d.items] == ["a"]
    assert [p.name for p in d.unmatched] == ["b.png"]
    with pytest.raises(GroundTruthError, match="not a folder"):
        find_dataset(tmp_path / "nope")
    with pytest.raises(GroundTruthError, match="expected images/"):
        find_dataset(tmp_path / "images")
