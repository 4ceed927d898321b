"""``imgcut segment IMAGE``: segment one image and write its label image, overlay, region
table and run record.

A thin layer over :func:`imgcut.runner.process_image`: it parses options, shows progress,
prints a summary, and turns every failure into one line on stderr with an exit code
(2: the command as typed cannot run; 1: the image could not be segmented).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Any

import typer

from imgcut.cli import _options as opt
from imgcut.cli._app import app
from imgcut.cli._progress import StageSpinner

__all__ = ["segment_command", "EXIT_USAGE", "EXIT_DATA"]

EXIT_DATA, EXIT_USAGE = opt.EXIT_DATA, opt.EXIT_USAGE


def _fail(message: str, code: int) -> typer.Exit:
    return opt.fail("segment", message, code)


def _segment_command(
    image: Annotated[
        Path,
        typer.Argument(
            help="Image file: PNG, JPEG, TIFF or BMP.", show_default=False, metavar="IMAGE"
        ),
    ],
    out: Annotated[
        Path | None,
        typer.Option(
            "--out",
            "-o",
            rich_help_panel=opt.PANEL_OUTPUT,
            show_default="beside the input",
            help="Output folder (created if missing).",
        ),
    ] = None,
    overwrite: Annotated[
        bool,
        typer.Option(
            "--overwrite", rich_help_panel=opt.PANEL_OUTPUT, help="Replace existing outputs."
        ),
    ] = False,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")] = False,
    as_json: Annotated[
        bool, typer.Option("--json", help="Print the run record as JSON on stdout.")
    ] = False,
    debug: Annotated[
        bool, typer.Option("--debug", help="Show the full traceback of an error.")
    ] = False,
    **segment_params: Any,
) -> None:
    """Segment one image by normalized cuts and write its label image, overlay, region
    table and run record (NAME.labels.png, NAME.overlay.png, NAME.regions.csv, NAME.json)."""
    from imgcut._errors import ImageReadError, OutputExistsError, OutputFolderError
    from imgcut.runner import process_image

    try:
        options = opt.segment_options(segment_params)
        with StageSpinner(image.name, quiet=quiet) as tell:
            report = process_image(image, out, options, overwrite=overwrite, progress=tell)
    except KeyboardInterrupt:
        if debug:
            raise
        raise _fail(
            "interrupted; finished files are complete, none is half-written", opt.EXIT_INTERRUPTED
        ) from None
    except (
        opt.UsageProblem,
        FileNotFoundError,
        IsADirectoryError,
        OutputExistsError,
        OutputFolderError,
    ) as exc:
        if debug:
            raise
        raise _fail(str(exc), opt.EXIT_USAGE) from None
    except (ImageReadError, ValueError, MemoryError) as exc:
        if debug:
            raise
        raise _fail(str(exc), opt.EXIT_DATA) from None
    except OSError as exc:  # disk full, permission lost mid-run, …
        if debug:
            raise
        where = exc.filename or image
        raise _fail(f"{where}: {exc.strerror or exc}", opt.EXIT_DATA) from None
    except Exception as exc:  # a failure inside the library: still one line, no traceback
        if debug:
            raise
        text = (str(exc).strip().splitlines() or [""])[0]
        raise _fail(
            f"{image}: {type(exc).__name__}: {text} (rerun with --debug for the traceback)",
            opt.EXIT_DATA,
        ) from None

    if not quiet:
        for line in report.warnings:
            typer.echo(f"imgcut segment: warning: {line}", err=True)
    if as_json:
        typer.echo(json.dumps(_plain(report.record), indent=2))
    if not quiet:
        _summary(report, to_stderr=as_json)


def _plain(record: dict[str, Any]) -> Any:
    from imgcut.export import record_to_json

    return json.loads(record_to_json(record))


def _summary(report: Any, *, to_stderr: bool) -> None:
    from rich.console import Console

    console = Console(stderr=to_stderr, highlight=False, soft_wrap=True)
    t = report.timings
    shape = "×".join(str(s) for s in report.shape[:2])
    channels = f", {report.shape[2]} channels" if len(report.shape) == 3 else ""
    noun = "object" if report.objects is not None else "region"
    noun += "" if report.regions == 1 else "s"
    used = report.record.get("method", {}).get("used")
    by = f", method {used}" if used and used != "objects" else ""
    console.print(
        f"[bold]{report.source.name}[/]: {report.regions} {noun} ({shape} pixels{channels}{by}) "
        f"in {t['total']:.2f} s — read {t['read']:.2f}, segment {t['segment']:.2f}, "
        f"draw {t['render']:.2f}, write {t['write']:.2f}"
    )
    width = max(len(kind) for kind in report.outputs)
    for kind, path in report.outputs.items():
        console.print(f"  {kind:<{width}}  {path}{'/' if kind == 'masks' else ''}", markup=False)


segment_command = app.command("segment", no_args_is_help=True, cls=opt.OneLineErrors)(
    opt.with_segmentation_options(_segment_command, before=1)
)
