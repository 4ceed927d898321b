"""Tests of imgcut.batch: discovery, planning, scheduling, resuming and the summary."""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path, PurePosixPath

import numpy as np
import pytest
import tifffile
from PIL import Image

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
        atomic_write(self.overlay_path(item, options), b"overlay")
        atomic_write(item.out_dir / f"{item.stem}.json", json.dumps(computed).encode())
        return {"regions": computed["n"], "objects": None}

    def up_to_date(self, item, options):
        path = item.out_dir / f"{item.stem}.json"
        return json.loads(path.read_text()) if path.exists() else None

    def overlay_path(self, item, options):
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


def test_output_folder_may_hold_the_input_folder_but_not_be_it(tmp_path):
    _touch(tmp_path, "data/plate/a.tif")
    items = plan_batch(tmp_path / "data" / "plate", tmp_path / "data")
    assert [(i.relative, i.out_dir) for i in items] == [("a.tif", (tmp_path / "data").resolve())]
    with pytest.raises(ValueError, match="must differ from the input folder"):
        plan_batch(tmp_path / "data", tmp_path / "data" / "plate" / "..")


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


@pytest.mark.slow
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


def test_pool_broken_at_submit_loses_no_image(tmp_path, monkeypatch):
    # A worker can die between a wait and the next submit; the executor then refuses the
    # submit with BrokenProcessPool (concurrent.futures documents this). Simulate exactly that
    # on the first submit: the image must go back to its queue and every image still be done.
    import concurrent.futures as cf

    import imgcut.batch as batch_mod

    calls = {"n": 0}

    class _BreaksOnce(cf.ProcessPoolExecutor):
        def submit(self, fn, /, *args, **kwargs):
            calls["n"] += 1
            if calls["n"] == 2:
                raise cf.process.BrokenProcessPool("simulated: a worker died")
            return super().submit(fn, *args, **kwargs)

    monkeypatch.setattr(batch_mod.cf, "ProcessPoolExecutor", _BreaksOnce)
    src = tmp_path / "in"
    src.mkdir()
    for i in range(4):
        (src / f"f{i}.tif").write_text(f"IMG{i}")
    report = run_batch(src, tmp_path / "out", workers=2, gallery=False, pipeline=_FakePipeline())
    assert calls["n"] >= 5  # the refused submit was retried on a fresh pool
    assert sorted((r.path, r.status) for r in report.results) == [
        (f"f{i}.tif", "done") for i in range(4)
    ]
    assert report.exit_code == 0


# ---------------------------------------------------------------------------------------------
# The real pipeline on a mixed folder of tiny images
# ---------------------------------------------------------------------------------------------


