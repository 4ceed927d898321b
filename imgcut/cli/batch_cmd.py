"""``imgcut batch``: segment every image under a folder (parsing, progress and messages only).

The work is done by `imgcut.batch.run_batch`; this module turns options into its arguments, shows
one progress bar for the whole batch (or plain lines when stdout is not a terminal) and maps the
outcome to an exit code: 0 all done, 1 some image failed, 2 bad usage, 130 interrupted.
"""

from __future__ import annotations

import contextlib
import signal
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Annotated, Any

import typer

from imgcut.cli import _options as opt
from imgcut.cli._app import app
from imgcut.cli._progress import CountingBar

__all__ = ["batch_command"]


class _Progress(CountingBar):
    """One progress display for the whole batch: a rich bar on a terminal, else plain lines.

    Images found up to date are counted, not listed one by one, and stay out of the bar: it
    measures (and its ETA extrapolates) only the images that are computed.
    """

    def __init__(self, *, quiet: bool, stream: Any = None) -> None:
        super().__init__(
            "[bold]batch",
            "[green]{task.fields[done]} done[/] · [red]{task.fields[failed]} failed[/]"
            " · {task.fields[remaining]} remaining{task.fields[skipped]}",
            stream=stream if stream is not None else sys.stdout,
            quiet=quiet,
            transient=False,
        )
        self._skipped_told = 0

    def _tell_skipped(self, event: Any) -> None:
        if event.skipped > self._skipped_told:
            n = event.skipped
            self.say(f"{n} image{'s' if n != 1 else ''} already up to date (skipped)")
            self._skipped_told = n

    def __call__(self, event: Any) -> None:
        if self.quiet:
            return
        last = event.last
        if last is None:
            if not self.live:
                self.say(f"batch: {event.total} images")
            return
        if last.status == "skipped":
            if event.remaining == 0:
                self._tell_skipped(event)
            return
        self._tell_skipped(event)
        if self.live:
            skipped = f" · {event.skipped} up to date" if event.skipped else ""
            self.show(
                total=event.total - event.skipped,
                completed=event.done + event.failed,
                done=event.done,
                failed=event.failed,
                remaining=event.remaining,
                skipped=skipped,
            )
            if last.status == "failed":
                self.say(f"failed {last.path}: {last.error}")
            return
        width = len(str(event.total))
        if last.status == "failed":
            detail = f"  ({last.error})"
        else:
            detail = f"  ({last.seconds:.1f} s)" if last.seconds is not None else ""
        self.say(f"[{event.finished:>{width}}/{event.total}] {last.status:<7} {last.path}{detail}")


def _fail(message: str, code: int) -> typer.Exit:
    return opt.fail("batch", message, code)


_G_BATCH = "Batch"


def _batch_command(
    input_dir: Annotated[
        Path,
        typer.Argument(
            help="Folder searched recursively for TIFF, PNG, JPEG and BMP images.",
            show_default=False,
        ),
    ],
    out: Annotated[
        Path,
        typer.Option(
            "--out",
            "-o",
            rich_help_panel=_G_BATCH,
            help="Output folder; the input tree is mirrored under it (created if missing).",
            show_default=False,
        ),
    ],
    glob: Annotated[
        list[str] | None,
        typer.Option(
            "--glob",
            rich_help_panel=_G_BATCH,
            metavar="PATTERN",
            help="Select inputs by pattern (repeatable). Without '/' it matches file names at "
            "any depth ('*.tif'); with '/' it is relative to INPUT_DIR ('plate1/**/*w1*.tif').",
            show_default=False,
        ),
    ] = None,
    workers: Annotated[
        int | None,
        typer.Option(
            "--workers",
            "-j",
            min=1,
            rich_help_panel=_G_BATCH,
            help="Local worker processes (default: the number of CPU cores); each uses "
            "single-threaded BLAS.",
            show_default=False,
        ),
    ] = None,
    scheduler: Annotated[
        str | None,
        typer.Option(
            "--scheduler",
            rich_help_panel=_G_BATCH,
            metavar="ADDRESS",
            help="Address of a running dask.distributed scheduler (tcp://host:8786): its "
            "workers compute, this process writes every file. Needs the 'dask' extra.",
            show_default=False,
        ),
    ] = None,
    force: Annotated[
        bool,
        typer.Option(
            "--force",
            rich_help_panel=_G_BATCH,
            help="Recompute images whose outputs are already up to date.",
        ),
    ] = False,
    gallery: Annotated[
        bool,
        typer.Option(
            "--gallery/--no-gallery",
            rich_help_panel=_G_BATCH,
            help="Write index.html with a thumbnail of every overlay and its numbers.",
        ),
    ] = True,
    quiet: Annotated[
        bool,
        typer.Option("--quiet", "-q", help="Print only errors and the final line."),
    ] = False,
    debug: Annotated[
        bool, typer.Option("--debug", help="Show the full traceback of an error.")
    ] = False,
    **segment_params: Any,
) -> None:
    """Segment every image under INPUT_DIR and write, for each, what `imgcut segment` writes.

    Runs in parallel on local processes or on a dask cluster; a rerun skips images that are
    already done with the same options; summary.csv and index.html describe the batch.
    """
    from imgcut.batch import run_batch

    try:
        try:
            options = opt.segment_options(segment_params)
        except opt.UsageProblem as exc:
            raise ValueError(str(exc)) from None
        with _Progress(quiet=quiet) as view, _terminate_as_interrupt():
            report = run_batch(
                input_dir,
                out,
                options,
                patterns=glob,
                workers=workers,
                scheduler=scheduler,
                force=force,
                gallery=gallery,
                progress=view,
            )
    except KeyboardInterrupt:  # only when the batch could not even record its state
        if debug:
            raise
        raise _fail("interrupted", opt.EXIT_INTERRUPTED) from None
    except (ValueError, ImportError) as exc:  # bad options or folders, dask missing
        if debug:
            raise
        raise _fail(str(exc), opt.EXIT_USAGE) from None
    except OSError as exc:  # the scheduler cannot be reached, the disk is full, ...
        if debug:
            raise
        raise _fail(f"{type(exc).__name__}: {exc}", opt.EXIT_DATA) from None
    except Exception as exc:  # a failure of the batch machinery itself (not of one image)
        if debug:
            raise
        raise _fail(
            f"{type(exc).__name__}: {exc} (rerun with --debug for the traceback)", opt.EXIT_DATA
        ) from None

    counts = (
        f"{report.count('done')} done, {report.count('skipped')} already up to date, "
        f"{report.count('failed')} failed"
    )
    if report.interrupted:
        typer.echo(f"imgcut batch: interrupted after {counts}; rerun to finish", err=True)
    else:
        where = f"{report.summary_path}"
        if report.gallery_path is not None:
            where += f", {report.gallery_path.name}"
        typer.echo(f"{counts} in {report.seconds:.1f} s; see {where}")
    raise typer.Exit(report.exit_code)


@contextlib.contextmanager
def _terminate_as_interrupt() -> Iterator[None]:
    """Treat SIGTERM (a job scheduler's or `kill`'s stop) like Ctrl-C: finish, record, exit."""

    def interrupt(signum: int, frame: Any) -> None:
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, interrupt)
    except ValueError:  # not the main thread: leave signals alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


batch_command = app.command("batch", no_args_is_help=True, cls=opt.OneLineErrors)(
    opt.with_segmentation_options(_batch_command)
)
