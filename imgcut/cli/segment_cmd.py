"""``imgcut segment IMAGE``: segment one image and write its label image, overlay, region
table and run record.

A thin layer over :func:`imgcut.runner.process_image`: it parses options, shows progress,
prints a summary, and turns every failure into one line on stderr with an exit code
(2: the command as typed cannot run; 1: the image could not be segmented).
"""

from __future__ import annotations

import json
import sys
from contextlib import nullcontext
from pathlib import Path
from typing import Annotated, Any

import typer

from imgcut.cli._app import app

__all__ = ["segment_command", "EXIT_USAGE", "EXIT_DATA"]

EXIT_DATA = 1  # the file is not a usable image, or the segmentation failed on it
EXIT_USAGE = 2  # options, paths or existing outputs: the command as typed cannot run

# SegmentOptions field → the flag that sets it (for error messages in the user's terms)
_FLAGS = {
    "n_regions": "--regions",
    "max_ncut": "--max-ncut",
    "method": "--method",
    "kway_method": "--kway-method",
    "radius": "--radius",
    "cue": "--cue",
    "sigma_feature": "--sigma-feature",
    "sigma_distance": "--sigma-distance",
    "sigma_edge": "--sigma-edge",
    "min_area": "--min-area",
    "connected": "--connected",
    "solver": "--solver",
    "tol": "--tol",
    "maxiter": "--maxiter",
    "seed": "--seed",
    "n_eigenvectors": "--n-eigenvectors",
    "memory_budget": "--memory-budget",
    "mode": "--mode",
    "object_diameter": "--object-diameter",
    "pixel_size": "--pixel-size",
    "exclude_border": "--exclude-border",
    "small_objects": "--small-objects",
    "foreground": "--foreground",
    "eigenvectors": "--eigenvectors",
    "channel": "--channel",
    "plane": "--plane",
    "max_pixels": "--max-pixels",
    "label_format": "--label-format",
    "fill": "--fill",
}

_STAGES = {
    "read": "reading",
    "segment": "segmenting",
    "render": "drawing outputs",
    "write": "writing files",
}

_G_GRAPH = "Graph"
_G_CUT = "Partition"
_G_READ = "Input"
_G_OBJ = "Objects mode (fluorescence nuclei)"
_G_OUT = "Output"


class _UsageProblem(Exception):
    """An option value the command line itself rejects (exit 2)."""


def _parse_regions(text: str) -> int | None:
    if text.strip().lower() == "auto":
        return None
    try:
        value = int(text)
    except ValueError:
        raise _UsageProblem(f"--regions must be a count ≥ 1 or 'auto', got {text!r}") from None
    if value < 1:
        raise _UsageProblem(f"--regions must be a count ≥ 1 or 'auto', got {value}")
    return value


def _parse_channel(text: str | None) -> tuple[int, ...] | None:
    if text is None:
        return None
    try:
        values = tuple(int(part) for part in text.split(",") if part.strip() != "")
    except ValueError:
        raise _UsageProblem(
            f"--channel must be an index or comma-separated indices like 0,2; got {text!r}"
        ) from None
    if not values or any(v < 0 for v in values):
        raise _UsageProblem(f"--channel indices must be ≥ 0; got {text!r}")
    return values


def _parse_plane(text: str | None) -> int | str | None:
    if text is None:
        return None
    if text.strip().lower() == "max":
        return "max"
    try:
        value = int(text)
    except ValueError:
        raise _UsageProblem(f"--plane must be an index ≥ 0 or 'max'; got {text!r}") from None
    if value < 0:
        raise _UsageProblem(f"--plane must be an index ≥ 0 or 'max'; got {value}")
    return value


def _fail(message: str, code: int) -> typer.Exit:
    first = " ".join(str(message).split("\n")[0].split()) or "unknown error"
    typer.echo(f"imgcut segment: error: {first}", err=True)
    return typer.Exit(code)