def _two_halves(h: int = 12, w: int = 16, *, low: int = 30, high: int = 200, seed: int = 0):
    """A tiny image whose two halves differ: two regions are the obvious answer."""
    rng = np.random.default_rng(seed)
    img = np.full((h, w), low, np.float64)
    img[:, w // 2 :] = high
    return img + rng.uniform(0, 8, (h, w))


def make_mixed_folder(root: Path) -> dict[str, str]:
    """Good images of several kinds plus bad ones; returns relative path → expected status."""
    (root / "plate" / "w2").mkdir(parents=True)
    Image.fromarray(_two_halves().astype(np.uint8)).save(root / "gray.png")
    rgb = np.stack([_two_halves(seed=1), _two_halves(seed=2)[::-1], _two_halves(seed=3)], -1)
    Image.fromarray(rgb.astype(np.uint8)).save(root / "plate" / "colour.jpg", quality=95)
    # 12 bits stored in 16, as microscopy cameras write them
    tifffile.imwrite(
        root / "plate" / "field16.tif", (_two_halves(low=300, high=3800, seed=4)).astype(np.uint16)
    )
    stack = np.stack([_two_halves(low=100, high=2000, seed=s) for s in (5, 6, 7)]).astype(np.uint16)
    # A z-stack as ImageJ writes it: needs --plane (max here)
    tifffile.imwrite(
        root / "plate" / "w2" / "zstack.tif", stack, imagej=True, metadata={"axes": "ZYX"}
    )
    expected = {
        "gray.png": "done",
        "plate/colour.jpg": "done",
        "plate/field16.tif": "done",
        "plate/w2/zstack.tif": "done",
    }
    good_png = (root / "gray.png").read_bytes()
    (root / "plate" / "truncated.png").write_bytes(good_png[: len(good_png) // 2])
    (root / "plate" / "notes.tif").write_text("plate map: A01..H12\n")
    expected["plate/truncated.png"] = expected["plate/notes.tif"] = "failed"
    os.symlink(root / "moved-away.png", root / "plate" / "link.png")  # a broken link
    expected["plate/link.png"] = "failed"
    return expected


OPTIONS = dict(n_regions=2, radius=2.0, plane="max", seed=0)


@pytest.fixture(scope="module")
def mixed_run(tmp_path_factory):
    """One batch over the mixed folder, shared by the checks below (it costs a few seconds)."""
    from imgcut.runner import SegmentOptions

    root = tmp_path_factory.mktemp("mixed")
    expected = make_mixed_folder(root / "in")
    report = run_batch(root / "in", root / "out", SegmentOptions(**OPTIONS), workers=2)
    return root, expected, report


def test_good_images_done_bad_ones_recorded(mixed_run):
    root, expected, report = mixed_run
    assert {r.path: r.status for r in report.results} == expected
    assert report.exit_code == 1  # some failed
    errors = {r.path: r.error for r in report.results if r.status == "failed"}
    for path, error in errors.items():
        assert error.startswith(path), error  # one line naming the file (relative) ...
        assert "\n" not in error and str(root) not in error
    assert "not an image" in errors["plate/notes.tif"]  # ... and the problem
    assert (
        "corrupt" in errors["plate/truncated.png"] or "truncated" in errors["plate/truncated.png"]
    )
    assert "no such file" in errors["plate/link.png"].lower()


def test_unreadable_file_is_recorded(tmp_path):
    from imgcut.runner import SegmentOptions

    src = tmp_path / "in"
    _tiny_pngs(src, 1)
    locked = src / "locked.png"
    locked.write_bytes((src / "f00.png").read_bytes())
    locked.chmod(0)
    if os.access(locked, os.R_OK):
        pytest.skip("permission bits do not stop this user (root): no unreadable file possible")
    report = run_batch(src, tmp_path / "out", SegmentOptions(**OPTIONS), workers=1)
    status = {r.path: (r.status, r.error) for r in report.results}
    assert status["f00.png"][0] == "done" and status["locked.png"][0] == "failed"
    assert status["locked.png"][1].startswith("locked.png")
    assert "permission denied" in status["locked.png"][1].lower()


def test_outputs_mirror_the_tree_and_decode(mixed_run):
    root, expected, report = mixed_run
    for result in report.results:
        if result.status != "done":
            continue
        rel = PurePosixPath(result.path)
        folder = root / "out" / rel.parent
        labels = np.asarray(Image.open(folder / f"{rel.stem}.labels.png"))
        overlay = Image.open(folder / f"{rel.stem}.overlay.png")
        record = json.loads((folder / f"{rel.stem}.json").read_text())
        assert labels.shape == (12, 16) and overlay.size == (16, 12)
        # Two halves → two regions, labels 1..K in raster order (architecture contract).
        assert result.regions == record["result"]["regions"] == labels.max() == 2
        assert labels[0, 0] == 1 and labels[0, -1] == 2
        assert record["run"]["peak_memory_mb"] > 0 and record["run"]["worker"].startswith("pid:")
        assert result.overlay == f"{rel.parent / rel.stem}.overlay.png".lstrip("./")
        assert result.thumbnail.startswith("data:image/jpeg;base64,")  # made in the worker
    assert not list((root / "out").rglob("*.imgcut-partial"))


def test_summary_and_batch_record(mixed_run):
    root, expected, report = mixed_run
    rows = read_summary(root / "out" / "summary.csv")
    assert [r.path for r in rows] == sorted(expected)
    for row in rows:
        assert row.status == expected[row.path]
        if row.status == "done":
            assert row.regions == 2 and row.seconds > 0 and row.peak_memory_mb > 10
    record = json.loads((root / "out" / "batch.json").read_text())
    assert record["done"] == 4 and record["failed"] == len(expected) - 4
    assert record["workers"] == 2 and record["options"]["n_regions"] == 2
    # Peak resident memory per worker: positive and far below the 1.5 GB budget of issue 4.
    assert record["peak_memory_mb_per_worker"]
    assert all(0 < v < 1536 for v in record["peak_memory_mb_per_worker"].values())


def test_gallery_links_every_success_without_absolute_paths(mixed_run):
    root, expected, report = mixed_run
    text = (root / "out" / "index.html").read_text(encoding="utf-8")
    links = set(re.findall(r'href="([^"]+)"', text))
    overlays = {r.overlay for r in report.results if r.status == "done"}
    assert overlays <= links and len(overlays) == 4
    assert all((root / "out" / link).is_file() for link in links)
    assert str(root) not in text and 'href="/' not in text and "file:" not in text


# ---------------------------------------------------------------------------------------------
# Resuming and interruptions
# ---------------------------------------------------------------------------------------------


def _tiny_pngs(folder: Path, n: int) -> list[str]:
    folder.mkdir(parents=True, exist_ok=True)
    names = []
    for i in range(n):
        name = f"f{i:02d}.png"
        Image.fromarray(_two_halves(seed=i).astype(np.uint8)).save(folder / name)
        names.append(name)
    return names


def _decodes(path: Path) -> None:
    """Every kind of output must parse completely: a truncated file raises here."""
    if path.suffix == ".png":
        with Image.open(path) as im:
            im.load()
    elif path.suffix == ".json":
        json.loads(path.read_text(encoding="utf-8"))
    elif path.suffix == ".csv":
        rows = path.read_text(encoding="utf-8").splitlines()
        assert rows and all(r.count(",") == rows[0].count(",") for r in rows if '"' not in r)
    elif path.suffix == ".html":
        assert path.read_text(encoding="utf-8").rstrip().endswith("</html>")


def _mtimes(folder: Path) -> dict[str, int]:
    return {
        p.relative_to(folder).as_posix(): p.stat().st_mtime_ns
        for p in folder.rglob("f*.*")
        if p.is_file()
    }


def test_rerun_skips_current_images_and_redoes_a_deleted_output(tmp_path):
    from imgcut.runner import SegmentOptions

    options = SegmentOptions(**OPTIONS)
    _tiny_pngs(tmp_path / "in", 3)
    first = run_batch(tmp_path / "in", tmp_path / "out", options, workers=1, gallery=False)
    assert [r.status for r in first.results] == ["done"] * 3
    before = _mtimes(tmp_path / "out")

    second = run_batch(tmp_path / "in", tmp_path / "out", options, workers=1, gallery=False)
    assert [r.status for r in second.results] == ["skipped"] * 3
    assert [r.regions for r in second.results] == [2, 2, 2]  # numbers come from the records
    assert _mtimes(tmp_path / "out") == before  # nothing rewritten

    (tmp_path / "out" / "f01.overlay.png").unlink()
    third = run_batch(tmp_path / "in", tmp_path / "out", options, workers=1, gallery=False)
    assert [r.status for r in third.results] == ["skipped", "done", "skipped"]
    after = _mtimes(tmp_path / "out")
    changed = {k for k in after if after[k] != before.get(k)}
    assert changed == {"f01.labels.png", "f01.overlay.png", "f01.regions.csv", "f01.json"}
    rows = read_summary(tmp_path / "out")
    assert [r.status for r in rows] == ["skipped", "done", "skipped"]

    # An edited input or other options are not "up to date"; force redoes everything.
    Image.fromarray(_two_halves(seed=9).astype(np.uint8)).save(tmp_path / "in" / "f00.png")
    fourth = run_batch(
        tmp_path / "in",
        tmp_path / "out",
        SegmentOptions(**OPTIONS),
        workers=1,
        gallery=False,
        force=False,
    )
    assert [r.status for r in fourth.results] == ["done", "skipped", "skipped"]
    other = run_batch(
        tmp_path / "in",
        tmp_path / "out",
        SegmentOptions(**{**OPTIONS, "seed": 1}),
        workers=2,
        gallery=False,
        force=True,
    )
    assert [r.status for r in other.results] == ["done"] * 3


def _batch_process(src: Path, out: Path, *extra: str) -> subprocess.Popen:
    code = "from imgcut.cli import main; main()"
    cmd = [
        sys.executable,
        "-c",
        code,
        "batch",
        str(src),
        "--out",
        str(out),
        "-k",
        "2",
        "--radius",
        "2",
        "--workers",
        "1",
        *extra,
    ]
    return subprocess.Popen(
        cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True
    )  # own process group: kill it whole


def _wait_for_first_record(out: Path, proc: subprocess.Popen, timeout: float = 120) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if list(out.glob("f*.json")):
            return
        if proc.poll() is not None:
            pytest.fail(f"batch ended before it could be interrupted: {proc.communicate()}")
        time.sleep(0.02)
    pytest.fail("batch produced no record in time")


@pytest.mark.slow
@pytest.mark.parametrize("how", ["SIGKILL", "SIGINT", "SIGTERM"])
def test_interrupted_batch_leaves_whole_files_and_rerun_finishes(tmp_path, how):
    names = _tiny_pngs(tmp_path / "in", 14)
    out = tmp_path / "out"
    proc = _batch_process(tmp_path / "in", out)
    _wait_for_first_record(out, proc)
    if how == "SIGTERM":  # a job scheduler stopping the batch: the main process only
        os.kill(proc.pid, signal.SIGTERM)
    else:  # Ctrl-C in a terminal signals the whole group; so does a hard kill here
        os.killpg(proc.pid, getattr(signal, how))
    stdout, stderr = proc.communicate(timeout=120)
    if how != "SIGKILL":
        assert proc.returncode == 130, stderr
        assert b"interrupted" in stderr
        rows = read_summary(out)  # written on the way out: every image, the rest pending
        assert [r.path for r in rows] == names
        assert {r.status for r in rows} == {"done", "pending"}
    else:
        assert proc.returncode == -signal.SIGKILL
    # Whatever was written under a final name is complete (atomic writes, record last).
    for path in out.rglob("*"):
        if path.is_file() and not path.name.startswith("."):
            _decodes(path)
    finished = {p.stem for p in out.glob("f*.json")}
    assert 1 <= len(finished) < len(names)

    rerun = _batch_process(tmp_path / "in", out)
    stdout, stderr = rerun.communicate(timeout=300)
    assert rerun.returncode == 0, stderr
    rows = read_summary(out)
    assert [r.path for r in rows] == names
    status = {r.path[:-4]: r.status for r in rows}
    assert {s for k, s in status.items() if k in finished} <= {"skipped", "done"}
    assert all(status[k] == "skipped" for k in finished if (out / f"{k}.overlay.png").exists())
    assert all(r.status in ("done", "skipped") and r.regions == 2 for r in rows)
    assert not list(out.rglob("*.imgcut-partial"))
    for path in out.rglob("*"):
        if path.is_file():
            _decodes(path)


class _ThreadProbe(_FakePipeline):
    """Records, inside the worker, how many threads each loaded BLAS/OpenMP pool may use."""

    def compute(self, source, options):
        import numpy  # noqa: F401  (BLAS loaded as the real pipeline would)
        from threadpoolctl import threadpool_info

        pools = threadpool_info()
        return {
            "n": len(pools),
            "threads": [p["num_threads"] for p in pools],
            "omp_env": os.environ.get("OMP_NUM_THREADS"),
        }


def test_workers_run_single_threaded_blas(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    for i in range(2):
        (src / f"f{i}.tif").write_text("IMG")
    run_batch(src, tmp_path / "out", workers=2, gallery=False, pipeline=_ThreadProbe())
    for i in range(2):
        record = json.loads((tmp_path / "out" / f"f{i}.json").read_text())
        # OpenBLAS/OpenMP default to one thread per core (2 here); the initializer caps them.
        assert record["n"] >= 1 and set(record["threads"]) == {1}
        assert record["omp_env"] == "1"


def test_second_batch_into_the_same_folder_is_refused_stale_lock_taken_over(tmp_path):
    import socket

    src = tmp_path / "in"
    src.mkdir()
    (src / "f0.tif").write_text("IMG1")
    out = tmp_path / "out"
    out.mkdir()
    lock = out / ".imgcut-batch.lock"
    lock.write_text(f"{os.getpid()} {socket.gethostname()}\n")  # a live batch holds it
    with pytest.raises(ValueError, match=f"another imgcut batch \\(process {os.getpid()}"):
        run_batch(src, out, workers=1, gallery=False, pipeline=_FakePipeline())
    assert not (out / "summary.csv").exists()

    finished = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    lock.write_text(f"{finished.stdout.strip()} {socket.gethostname()}\n")  # its batch is gone
    report = run_batch(src, out, workers=1, gallery=False, pipeline=_FakePipeline())
    assert [r.status for r in report.results] == ["done"]
    assert not lock.exists()  # released at the end


def test_unwritable_output_folder_is_a_value_error(tmp_path, monkeypatch):
    import errno

    import imgcut.batch as batch

    real_open = os.open

    def refuse_lock(path, *args, **kwargs):  # what a read-only share answers (root ignores modes)
        if str(path).endswith(batch.LOCK_NAME):
            raise PermissionError(errno.EACCES, "Permission denied", str(path))
        return real_open(path, *args, **kwargs)

    (tmp_path / "in").mkdir()
    (tmp_path / "in" / "a.tif").write_text("IMG1")
    monkeypatch.setattr(os, "open", refuse_lock)
    with pytest.raises(ValueError, match="is not writable \\(Permission denied\\)"):
        run_batch(tmp_path / "in", tmp_path / "out", pipeline=_FakePipeline())
