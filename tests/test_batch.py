"""Tests of imgcut.batch: discovery, planning, scheduling, resuming and the summary."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from imgcut.batch import (
    SUMMARY_COLUMNS,
    discover_images,
    plan_batch,
    read_summary,
    run_batch,
)


class _FakePipeline:
    """A picklable stand-in for the segment pipeline: fast, and able to kill its own worker.

    Inputs are text files ``IMG<n>``; anything else is "not an image". The input named
    ``crash_on`` makes the worker process exit at once, as an out-of-memory kill would.
    """

    def __init__(self, crash_on: str | None = None) -> None:
        self.crash_on = crash_on

    def compute(self, source, options):
        text = Path(source).read_text()
        if not text.startswith("IMG"):
            raise ValueError(f"{source}: not an image file")
        if self.crash_on and Path(source).name == self.crash_on:
            os._exit(3)
        return {"n": int(text[3:] or 0)}

    def write(self, computed, item, options, *, extra):
        from imgcut.io import atomic_write

        item.out_dir.mkdir(parents=True, exist_ok=True)
        atomic_write(self.overlay_path(item), b"overlay")
        atomic_write(item.out_dir / f"{item.stem}.json", json.dumps(computed).encode())
        return {"regions": computed["n"], "objects": None}

    def up_to_date(self, item, options):
        path = item.out_dir / f"{item.stem}.json"
        return json.loads(path.read_text()) if path.exists() else None

    def overlay_path(self, item):
        return item.out_dir / f"{item.stem}.overlay.png"


# ---------------------------------------------------------------------------------------------
# Discovery and planning (no segmentation needed)
# ---------------------------------------------------------------------------------------------


def _touch(root: Path, *names: str) -> None:
    for name in names:
        path = root / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(b"")


def test_discovery_is_recursive_sorted_and_case_insensitive(tmp_path):
    _touch(
        tmp_path,
        "b/z.TIFF",
        "a.png",
        "b/c/y.jpeg",
        "x.JPG",
        "m.bmp",
        "notes.txt",
        ".hidden/q.png",
        "b/.r.tif",
        "a.png.imgcut-partial",
    )
    (tmp_path / "folder.png").mkdir()  # a folder named like an image is not an image
    found = [p.relative_to(tmp_path).as_posix() for p in discover_images(tmp_path)]
    assert found == ["a.png", "b/c/y.jpeg", "b/z.TIFF", "m.bmp", "x.JPG"]


def test_glob_patterns_by_name_or_by_relative_path(tmp_path):
    _touch(tmp_path, "p1/w1/a_w1.tif", "p1/w2/a_w2.tif", "p2/b_w1.tif", "c_w1.png")
    by_name = discover_images(tmp_path, patterns=["*_w1.tif"])
    assert [p.relative_to(tmp_path).as_posix() for p in by_name] == [
        "p1/w1/a_w1.tif",
        "p2/b_w1.tif",
    ]
    by_path = discover_images(tmp_path, patterns=["p1/**/*.tif"])
    assert [p.relative_to(tmp_path).as_posix() for p in by_path] == [
        "p1/w1/a_w1.tif",
        "p1/w2/a_w2.tif",
    ]
    both = discover_images(tmp_path, patterns=["*.png", "p2/*.tif"])
    assert [p.name for p in both] == ["c_w1.png", "b_w1.tif"]
    with pytest.raises(ValueError, match="relative"):
        discover_images(tmp_path, patterns=["/etc/*.tif"])


def test_missing_input_folder_is_a_value_error(tmp_path):
    with pytest.raises(ValueError, match="does not exist or is not a folder"):
        discover_images(tmp_path / "nope")


def test_output_folder_inside_input_is_not_searched(tmp_path):
    _touch(tmp_path, "a.tif", "out/a.overlay.png", "out/sub/b.labels.png")
    items = plan_batch(tmp_path, tmp_path / "out")
    assert [i.relative for i in items] == ["a.tif"]


def test_plan_mirrors_tree_and_flags_colliding_outputs(tmp_path):
    _touch(tmp_path, "plate/A01.tif", "plate/A01.png", "plate/sub/A01.tif")
    items = plan_batch(tmp_path / "plate", tmp_path / "res")
    by_path = {i.relative: i for i in items}
    assert by_path["sub/A01.tif"].out_dir == (tmp_path / "res" / "sub").resolve()
    assert by_path["A01.png"].problem == "" and by_path["sub/A01.tif"].problem == ""
    assert "A01.png" in by_path["A01.tif"].problem  # the second of the pair names the first


def test_workers_must_be_positive(tmp_path):
    with pytest.raises(ValueError, match="workers"):
        run_batch(tmp_path, tmp_path / "out", workers=0, pipeline=_FakePipeline())


def test_dead_worker_fails_only_its_image(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    for i in range(5):
        (src / f"f{i}.tif").write_text(f"IMG{i}")
    (src / "crash.tif").write_text("IMG9")
    (src / "text.png").write_text("hello")
    report = run_batch(
        src,
        tmp_path / "out",
        workers=2,
        gallery=False,
        pipeline=_FakePipeline(crash_on="crash.tif"),
    )
    status = {r.path: (r.status, r.error) for r in report.results}
    assert status["crash.tif"][0] == "failed" and "died" in status["crash.tif"][1]
    assert status["text.png"] == ("failed", "text.png: not an image file")  # path made relative
    assert all(status[f"f{i}.tif"][0] == "done" for i in range(5))
    assert report.exit_code == 1
    rows = read_summary(tmp_path / "out")
    assert [r.path for r in rows] == sorted(status)
    assert [r.regions for r in rows if r.status == "done"] == [0, 1, 2, 3, 4]
    header = (tmp_path / "out" / "summary.csv").read_text().splitlines()[0]
    assert header == ",".join(SUMMARY_COLUMNS)