@app.command("segment", no_args_is_help=True)
def segment_command(
    image: Annotated[
        Path,
        typer.Argument(
            help="Image file: PNG, JPEG, TIFF or BMP.", show_default=False, metavar="IMAGE"
        ),
    ],
    regions: Annotated[
        str,
        typer.Option(
            "--regions",
            "-k",
            rich_help_panel=_G_CUT,
            metavar="N|auto",
            help="Number of regions to cut the image into, or 'auto' to keep splitting while "
            "a cut with Ncut below --max-ncut exists.",
        ),
    ] = "8",
    max_ncut: Annotated[
        float | None,
        typer.Option(
            "--max-ncut",
            rich_help_panel=_G_CUT,
            help="Make no cut whose normalized-cut value is at or above this (0 < T ≤ 2; "
            "recursive method).",
        ),
    ] = None,
    method: Annotated[
        str,
        typer.Option(
            "--method",
            rich_help_panel=_G_CUT,
            help="recursive: repeated two-way cuts, cheapest first; kway: one eigensolve and a "
            "simultaneous partition.",
        ),
    ] = "recursive",
    kway_method: Annotated[
        str,
        typer.Option(
            "--kway-method",
            rich_help_panel=_G_CUT,
            help="With --method kway: discretize (Yu & Shi rotation) or kmeans.",
        ),
    ] = "discretize",
    min_area: Annotated[
        int | None,
        typer.Option(
            "--min-area",
            rich_help_panel=_G_CUT,
            help="Smallest region in pixels; smaller fragments merge into their most strongly "
            "connected neighbour. Default: 0.1 % of the image.",
        ),
    ] = None,
    connected: Annotated[
        bool,
        typer.Option(
            "--connected/--classes",
            rich_help_panel=_G_CUT,
            help="Make every region one connected patch, or keep the raw cut classes.",
        ),
    ] = True,
    radius: Annotated[
        float | None,
        typer.Option(
            "--radius",
            "-r",
            rich_help_panel=_G_GRAPH,
            show_default="5; 3 in objects mode",
            help="Link pixels within this distance (pixels). Time and memory grow with r².",
        ),
    ] = None,
    cue: Annotated[
        str,
        typer.Option(
            "--cue",
            rich_help_panel=_G_GRAPH,
            help="Affinity: intensity (colour/brightness similarity × distance), contour "
            "(intervening contour) or combined (their product).",
        ),
    ] = "combined",
    sigma_feature: Annotated[
        float | None,
        typer.Option(
            "--sigma-feature",
            rich_help_panel=_G_GRAPH,
            help="Scale of the intensity/colour difference; default from the image.",
        ),
    ] = None,
    sigma_distance: Annotated[
        float | None,
        typer.Option(
            "--sigma-distance",
            rich_help_panel=_G_GRAPH,
            help="Scale of the pixel distance; default from the radius.",
        ),
    ] = None,
    sigma_edge: Annotated[
        float | None,
        typer.Option(
            "--sigma-edge",
            rich_help_panel=_G_GRAPH,
            help="Scale of the edge strength crossed (contour cue); default from the image.",
        ),
    ] = None,
    solver: Annotated[
        str,
        typer.Option(
            "--solver",
            rich_help_panel=_G_GRAPH,
            help="Eigensolver: auto, lobpcg-amg, arpack or dense.",
        ),
    ] = "auto",
    tol: Annotated[
        float,
        typer.Option("--tol", rich_help_panel=_G_GRAPH, help="Eigenvector residual tolerance."),
    ] = 1e-5,
    maxiter: Annotated[
        int | None,
        typer.Option("--maxiter", rich_help_panel=_G_GRAPH, help="Eigensolver iteration limit."),
    ] = None,
    n_eigenvectors: Annotated[
        int | None,
        typer.Option(
            "--n-eigenvectors",
            rich_help_panel=_G_GRAPH,
            help="Eigenvectors solved on the whole image (default: 3 recursive, N k-way).",
        ),
    ] = None,
    memory_budget: Annotated[
        float | None,
        typer.Option(
            "--memory-budget",
            rich_help_panel=_G_GRAPH,
            metavar="GIB",
            help="Refuse graphs whose estimated memory exceeds this many GiB (default 4).",
        ),
    ] = None,
    seed: Annotated[
        int,
        typer.Option(
            "--seed",
            rich_help_panel=_G_GRAPH,
            help="Seed of every random start; same image + options + seed = same labels.",
        ),
    ] = 0,
    mode: Annotated[
        str,
        typer.Option(
            "--mode",
            rich_help_panel=_G_CUT,
            help="What labels mean: regions (tile the whole image) or objects (bright objects "
            "such as nuclei on a dark background, which stays label 0).",
        ),
    ] = "regions",
    object_diameter: Annotated[
        float | None,
        typer.Option(
            "--object-diameter",
            rich_help_panel=_G_OBJ,
            show_default="estimated",
            help="Typical object diameter in pixels (micrometres with --pixel-size).",
        ),
    ] = None,
    pixel_size: Annotated[
        float | None,
        typer.Option(
            "--pixel-size",
            rich_help_panel=_G_OBJ,
            help="Pixel size in micrometres; --object-diameter is then in micrometres.",
        ),
    ] = None,
    exclude_border: Annotated[
        bool,
        typer.Option(
            "--exclude-border",
            rich_help_panel=_G_OBJ,
            help="Drop objects that touch the image border.",
        ),
    ] = False,
    small_objects: Annotated[
        str,
        typer.Option(
            "--small-objects",
            rich_help_panel=_G_OBJ,
            help="Debris below --min-area (default 30 here): drop, or merge into the touching "
            "object.",
        ),
    ] = "drop",
    foreground: Annotated[
        str,
        typer.Option(
            "--foreground",
            rich_help_panel=_G_OBJ,
            help="Foreground threshold: ncut (two-way normalized cut on intensity) or otsu.",
        ),
    ] = "ncut",
    channel: Annotated[
        str | None,
        typer.Option(
            "--channel",
            rich_help_panel=_G_READ,
            metavar="I[,J…]",
            help="Channels to segment, 0-based (e.g. 1 or 0,2). For a plain multi-page TIFF, "
            "reads the pages as channels.",
        ),
    ] = None,
    plane: Annotated[
        str | None,
        typer.Option(
            "--plane",
            rich_help_panel=_G_READ,
            metavar="I|max",
            help="Plane of a z-stack / time series (0-based), or 'max' for the maximum projection.",
        ),
    ] = None,
    max_pixels: Annotated[
        int,
        typer.Option(
            "--max-pixels",
            rich_help_panel=_G_READ,
            help="Refuse images with more pixels (height × width) than this, before decoding.",
        ),
    ] = 100_000_000,
    out: Annotated[
        Path | None,
        typer.Option(
            "--out",
            "-o",
            rich_help_panel=_G_OUT,
            show_default="beside the input",
            help="Output folder (created if missing).",
        ),
    ] = None,
    overwrite: Annotated[
        bool, typer.Option("--overwrite", rich_help_panel=_G_OUT, help="Replace existing outputs.")
    ] = False,
    label_format: Annotated[
        str,
        typer.Option(
            "--label-format",
            rich_help_panel=_G_OUT,
            help="png (8/16-bit) or tiff (for microscopy pipelines, up to 32-bit).",
        ),
    ] = "png",
    fill: Annotated[
        float | None,
        typer.Option(
            "--fill",
            rich_help_panel=_G_OUT,
            metavar="OPACITY",
            help="Wash each region of the overlay in its own colour at this opacity (0–1).",
        ),
    ] = None,
    masks: Annotated[
        bool,
        typer.Option(
            "--masks",
            rich_help_panel=_G_OUT,
            help="Also write one binary PNG per region (NAME.masks/region-0001.png, …).",
        ),
    ] = False,
    eigenvectors: Annotated[
        bool,
        typer.Option(
            "--eigenvectors",
            rich_help_panel=_G_OUT,
            help="Also write NAME.eigenvectors.png: the eigenvectors as colour-mapped panels.",
        ),
    ] = False,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")] = False,
    as_json: Annotated[
        bool, typer.Option("--json", help="Print the run record as JSON on stdout.")
    ] = False,
    debug: Annotated[
        bool, typer.Option("--debug", help="Show the full traceback of an error.")
    ] = False,
) -> None:
    """Segment one image by normalized cuts and write its label image, overlay, region
    table and run record (NAME.labels.png, NAME.overlay.png, NAME.regions.csv, NAME.json)."""
    from imgcut._errors import ImageReadError, OutputExistsError, OutputFolderError
    from imgcut.runner import OptionError, SegmentOptions, process_image

    try:
        try:
            options = SegmentOptions(
                n_regions=_parse_regions(regions),
                max_ncut=max_ncut,
                method=method,
                kway_method=kway_method,
                radius=radius,
                cue=cue,
                sigma_feature=sigma_feature,
                sigma_distance=sigma_distance,
                sigma_edge=sigma_edge,
                min_area=min_area,
                connected=connected,
                solver=solver,
                tol=tol,
                maxiter=maxiter,
                seed=seed,
                n_eigenvectors=n_eigenvectors,
                memory_budget=None if memory_budget is None else _gib(memory_budget),
                mode=mode,
                object_diameter=object_diameter,
                pixel_size=pixel_size,
                exclude_border=exclude_border,
                small_objects=small_objects,
                foreground=foreground,
                channel=_parse_channel(channel),
                plane=_parse_plane(plane),
                max_pixels=max_pixels,
                label_format=label_format,
                fill=fill,
                masks=masks,
                eigenvectors=eigenvectors,
            )
        except OptionError as exc:
            raise _UsageProblem(f"{_FLAGS.get(exc.option, exc.option)} {exc.problem}") from exc

        show_progress = not quiet and sys.stderr.isatty()
        with _progress(show_progress, image.name) as tell:
            report = process_image(image, out, options, overwrite=overwrite, progress=tell)
    except KeyboardInterrupt:
        if debug:
            raise
        raise _fail("interrupted; finished files are complete, none is half-written", 130) from None
    except (
        _UsageProblem,
        FileNotFoundError,
        IsADirectoryError,
        OutputExistsError,
        OutputFolderError,
    ) as exc:
        if debug:
            raise
        raise _fail(str(exc), EXIT_USAGE) from None
    except (ImageReadError, ValueError, MemoryError) as exc:
        if debug:
            raise
        raise _fail(str(exc), EXIT_DATA) from None
    except OSError as exc:  # disk full, permission lost mid-run, …
        if debug:
            raise
        where = exc.filename or image
        raise _fail(f"{where}: {exc.strerror or exc}", EXIT_DATA) from None
    except Exception as exc:  # a failure inside the library: still one line, no traceback
        if debug:
            raise
        text = (str(exc).strip().splitlines() or [""])[0]
        raise _fail(
            f"{image}: {type(exc).__name__}: {text} (rerun with --debug for the traceback)",
            EXIT_DATA,
        ) from None

    if not quiet:
        for line in report.warnings:
            typer.echo(f"imgcut segment: warning: {line}", err=True)
    if as_json:
        typer.echo(json.dumps(_plain(report.record), indent=2))
    if not quiet:
        _summary(report, to_stderr=as_json)


