"""Segment every image of a folder tree: discovery, scheduling, resuming and the batch summary.

The per-image work is the same pipeline as ``imgcut segment`` (``imgcut.runner``); this module only
decides *which* images to run, *where* (local worker processes or a dask.distributed cluster),
records what happened in ``summary.csv`` and ``batch.json``, and builds the ``index.html`` gallery.

Guarantees
----------
- One bad file never stops the batch: its error becomes one line in the summary.
- Every output file is written atomically (temporary file in the same folder, then rename), and
  each image's run record (``name.json``) is written last, so an interrupted batch never leaves a
  file that a rerun would trust. A rerun skips an image only when all its outputs exist and its run
  record names the same input hash and the same options fingerprint.
- Local workers run with single-threaded BLAS/OpenMP so N workers use N cores, not N².
- With a dask scheduler, workers only *compute*; results travel back to this process, which writes
  every file. Workers therefore need read access to the inputs (same paths) and the same imgcut.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import csv
import io
import json
import multiprocessing
import os
import signal
import sys
import time
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

__all__ = [
    "IMAGE_SUFFIXES",
    "SUMMARY_COLUMNS",
    "BatchItem",
    "BatchProgress",
    "BatchReport",
    "ImageResult",
    "RunnerPipeline",
    "discover_images",
    "plan_batch",
    "read_summary",
    "run_batch",
]

#: File name endings (lower case) found by default when no ``glob`` pattern is given.
IMAGE_SUFFIXES: tuple[str, ...] = (".tif", ".tiff", ".png", ".jpg", ".jpeg", ".bmp")

#: Columns of ``summary.csv``, in order.
SUMMARY_COLUMNS: tuple[str, ...] = (
    "path",
    "status",
    "error",
    "regions",
    "objects",
    "seconds",
    "peak_memory_mb",
    "overlay",
)

SUMMARY_NAME = "summary.csv"
BATCH_RECORD_NAME = "batch.json"
GALLERY_NAME = "index.html"

# Environment variables read by the common BLAS / OpenMP runtimes when they load. Setting them
# before numpy is imported in a worker gives it one thread; threadpoolctl then limits any runtime
# that was loaded anyway. (Variable names from the OpenBLAS, MKL, BLIS, Accelerate and OpenMP docs.)
_THREAD_ENV = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)

_STATUSES = ("done", "skipped", "failed")
_SUMMARY_INTERVAL_S = 2.0  # rewrite summary.csv at most this often while running


# ---------------------------------------------------------------------------------------------
# Data classes
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class BatchItem:
    """One input image of a batch and where its outputs go.

    Attributes
    ----------
    source : Path
        The input file (absolute).
    relative : str
        Its path relative to the input folder, with ``/`` separators (the ``path`` column).
    out_dir : Path
        The mirrored output folder: ``OUTPUT_DIR / relative.parent``.
    problem : str
        Non-empty when the image cannot be run at all (e.g. its output names collide with
        another input's); the batch records it as failed with this message.
    """

    source: Path
    relative: str
    out_dir: Path
    problem: str = ""

    @property
    def stem(self) -> str:
        """Base name of the outputs (input file name without its last suffix)."""
        return PurePosixPath(self.relative).stem


@dataclass
class ImageResult:
    """What happened to one image: one row of ``summary.csv``.

    Attributes
    ----------
    path : str
        Input path relative to the input folder (``/`` separators).
    status : str
        ``"done"`` (computed now), ``"skipped"`` (outputs up to date), ``"failed"``, or
        ``"pending"`` (not run yet: the batch is running or was interrupted).
    error : str
        One-line error message when failed, else ``""``.
    regions : int or None
        Number of labelled regions (labels 1..K) in the label image.
    objects : int or None
        Number of objects in ``objects`` mode (background is label 0), else None.
    seconds : float or None
        Wall time of the per-image pipeline (read, segment, write).
    peak_memory_mb : float or None
        Peak resident memory of the worker process while it ran this image (MiB).
    overlay : str
        Overlay image path relative to the output folder (``""`` when there is none).
    worker : str
        Which worker ran it (``"pid:1234"`` or a dask worker address); not in the CSV.
    thumbnail : str
        The gallery thumbnail of the overlay as a ``data:`` URI, when made by the worker
        (``""`` otherwise: the gallery makes it); not in the CSV.
    """

    path: str
    status: str
    error: str = ""
    regions: int | None = None
    objects: int | None = None
    seconds: float | None = None
    peak_memory_mb: float | None = None
    overlay: str = ""
    worker: str = ""
    thumbnail: str = field(default="", repr=False)

    def row(self) -> dict[str, str]:
        """The CSV row: every column of `SUMMARY_COLUMNS` as text."""
        out = {}
        for name in SUMMARY_COLUMNS:
            value = getattr(self, name)
            if value is None:
                out[name] = ""
            elif isinstance(value, float):
                out[name] = f"{value:.3f}" if name == "seconds" else f"{value:.1f}"
            else:
                out[name] = str(value)
        return out


@dataclass(frozen=True)
class BatchProgress:
    """A progress event passed to the ``progress`` callback of `run_batch`.

    Attributes
    ----------
    total, done, skipped, failed : int
        Images in the batch; finished by computing, by skipping, by failing.
    last : ImageResult or None
        The image that just finished (None for the first event, sent before any work).
    """

    total: int
    done: int
    skipped: int
    failed: int
    last: ImageResult | None = None

    @property
    def finished(self) -> int:
        """Images with an outcome so far."""
        return self.done + self.skipped + self.failed

    @property
    def remaining(self) -> int:
        """Images still to run."""
        return self.total - self.finished


@dataclass
class BatchReport:
    """Outcome of `run_batch`.

    Attributes
    ----------
    results : list of ImageResult
        One per discovered image, in path order.
    out_dir : Path
        The output folder.
    summary_path, record_path : Path
        ``summary.csv`` and ``batch.json`` in the output folder.
    gallery_path : Path or None
        ``index.html``, when written.
    seconds : float
        Wall time of the whole batch.
    workers : int
        Local worker processes used (0 with a dask scheduler).
    scheduler : str or None
        Dask scheduler address, when used.
    peak_memory_mb_per_worker : dict
        Highest peak resident memory seen per worker (MiB).
    interrupted : bool
        True when the batch was stopped (Ctrl-C) before every image had an outcome.
    """

    results: list[ImageResult]
    out_dir: Path
    summary_path: Path
    record_path: Path
    gallery_path: Path | None = None
    seconds: float = 0.0
    workers: int = 0
    scheduler: str | None = None
    peak_memory_mb_per_worker: dict[str, float] = field(default_factory=dict)
    interrupted: bool = False

    def count(self, status: str) -> int:
        """Number of images with the given status (``done``, ``skipped`` or ``failed``)."""
        return sum(r.status == status for r in self.results)

    @property
    def exit_code(self) -> int:
        """0 when every image is done or skipped, 1 when some failed, 130 when interrupted."""
        if self.interrupted:
            return 130
        return 1 if self.count("failed") else 0


# ---------------------------------------------------------------------------------------------
# Discovery
# ---------------------------------------------------------------------------------------------


def _is_hidden(relative: PurePosixPath) -> bool:
    return any(part.startswith(".") for part in relative.parts)


def discover_images(
    input_dir: str | os.PathLike[str],
    *,
    patterns: Sequence[str] | None = None,
    exclude: Sequence[str | os.PathLike[str]] = (),
) -> list[Path]:
    """Find the images of a folder tree, recursively, in a deterministic order.

    Parameters
    ----------
    input_dir : path-like
        Folder to search.
    patterns : sequence of str, optional
        Glob patterns. A pattern without ``/`` matches file names at any depth (``"*.tif"``,
        ``"*w1*.tiff"``); a pattern with ``/`` is taken relative to `input_dir` and may use
        ``**`` (``"plate1/**/*.tif"``). Default: every file whose name ends in one of
        `IMAGE_SUFFIXES` (any case).
    exclude : sequence of path-like, default ()
        Folders whose contents are never returned (the output folder, when it lies inside the
        input folder).

    Returns
    -------
    list of Path
        Matching entries that are not folders (broken links included, so they get reported),
        skipping hidden files and folders (names starting with ``.``), sorted by their path
        relative to `input_dir`.

    Raises
    ------
    ValueError
        If `input_dir` is not an existing folder, or a pattern is empty or absolute.

    Examples
    --------
    >>> import tempfile
    >>> root = Path(tempfile.mkdtemp())
    >>> (root / "plate1").mkdir()
    >>> for name in ("b.png", "plate1/a.TIF", "notes.txt"):
    ...     _ = (root / name).write_bytes(b"")
    >>> [p.relative_to(root).as_posix() for p in discover_images(root)]
    ['b.png', 'plate1/a.TIF']
    >>> [p.relative_to(root).as_posix() for p in discover_images(root, patterns=["*.txt"])]
    ['notes.txt']
    """
    root = Path(input_dir)
    if not root.is_dir():
        raise ValueError(f"input folder {str(root)!r} does not exist or is not a folder")
    excluded = [Path(e).resolve() for e in exclude]
    candidates: set[Path] = set()
    if patterns:
        for pattern in patterns:
            if not pattern or pattern.startswith("/") or Path(pattern).is_absolute():
                raise ValueError(
                    f"glob pattern {pattern!r} must be non-empty and relative to the input folder"
                )
            matches = root.glob(pattern) if "/" in pattern else root.rglob(pattern)
            candidates.update(matches)
    else:
        candidates.update(p for p in root.rglob("*") if p.name.lower().endswith(IMAGE_SUFFIXES))
    found = []
    for path in candidates:
        relative = PurePosixPath(path.relative_to(root).as_posix())
        if _is_hidden(relative) or path.is_dir():
            continue
        resolved_parent = path.parent.resolve()
        if any(resolved_parent == e or e in resolved_parent.parents for e in excluded):
            continue
        found.append((relative.as_posix(), path))
    found.sort(key=lambda pair: pair[0])
    return [path for _, path in found]


def plan_batch(
    input_dir: str | os.PathLike[str],
    out_dir: str | os.PathLike[str],
    *,
    patterns: Sequence[str] | None = None,
) -> list[BatchItem]:
    """Discover the images and give each its mirrored output folder.

    Two inputs in one folder that differ only in their suffix (``a.tif`` and ``a.png``) would
    write the same ``a.*`` outputs; the second in path order is planned as a failure naming the
    first, instead of silently overwriting it.

    Parameters
    ----------
    input_dir, out_dir : path-like
        Input folder and output folder (the output folder may lie inside the input folder; it is
        then excluded from discovery).
    patterns : sequence of str, optional
        Glob patterns, see `discover_images`.

    Returns
    -------
    list of BatchItem
        In path order.

    Raises
    ------
    ValueError
        As `discover_images`, or when the output folder is the input folder.

    Examples
    --------
    >>> import tempfile
    >>> root = Path(tempfile.mkdtemp())
    >>> (root / "w1").mkdir()
    >>> for name in ("w1/a.tif", "w1/a.png"):
    ...     _ = (root / name).write_bytes(b"")
    >>> items = plan_batch(root, root / "out")
    >>> [(i.relative, i.out_dir.relative_to(root).as_posix(), bool(i.problem)) for i in items]
    [('w1/a.png', 'out/w1', False), ('w1/a.tif', 'out/w1', True)]
    """
    root = Path(input_dir).resolve()
    out_root = Path(out_dir).resolve()
    if out_root == root:
        # Outputs beside the inputs would be found as inputs by the next run.
        raise ValueError(
            f"the output folder must differ from the input folder ({str(root)!r}); "
            "give --out a new folder (it may lie inside the input folder)"
        )
    inside = root in out_root.parents  # excluded from the search; an ancestor is not
    sources = discover_images(root, patterns=patterns, exclude=[out_root] if inside else [])
    items: list[BatchItem] = []
    owners: dict[tuple[str, str], str] = {}
    for source in sources:
        relative = PurePosixPath(source.relative_to(root).as_posix())
        key = (relative.parent.as_posix(), relative.stem)
        problem = ""
        if key in owners:
            problem = (
                f"its outputs would overwrite those of {owners[key]} (same name, other "
                "suffix); rename one of them or select one with --glob"
            )
        else:
            owners[key] = relative.as_posix()
        items.append(
            BatchItem(
                source=source,
                relative=relative.as_posix(),
                out_dir=out_root.joinpath(*relative.parent.parts),
                problem=problem,
            )
        )
    return items


# ---------------------------------------------------------------------------------------------
# Worker-side helpers (run in worker processes / dask workers)
# ---------------------------------------------------------------------------------------------


def _limit_threads_env() -> None:
    for name in _THREAD_ENV:
        os.environ[name] = "1"


def _worker_init(preload: bool = True) -> None:
    """Initializer of each local worker process.

    Sets single-thread environment variables before numpy is imported here (the pool uses the
    ``spawn`` start method, so nothing is imported yet), then limits any thread pool loaded
    anyway with threadpoolctl. Ignores SIGINT: on Ctrl-C the parent stops handing out work and
    lets the images in flight finish, so no worker dies in the middle of a write.
    """
    _limit_threads_env()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    import numpy  # noqa: F401  (load BLAS now, single-threaded)
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1)
    if not preload:
        return
    try:  # import the pipeline now, so an image's time and memory are its own
        import imgcut.runner
        import imgcut.segment  # noqa: F401
    except ImportError:  # reported by the first image instead
        pass


def _reset_peak_memory() -> bool:
    """Reset this process's peak resident set size (Linux: write 5 to /proc/self/clear_refs)."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:  # proc(5), "clear_refs"
            fh.write("5")
        return True
    except OSError:
        return False


def _peak_memory_mb() -> float | None:
    """Peak resident set size of this process in MiB (VmHWM, else getrusage ru_maxrss)."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0  # value in kB, proc(5)
    except OSError:
        pass
    try:
        import resource

        maxrss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    except (ImportError, OSError):  # pragma: no cover - not POSIX
        return None
    # getrusage(2): kilobytes on Linux, bytes on macOS.
    return maxrss / (1024.0 * 1024.0) if sys.platform == "darwin" else maxrss / 1024.0


def _one_line(exc: BaseException) -> str:
    """The error as one line; a raw OS error becomes ``file: reason``."""
    if isinstance(exc, OSError) and exc.strerror and exc.filename:
        return f"{exc.filename}: {exc.strerror}"
    return " ".join(str(exc).split()) or type(exc).__name__


@dataclass
class _Outcome:
    """Numbers a task sends back (small; no arrays) plus, for dask, the computed result."""

    ok: bool
    error: str = ""
    regions: int | None = None
    objects: int | None = None
    seconds: float = 0.0
    peak_memory_mb: float | None = None
    worker: str = ""
    computed: Any = None
    thumbnail: str = ""


def _thumbnail(pipeline: Any, item: BatchItem, options: Any) -> str:
    """The gallery thumbnail of a freshly written overlay (``""`` if it cannot be made).

    Made where the image was processed, so that a large batch does not end with the client
    shrinking every overlay one after another.
    """
    from imgcut.gallery import thumbnail_data_uri

    try:
        return thumbnail_data_uri(pipeline.overlay_path(item, options))
    except Exception:  # the gallery falls back to a plain link
        return ""


def _local_task(pipeline: Any, item: BatchItem, options: Any) -> _Outcome:
    """Read, segment and write one image inside a local worker process.

    The peak memory is this image's own where the kernel lets us reset the high-water mark
    (Linux), else the worker's peak so far.
    """
    _reset_peak_memory()
    start = time.perf_counter()
    worker = f"pid:{os.getpid()}"
    try:
        computed = pipeline.compute(item.source, options)
        peak = _peak_memory_mb()
        numbers = pipeline.write(
            computed, item, options, extra={"peak_memory_mb": peak, "worker": worker}
        )
    except Exception as exc:  # one bad image must not stop the batch
        return _Outcome(
            False,
            _one_line(exc),
            seconds=time.perf_counter() - start,
            worker=worker,
            peak_memory_mb=_peak_memory_mb(),
        )
    seconds = time.perf_counter() - start
    return _Outcome(
        True,
        regions=numbers.get("regions"),
        objects=numbers.get("objects"),
        seconds=seconds,
        peak_memory_mb=_peak_memory_mb(),
        worker=worker,
        thumbnail=_thumbnail(pipeline, item, options),
    )


def _remote_task(pipeline: Any, source: Path, options: Any) -> _Outcome:
    """Read and segment one image on a dask worker; the result goes back to the client."""
    from threadpoolctl import threadpool_limits

    start = time.perf_counter()
    try:
        from distributed import get_worker

        worker = get_worker().address
    except Exception:  # not running inside a dask worker (e.g. called directly)
        worker = f"pid:{os.getpid()}"
    try:
        with threadpool_limits(limits=1):
            computed = pipeline.compute(source, options)
    except Exception as exc:
        return _Outcome(False, _one_line(exc), seconds=time.perf_counter() - start, worker=worker)
    # A dask worker may run several tasks at once in one process, so only the process's
    # lifetime peak is meaningful here (not reset per image).
    return _Outcome(
        True,
        seconds=time.perf_counter() - start,
        peak_memory_mb=_peak_memory_mb(),
        worker=worker,
        computed=computed,
    )


# ---------------------------------------------------------------------------------------------
# Summary files
# ---------------------------------------------------------------------------------------------


def _atomic_write_text(path: Path, text: str) -> None:
    from imgcut.io import atomic_write

    atomic_write(path, text.encode("utf-8"))


def _summary_text(results: Iterable[ImageResult]) -> str:
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(SUMMARY_COLUMNS), lineterminator="\n")
    writer.writeheader()
    for result in results:
        writer.writerow(result.row())
    return buffer.getvalue()


def read_summary(path: str | os.PathLike[str]) -> list[ImageResult]:
    """Read a ``summary.csv`` written by `run_batch`.

    Parameters
    ----------
    path : path-like
        The CSV file (or the batch output folder holding it).

    Returns
    -------
    list of ImageResult
        One per row, numbers parsed (empty cells → None).

    Raises
    ------
    ValueError
        If the file lacks a column of `SUMMARY_COLUMNS`.

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> rows = [ImageResult("a.tif", "done", regions=3)]
    >>> _ = (folder / "summary.csv").write_text(_summary_text(rows))
    >>> read_summary(folder)[0].regions
    3
    """
    path = Path(path)
    if path.is_dir():
        path = path / SUMMARY_NAME
    with open(path, newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        missing = [c for c in SUMMARY_COLUMNS if c not in (reader.fieldnames or [])]
        if missing:
            raise ValueError(f"{path}: not a batch summary, missing columns {missing}")
        rows = list(reader)

    def num(text: str, kind: type) -> Any:
        return kind(text) if text != "" else None

    return [
        ImageResult(
            path=row["path"],
            status=row["status"],
            error=row["error"],
            regions=num(row["regions"], int),
            objects=num(row["objects"], int),
            seconds=num(row["seconds"], float),
            peak_memory_mb=num(row["peak_memory_mb"], float),
            overlay=row["overlay"],
        )
        for row in rows
    ]


class _Recorder:
    """Collects results, rewrites summary.csv atomically every few seconds and at the end."""

    def __init__(self, items: Sequence[BatchItem], out_root: Path) -> None:
        self.paths = [item.relative for item in items]
        self.results: dict[str, ImageResult] = {}
        self.out_root = out_root
        self.last_write = 0.0

    def add(self, result: ImageResult) -> None:
        self.results[result.path] = result
        if time.monotonic() - self.last_write >= _SUMMARY_INTERVAL_S:
            self.flush()

    def ordered(self) -> list[ImageResult]:
        """One row per image of the batch, in path order; ``pending`` until it has an outcome."""
        return [self.results.get(p) or ImageResult(p, "pending") for p in self.paths]

    def flush(self) -> None:
        _atomic_write_text(self.out_root / SUMMARY_NAME, _summary_text(self.ordered()))
        self.last_write = time.monotonic()


# ---------------------------------------------------------------------------------------------
# The batch
# ---------------------------------------------------------------------------------------------


class RunnerPipeline:
    """The per-image pipeline of `run_batch`: ``imgcut.runner``'s compute / write / up_to_date.

    `compute` reads, segments and renders every output in memory (it writes nothing, so it can
    run on a dask worker); `write` writes those bytes atomically, the run record last, adding
    ``extra`` (peak memory, worker) under the record's ``"run"`` key. A stand-in with the same
    four methods can be passed to `run_batch` as ``pipeline`` (tests use one that kills its
    own worker).
    """

    def compute(self, source: Path, options: Any) -> Any:
        """Read, segment and render one image (``imgcut.runner.compute``)."""
        from imgcut import runner

        return runner.compute(source, options)

    def write(
        self, computed: Any, item: BatchItem, options: Any, *, extra: dict[str, Any]
    ) -> dict[str, Any]:
        """Write one computed image under ``item.out_dir``; return its counts."""
        from imgcut import runner

        report = runner.write(computed, item.out_dir, overwrite=True, extra=extra)
        return {"regions": report.regions, "objects": report.objects}

    def up_to_date(self, item: BatchItem, options: Any) -> dict[str, Any] | None:
        """Counts and timings from the run record when the outputs are current, else None."""
        from imgcut import runner

        record = runner.up_to_date(item.source, item.out_dir, options)
        if record is None:
            return None
        result = record.get("result", {})
        run = record.get("run") or {}
        return {
            "regions": result.get("regions"),
            "objects": result.get("objects"),
            "seconds": (record.get("timings") or {}).get("total"),
            "peak_memory_mb": run.get("peak_memory_mb"),
        }

    def overlay_path(self, item: BatchItem, options: Any) -> Path:
        """Where the overlay of ``item`` is written."""
        from imgcut import runner

        return runner.output_paths(item.source, item.out_dir, options)["overlay"]


def _default_options(options: Any) -> Any:
    if options is not None:
        return options
    from imgcut.runner import SegmentOptions

    return SegmentOptions()


def _relative_message(message: str, item: BatchItem, roots: Sequence[Path]) -> str:
    """Error text with the input's absolute path (and the batch folders) made relative.

    Keeps summary.csv and the gallery free of absolute paths, so the output folder can move.
    """
    message = message.replace(str(item.source), item.relative)
    for root in roots:
        message = message.replace(str(root) + os.sep, "").replace(str(root), ".")
    return message


def _result_from(
    item: BatchItem, outcome: _Outcome, overlay: str, roots: Sequence[Path]
) -> ImageResult:
    if not outcome.ok:
        return ImageResult(
            item.relative,
            "failed",
            _relative_message(outcome.error, item, roots),
            seconds=outcome.seconds,
            peak_memory_mb=outcome.peak_memory_mb,
            worker=outcome.worker,
        )
    return ImageResult(
        item.relative,
        "done",
        regions=outcome.regions,
        objects=outcome.objects,
        seconds=outcome.seconds,
        peak_memory_mb=outcome.peak_memory_mb,
        overlay=overlay,
        worker=outcome.worker,
        thumbnail=outcome.thumbnail,
    )


def _relative_overlay(pipeline: Any, item: BatchItem, options: Any, out_root: Path) -> str:
    path = pipeline.overlay_path(item, options)
    try:
        return Path(path).relative_to(out_root).as_posix()
    except ValueError:
        return ""


_DIED = "the worker process running this image died (out of memory, or killed)"


def _submit(
    executor: cf.ProcessPoolExecutor,
    in_flight: dict[cf.Future, tuple[BatchItem, bool]],
    queue: deque[BatchItem],
    isolated: bool,
    pipeline: Any,
    options: Any,
) -> bool:
    """Start the first image of `queue`; False, with the image back in its queue, when the
    pool broke since the last wait (a worker died while another image finished)."""
    item = queue.popleft()
    try:
        future = executor.submit(_local_task, pipeline, item, options)
    except cf.process.BrokenProcessPool:
        queue.appendleft(item)
        return False
    in_flight[future] = (item, isolated)
    return True


def _run_local(
    todo: list[BatchItem],
    options: Any,
    pipeline: Any,
    workers: int,
    finish: Callable[[BatchItem, _Outcome], None],
) -> bool:
    """Run `todo` on `workers` spawned processes; return True when interrupted.

    A worker that dies (killed, out of memory) breaks the whole process pool, and every image
    in flight then fails with it. Those images become suspects: a new pool reruns them one at a
    time, so only an image that kills its worker on its own is recorded as failed.
    """
    context = multiprocessing.get_context("spawn")
    pending = deque(todo)
    suspects: deque[BatchItem] = deque()
    interrupted = False
    while (pending or suspects) and not interrupted:
        executor = cf.ProcessPoolExecutor(
            max_workers=workers,
            mp_context=context,
            initializer=_worker_init,
            initargs=(isinstance(pipeline, RunnerPipeline),),
        )
        in_flight: dict[cf.Future, tuple[BatchItem, bool]] = {}  # future → (item, isolated)
        broken = False

        try:
            while (pending or suspects or in_flight) and not broken:
                # At most one image per worker in flight (none queued): a dead worker then
                # takes down only images that were running, and Ctrl-C leaves nothing queued.
                # The pool may break between a wait and the next submit (a worker died
                # while another image finished): the item goes back to its queue and the
                # broken pool is handled below like any other.
                if suspects:
                    if not in_flight:
                        broken = not _submit(executor, in_flight, suspects, True, pipeline, options)
                else:
                    while pending and len(in_flight) < workers and not broken:
                        broken = not _submit(executor, in_flight, pending, False, pipeline, options)
                if broken:
                    break
                done, _ = cf.wait(in_flight, return_when=cf.FIRST_COMPLETED)
                for future in done:
                    try:
                        outcome = future.result()
                    except cf.process.BrokenProcessPool:
                        broken = True
                        continue  # handled below with the rest of the pool
                    except Exception as exc:  # e.g. a result that cannot be pickled
                        outcome = _Outcome(False, _one_line(exc))
                    finish(in_flight.pop(future)[0], outcome)
            for item, isolated in in_flight.values():  # only when the pool broke
                if isolated:
                    finish(item, _Outcome(False, _DIED))
                else:
                    suspects.append(item)
            in_flight.clear()
        except KeyboardInterrupt:
            interrupted = True
            # Workers ignore SIGINT: let the images in flight finish and record them, so every
            # file they write is complete. A second Ctrl-C abandons this wait.
            try:
                for future in cf.as_completed(in_flight):
                    try:
                        finish(in_flight[future][0], future.result())
                    except Exception:
                        pass
            except KeyboardInterrupt:
                pass
        finally:
            executor.shutdown(wait=not interrupted, cancel_futures=True)
    return interrupted


def _import_distributed() -> tuple[Any, Any]:
    try:
        from distributed import Client, as_completed
    except ImportError as exc:
        raise ImportError(
            "--scheduler needs dask.distributed, which is not installed; "
            "install it with: pip install 'imgcut[dask]'"
        ) from exc
    return Client, as_completed


def _imgcut_version() -> str:
    """Runs on each dask worker: the imgcut version it would compute with."""
    import imgcut

    return imgcut.__version__


def _version_problems(versions: dict[str, Any], client_version: str) -> str:
    """One line naming the workers whose imgcut differs from the client's, or ``""``.

    Examples
    --------
    >>> line = _version_problems({"tcp://a:1": "0.1.0", "tcp://b:1": "0.2.0"}, "0.1.0")
    >>> "tcp://b:1 has 0.2.0" in line and "tcp://a:1" not in line
    True
    >>> _version_problems({"tcp://a:1": "0.1.0"}, "0.1.0")
    ''
    """
    odd = {w: v for w, v in sorted(versions.items()) if v != client_version}
    if not odd:
        return ""
    listed = ", ".join(f"{w} has {v}" for w, v in list(odd.items())[:3])
    more = f" and {len(odd) - 3} more" if len(odd) > 3 else ""
    return (
        f"dask workers run another imgcut than this client ({client_version}): {listed}{more}; "
        "install the same version on every worker"
    )


def _check_worker_versions(client: Any) -> None:
    """Refuse a cluster whose workers cannot import imgcut or run another version of it."""
    from imgcut import __version__

    try:
        versions = client.run(_imgcut_version)
    except Exception as exc:
        raise ValueError(
            f"dask workers cannot run imgcut ({_one_line(exc)}); install imgcut {__version__} "
            "on every worker"
        ) from exc
    problem = _version_problems(versions, __version__)
    if problem:
        raise ValueError(problem)


def _run_dask(
    todo: list[BatchItem],
    options: Any,
    pipeline: Any,
    scheduler: str,
    finish: Callable[[BatchItem, _Outcome], None],
) -> bool:
    """Compute `todo` on a dask.distributed cluster, write here; return True when interrupted."""
    Client, as_completed = _import_distributed()
    client = Client(scheduler, set_as_default=False, timeout=30)
    interrupted = False
    futures = {}
    try:
        _check_worker_versions(client)
        for item in todo:
            future = client.submit(
                _remote_task,
                pipeline,
                item.source,
                options,
                pure=False,
                key=f"imgcut-{item.relative}-{os.getpid()}-{time.time_ns()}",
            )
            futures[future] = item
        for future in as_completed(list(futures), loop=client.loop):
            item = futures[future]
            try:
                outcome = future.result()
            except Exception as exc:  # the task itself died (e.g. its worker was killed)
                outcome = _Outcome(False, f"dask task failed: {_one_line(exc)}")
            if outcome.ok:
                # Workers only computed; write every file here, on the client.
                start = time.perf_counter()
                try:
                    numbers = pipeline.write(
                        outcome.computed,
                        item,
                        options,
                        extra={"peak_memory_mb": outcome.peak_memory_mb, "worker": outcome.worker},
                    )
                    outcome.regions = numbers.get("regions")
                    outcome.objects = numbers.get("objects")
                    outcome.seconds += time.perf_counter() - start
                    outcome.thumbnail = _thumbnail(pipeline, item, options)
                except Exception as exc:
                    outcome = _Outcome(False, _one_line(exc), worker=outcome.worker)
                outcome.computed = None
            future.release()
            finish(item, outcome)
    except KeyboardInterrupt:
        interrupted = True
        client.cancel(list(futures))
    finally:
        client.close()
    return interrupted


def run_batch(
    input_dir: str | os.PathLike[str],
    out_dir: str | os.PathLike[str],
    options: Any = None,
    *,
    patterns: Sequence[str] | None = None,
    workers: int | None = None,
    scheduler: str | None = None,
    force: bool = False,
    gallery: bool = True,
    progress: Callable[[BatchProgress], None] | None = None,
    pipeline: Any = None,
) -> BatchReport:
    """Segment every image under a folder, in parallel, resumably.

    Parameters
    ----------
    input_dir : path-like
        Folder searched recursively for images.
    out_dir : path-like
        Output folder; the input tree is mirrored under it (``in/a/x.tif`` →
        ``out/a/x.labels.png``, ``out/a/x.overlay.png``, …, the same files as ``imgcut segment``).
    options : object, optional
        Per-image options passed unchanged to the segment pipeline (``imgcut.runner``); None
        means its defaults.
    patterns : sequence of str, optional
        Glob patterns selecting inputs, see `discover_images`.
    workers : int, optional
        Local worker processes; default the number of CPU cores. Ignored with `scheduler`.
    scheduler : str, optional
        Address of a running dask.distributed scheduler (``tcp://host:8786``). Workers compute
        and return results; this process writes every file.
    force : bool, default False
        Recompute images whose outputs are up to date.
    gallery : bool, default True
        Write ``index.html``.
    progress : callable, optional
        Called with a `BatchProgress` before any work and after each image.
    pipeline : object, optional
        The per-image pipeline (for tests and extensions): needs ``compute(source, options)``,
        ``write(computed, item, options, *, extra) -> {"regions", "objects"}``,
        ``up_to_date(item, options) -> dict | None`` and
        ``overlay_path(item, options) -> Path``, and must be picklable. Default:
        `RunnerPipeline` (``imgcut.runner``).

    Returns
    -------
    BatchReport
        Per-image results; ``exit_code`` is 1 when some image failed.

    Raises
    ------
    ValueError
        If the input folder does not exist, holds no image, or is the output folder;
        `workers` < 1; the output folder cannot be made or another batch is writing there; or
        dask workers lack this version of imgcut.
    ImportError
        If `scheduler` is given and dask.distributed is not installed.

    Notes
    -----
    Resuming: an image is skipped when its outputs exist and its run record holds the same input
    SHA-256 and options fingerprint; its summary row then carries the recorded numbers.
    ``summary.csv`` is rewritten atomically every few seconds and at the end, so it always
    describes a consistent state. With N local workers each process runs single-threaded BLAS, so
    the speed-up on N cores is close to N when the images are alike (Amdahl: the serial part is
    discovery, hashing and the summary).

    Examples
    --------
    >>> import tempfile, numpy as np
    >>> from PIL import Image
    >>> from imgcut.runner import SegmentOptions
    >>> root = Path(tempfile.mkdtemp())
    >>> (root / "in" / "well1").mkdir(parents=True)
    >>> img = np.zeros((10, 12), np.uint8); img[:, 6:] = 200
    >>> Image.fromarray(img).save(root / "in" / "well1" / "a.png")
    >>> _ = (root / "in" / "b.png").write_text("not an image")
    >>> report = run_batch(root / "in", root / "out", SegmentOptions(n_regions=2, radius=2),
    ...                    workers=1)
    >>> [(r.path, r.status, r.regions) for r in report.results]
    [('b.png', 'failed', None), ('well1/a.png', 'done', 2)]
    >>> report.exit_code, (root / "out" / "well1" / "a.overlay.png").is_file()
    (1, True)
    """
    started = time.perf_counter()
    if workers is not None and workers < 1:
        raise ValueError(f"workers must be a positive integer, got {workers}")
    n_workers = 0 if scheduler else (workers or os.cpu_count() or 1)
    if scheduler:
        _import_distributed()  # fail before any work when dask is missing
    if pipeline is None:
        pipeline = RunnerPipeline()
        options = _default_options(options)
    out_root = Path(out_dir).resolve()
    in_root = Path(input_dir).resolve()
    items = plan_batch(in_root, out_root, patterns=patterns)
    roots = sorted({in_root, out_root}, key=lambda p: -len(str(p)))  # longest first
    if not items:
        what = f"matching {', '.join(patterns)}" if patterns else f"ending in {IMAGE_SUFFIXES}"
        raise ValueError(f"no images found under {str(in_root)!r} {what}")
    try:
        out_root.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ValueError(
            f"cannot create output folder {str(out_root)!r}: {_one_line(exc)}"
        ) from exc

    with _batch_lock(out_root):
        _remove_partials(out_root)
        recorder = _Recorder(items, out_root)
        counts = dict.fromkeys(_STATUSES, 0)
        peaks: dict[str, float] = {}

        def emit(last: ImageResult | None) -> None:
            if progress is not None:
                progress(
                    BatchProgress(
                        len(items), counts["done"], counts["skipped"], counts["failed"], last
                    )
                )

        def record(result: ImageResult) -> None:
            counts[result.status] += 1
            if result.peak_memory_mb is not None and result.worker:
                peaks[result.worker] = max(peaks.get(result.worker, 0.0), result.peak_memory_mb)
            recorder.add(result)
            emit(result)

        def finish(item: BatchItem, outcome: _Outcome) -> None:
            overlay = _relative_overlay(pipeline, item, options, out_root) if outcome.ok else ""
            record(_result_from(item, outcome, overlay, roots))

        emit(None)
        todo: list[BatchItem] = []
        for item in items:
            if item.problem:
                record(ImageResult(item.relative, "failed", item.problem))
                continue
            previous = None
            if not force:
                try:
                    previous = pipeline.up_to_date(item, options)
                except Exception:  # an unreadable input is reported when it is run
                    previous = None
            if previous is not None:
                record(
                    ImageResult(
                        item.relative,
                        "skipped",
                        regions=previous.get("regions"),
                        objects=previous.get("objects"),
                        seconds=previous.get("seconds"),
                        peak_memory_mb=previous.get("peak_memory_mb"),
                        overlay=_relative_overlay(pipeline, item, options, out_root),
                    )
                )
            else:
                todo.append(item)

        interrupted = False
        if todo:
            if scheduler:
                interrupted = _run_dask(todo, options, pipeline, scheduler, finish)
            else:
                interrupted = _run_local(todo, options, pipeline, min(n_workers, len(todo)), finish)

        recorder.flush()
        results = recorder.ordered()
        report = BatchReport(
            results=results,
            out_dir=out_root,
            summary_path=out_root / SUMMARY_NAME,
            record_path=out_root / BATCH_RECORD_NAME,
            seconds=time.perf_counter() - started,
            workers=n_workers,
            scheduler=scheduler,
            peak_memory_mb_per_worker=peaks,
            interrupted=interrupted,
        )
        if gallery:
            from imgcut.gallery import write_gallery

            report.gallery_path = write_gallery(out_root, results)
        _write_batch_record(report, options, patterns, force)
    return report


LOCK_NAME = ".imgcut-batch.lock"


def _lock_holder(path: Path) -> tuple[int, str] | None:
    try:
        pid, host = path.read_text(encoding="utf-8").split()[:2]
        return int(pid), host
    except (OSError, ValueError):
        return None


@contextlib.contextmanager
def _batch_lock(out_root: Path) -> Iterator[None]:
    """Hold ``.imgcut-batch.lock`` in the output folder while a batch writes there.

    Two batches writing into one folder would remove each other's temporary files and race on
    the summary; the second is refused with a message naming the first. A lock whose process
    is gone (a killed batch on this machine) is taken over.
    """
    import socket

    import psutil

    path = out_root / LOCK_NAME
    host = socket.gethostname()
    for _ in range(3):
        try:
            fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            holder = _lock_holder(path)
            if holder is not None and (holder[1] != host or psutil.pid_exists(holder[0])):
                raise ValueError(
                    f"another imgcut batch (process {holder[0]} on {holder[1]}) is writing into "
                    f"{str(out_root)!r}; wait for it, or delete {LOCK_NAME} there if it is gone"
                ) from None
            with contextlib.suppress(OSError):  # stale: its batch was killed
                path.unlink()
            continue
        except OSError as exc:
            raise ValueError(
                f"output folder {str(out_root)!r} is not writable ({exc.strerror or exc})"
            ) from exc
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(f"{os.getpid()} {host}\n")
        break
    else:  # pragma: no cover - only if another batch keeps recreating the lock
        raise ValueError(f"cannot lock the output folder {str(out_root)!r}")
    try:
        yield
    finally:
        with contextlib.suppress(OSError):
            path.unlink()


def _remove_partials(out_root: Path) -> list[Path]:
    """Delete the hidden temporary files an interrupted atomic write left under `out_root`."""
    from imgcut.io import PARTIAL_SUFFIX

    removed = []
    for path in out_root.rglob(f".*{PARTIAL_SUFFIX}"):
        try:
            path.unlink()
            removed.append(path)
        except OSError:  # already gone, or not ours to remove: harmless either way
            pass
    return removed


def _options_dict(options: Any) -> Any:
    try:
        return asdict(options)
    except TypeError:
        return repr(options) if options is not None else None


def _write_batch_record(
    report: BatchReport, options: Any, patterns: Sequence[str] | None, force: bool
) -> None:
    from imgcut import __version__

    record = {
        "imgcut_version": __version__,
        "finished_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "seconds": round(report.seconds, 3),
        "images": len(report.results),
        "done": report.count("done"),
        "skipped": report.count("skipped"),
        "failed": report.count("failed"),
        "interrupted": report.interrupted,
        "workers": report.workers,
        "scheduler": report.scheduler,
        "patterns": list(patterns) if patterns else None,
        "force": force,
        "peak_memory_mb_per_worker": {
            k: round(v, 1) for k, v in sorted(report.peak_memory_mb_per_worker.items())
        },
        "options": _options_dict(options),
    }
    _atomic_write_text(report.record_path, json.dumps(record, indent=2, default=str) + "\n")