def _gib(value: float) -> int:
    if not value > 0:
        raise _UsageProblem(f"--memory-budget must be > 0 (GiB), got {value}")
    return int(value * 2**30)


def _plain(record: dict[str, Any]) -> Any:
    from imgcut.export import record_to_json

    return json.loads(record_to_json(record))


class _progress:
    """A transient rich spinner with the current stage and elapsed time (stderr only)."""

    def __init__(self, enabled: bool, name: str) -> None:
        self.enabled = enabled
        self.name = name
        self._ctx: Any = nullcontext()
        self._task: Any = None

    def __enter__(self):
        if not self.enabled:
            return None
        from rich.console import Console
        from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

        self._ctx = Progress(
            SpinnerColumn(),
            TextColumn("{task.description}"),
            TimeElapsedColumn(),
            console=Console(stderr=True),
            transient=True,
        )
        progress = self._ctx.__enter__()
        self._task = progress.add_task(f"{self.name}: starting", total=None)

        def tell(stage: str) -> None:
            progress.update(self._task, description=f"{self.name}: {_STAGES.get(stage, stage)}")

        return tell

    def __exit__(self, *exc: Any) -> None:
        self._ctx.__exit__(*exc)


def _summary(report: Any, *, to_stderr: bool) -> None:
    from rich.console import Console

    console = Console(stderr=to_stderr, highlight=False, soft_wrap=True)
    t = report.timings
    shape = "×".join(str(s) for s in report.shape[:2])
    channels = f", {report.shape[2]} channels" if len(report.shape) == 3 else ""
    noun = "object" if report.objects is not None else "region"
    noun += "" if report.regions == 1 else "s"
    console.print(
        f"[bold]{report.source.name}[/]: {report.regions} {noun} ({shape} pixels{channels}) "
        f"in {t['total']:.2f} s — read {t['read']:.2f}, segment {t['segment']:.2f}, "
        f"draw {t['render']:.2f}, write {t['write']:.2f}"
    )
    width = max(len(kind) for kind in report.outputs)
    for kind, path in report.outputs.items():
        console.print(f"  {kind:<{width}}  {path}{'/' if kind == 'masks' else ''}", markup=False)
