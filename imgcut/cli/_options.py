"""Options shared by the imgcut commands: definitions, parsers and one-line errors.

``imgcut segment`` and ``imgcut batch`` take the same segmentation options; they are defined
once here (the signature of :func:`_segmentation_options`) and appended to each command's own
parameters by :func:`with_segmentation_options`, so both commands always share option names,
defaults, help and parsing. :func:`segment_options` turns the parsed values into
:class:`imgcut.runner.SegmentOptions`, naming the user's flag in every error.
"""

from __future__ import annotations

import dataclasses
import inspect
from collections.abc import Callable
from typing import Annotated, Any

import typer
from typer.core import TyperCommand, TyperGroup

from imgcut.runner import AUTO_MAX_NCUT, DEFAULT_REGIONS, DEFAULT_SCALE, SCALES

try:  # typer ≥ 0.20 carries its own copy of click
    from typer._click.exceptions import BadParameter, NoArgsIsHelpError, UsageError
except ImportError:  # pragma: no cover - older typer builds on click itself
    from click.exceptions import BadParameter, NoArgsIsHelpError, UsageError

__all__ = [
    "EXIT_DATA",
    "EXIT_USAGE",
    "EXIT_INTERRUPTED",
    "FLAGS",
    "OneLineErrors",
    "OneLineGroup",
    "PANEL_CUT",
    "PANEL_GRAPH",
    "PANEL_INPUT",
    "PANEL_OBJECTS",
    "PANEL_OUTPUT",
    "UsageProblem",
    "fail",
    "parse_regions",
    "parse_channel",
    "parse_plane",
    "gib",
    "segment_options",
    "with_segmentation_options",
]

EXIT_DATA = 1  # the file is not a usable image, or the segmentation failed on it
EXIT_USAGE = 2  # options, paths or existing outputs: the command as typed cannot run
EXIT_INTERRUPTED = 130  # Ctrl-C or SIGTERM

# SegmentOptions field → the flag that sets it (for error messages in the user's terms)
FLAGS = {
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
    "scale": "--scale",
    "working_pixels": "--working-pixels",
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

# help panels (rich) grouping the options
PANEL_GRAPH = "Graph"
PANEL_CUT = "Partition"
PANEL_INPUT = "Input"
PANEL_OBJECTS = "Objects mode (fluorescence nuclei)"
PANEL_OUTPUT = "Output"


_SCALE_MEANING = {
    "single": "one pixel graph of the given --radius",
    "multi": "coarse-to-fine multiscale graph, less time and memory on large images "
    "(--method kway only)",
    "auto": "multi for k-way cuts of images over 150 000 pixels (method auto picks k-way "
    "there for grey and microscopy images), else single",
}
_SCALE_HELP = (
    "Graph scale: "
    + "; ".join(f"{name}: {_SCALE_MEANING.get(name, 'see imgcut.segment')}" for name in SCALES)
    + "."
)


class UsageProblem(Exception):
    """An option value the command line itself rejects (exit 2)."""


def fail(command: str, message: object, code: int) -> typer.Exit:
    """Print ``imgcut COMMAND: error: MESSAGE`` (first line only) on stderr; return the Exit
    for the caller to raise with ``code``."""
    first = " ".join(str(message).split("\n")[0].split()) or "unknown error"
    who = f"imgcut {command}" if command else "imgcut"
    typer.echo(f"{who}: error: {first}", err=True)
    return typer.Exit(code)


class OneLineErrors(TyperCommand):
    """A command whose usage errors are one line on stderr with exit status 2.

    A value typer cannot convert (``--radius abc``, ``--seed 1.5``), an unknown option, a
    missing value: instead of the usage text and a boxed panel, one line
    ``imgcut COMMAND: error: --radius must be a number, got 'abc'``, as for every other error
    of the command line. ``--help`` and a command typed without arguments still show help.
    """

    def parse_args(self, ctx: Any, args: list[str]) -> list[str]:
        try:
            return super().parse_args(ctx, list(args))
        except NoArgsIsHelpError:
            raise
        except UsageError as exc:
            raise fail(self.name or "", _usage_message(self, exc, args), EXIT_USAGE) from None


class OneLineGroup(TyperGroup):
    """The ``imgcut`` group: an unknown command or option is one line on stderr, exit 2."""

    def parse_args(self, ctx: Any, args: list[str]) -> list[str]:
        try:
            return super().parse_args(ctx, list(args))
        except NoArgsIsHelpError:
            raise
        except UsageError as exc:
            raise fail("", " ".join(exc.format_message().split()), EXIT_USAGE) from None

    def resolve_command(self, ctx: Any, args: list[str]) -> Any:
        try:
            return super().resolve_command(ctx, args)
        except UsageError as exc:
            raise fail("", " ".join(exc.format_message().split()), EXIT_USAGE) from None


def _value_kind(command: Any, name: str | None) -> type | None:
    """``int``, ``float`` or None: the Python type behind the parameter ``name``."""
    import types
    import typing

    try:
        annotation = inspect.signature(command.callback, eval_str=True).parameters[name].annotation
    except (KeyError, TypeError, ValueError, NameError):
        return None
    if typing.get_origin(annotation) is Annotated:
        annotation = typing.get_args(annotation)[0]
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        inner = [a for a in typing.get_args(annotation) if a is not type(None)]
        annotation = inner[0] if len(inner) == 1 else None
    return annotation if annotation in (int, float) else None


def _given_value(args: list[str], opts: list[str]) -> str | None:
    """The last value typed for an option (``--x v``, ``--x=v``), or None."""
    value = None
    for i, token in enumerate(args):
        for opt in opts:
            if token == opt and i + 1 < len(args):
                value = args[i + 1]
            elif opt.startswith("--") and token.startswith(opt + "="):
                value = token[len(opt) + 1 :]
    return value


def _usage_message(command: Any, exc: Any, args: list[str]) -> str:
    """One line naming the option and the problem."""
    param = getattr(exc, "param", None) if isinstance(exc, BadParameter) else None
    opts = [o for o in getattr(param, "opts", []) if o.startswith("-")]
    if not opts:
        return " ".join(exc.format_message().split())
    flag = max(opts, key=len)
    value = _given_value(args, opts)
    kind = _value_kind(command, param.name)
    if value is not None and kind is not None:
        try:
            kind(value)
        except ValueError:
            what = "a whole number" if kind is int else "a number"
            return f"{flag} must be {what}, got {value!r}"
    problem = " ".join(str(exc.message).split()).rstrip(".")
    return f"{flag}: {problem}" + (f", got {value!r}" if value is not None else "")


def _count_or_word(text: str, flag: str, rule: str, low: int, word: str) -> int | str:
    """An integer ≥ ``low`` or the literal ``word`` (any case); else UsageProblem."""
    if text.strip().lower() == word:
        return word
    try:
        value = int(text)
    except ValueError:
        value = None
    if value is None or value < low:
        shown = text.strip() if value is not None else repr(text.strip())
        raise UsageProblem(f"{flag} must be {rule} or '{word}', got {shown}")
    return value


def parse_regions(text: str | None) -> int | str | None:
    """``--regions``: a count ≥ 1, None for 'auto', ``"default"`` when not given.

    Examples
    --------
    >>> parse_regions("12"), parse_regions("AUTO"), parse_regions(None)
    (12, None, 'default')
    >>> parse_regions("0")
    Traceback (most recent call last):
    ...
    imgcut.cli._options.UsageProblem: --regions must be a count ≥ 1 or 'auto', got 0
    """
    if text is None:
        return "default"
    value = _count_or_word(text, "--regions", "a count ≥ 1", 1, "auto")
    return None if value == "auto" else int(value)


def parse_plane(text: str | None) -> int | str | None:
    """``--plane``: an index ≥ 0 or 'max'.

    Examples
    --------
    >>> parse_plane("3"), parse_plane("max"), parse_plane(None)
    (3, 'max', None)
    """
    return None if text is None else _count_or_word(text, "--plane", "an index ≥ 0", 0, "max")


def parse_channel(text: str | None) -> tuple[int, ...] | None:
    """``--channel``: one index or comma-separated indices ≥ 0.

    Examples
    --------
    >>> parse_channel("0,2"), parse_channel("1"), parse_channel(None)
    ((0, 2), (1,), None)
    """
    if text is None:
        return None
    try:
        values = tuple(int(part) for part in text.split(",") if part.strip() != "")
    except ValueError:
        raise UsageProblem(
            f"--channel must be an index or comma-separated indices like 0,2; got {text!r}"
        ) from None
    if not values or any(v < 0 for v in values):
        raise UsageProblem(f"--channel indices must be ≥ 0; got {text!r}")
    return values


def gib(value: float | None) -> int | None:
    """``--memory-budget`` in GiB → bytes (None stays None).

    Examples
    --------
    >>> gib(0.5), gib(None)
    (536870912, None)
    """
    if value is None:
        return None
    if not value > 0:
        raise UsageProblem(f"--memory-budget must be > 0 (GiB), got {value}")
    return int(value * 2**30)


# command-line parameter → (SegmentOptions field, parser)
_CONVERTERS: dict[str, tuple[str, Callable[[Any], Any]]] = {
    "regions": ("n_regions", parse_regions),
    "channel": ("channel", parse_channel),
    "plane": ("plane", parse_plane),
    "memory_budget": ("memory_budget", gib),
}


def segment_options(params: dict[str, Any]) -> Any:
    """:class:`imgcut.runner.SegmentOptions` from parsed command-line values.

    Parameters that are not segmentation options are ignored. Raises :class:`UsageProblem`
    naming the user's flag for any value out of range.

    Examples
    --------
    >>> segment_options({"regions": "auto", "radius": 3.0, "quiet": True}).n_regions is None
    True
    >>> segment_options({"radius": 0.0})
    Traceback (most recent call last):
    ...
    imgcut.cli._options.UsageProblem: --radius must be > 0 (pixels), got 0.0
    """
    from imgcut.runner import OptionError, SegmentOptions

    fields = {f.name for f in dataclasses.fields(SegmentOptions)}
    kwargs = {}
    for name, value in params.items():
        if name in _CONVERTERS:
            field_name, convert = _CONVERTERS[name]
            kwargs[field_name] = convert(value)
        elif name in fields:
            kwargs[name] = value
    try:
        return SegmentOptions(**kwargs)
    except OptionError as exc:
        raise UsageProblem(f"{FLAGS.get(exc.option, exc.option)} {exc.problem}") from exc


def _segmentation_options(
    *,
    regions: Annotated[
        str | None,
        typer.Option(
            "--regions",
            "-k",
            rich_help_panel=PANEL_CUT,
            metavar="N|auto",
            show_default=f"{DEFAULT_REGIONS}; the tuned level with method boundary",
            help="Number of regions to cut the image into, or 'auto': recursive cuts keep "
            "splitting while a cut with Ncut below --max-ncut exists (default threshold "
            f"{AUTO_MAX_NCUT:g}, a rule of thumb: see docs/cli.md), the boundary method takes "
            "its preset's tuned hierarchy level.",
        ),
    ] = None,
    max_ncut: Annotated[
        float | None,
        typer.Option(
            "--max-ncut",
            rich_help_panel=PANEL_CUT,
            help="Make no cut whose normalized-cut value is at or above this (0 < T ≤ 2; "
            f"recursive method; {AUTO_MAX_NCUT:g} with --regions auto).",
        ),
    ] = None,
    method: Annotated[
        str,
        typer.Option(
            "--method",
            rich_help_panel=PANEL_CUT,
            help="auto: boundary for 3-channel colour images (photographs), recursive for them "
            "when a graph option (--radius, --max-ncut, …) is given; for grey and microscopy "
            "images recursive, or kway on the multiscale graph above 150 000 pixels with a "
            "region count; "
            "recursive: repeated two-way normalized cuts, cheapest first; kway: one eigensolve "
            "and a simultaneous partition; boundary: region hierarchy from brightness, colour "
            "and texture boundaries merged greedily (photo preset), N regions or, with "
            "--regions auto, the preset's tuned level. The run record says which ran and why.",
        ),
    ] = "auto",
    kway_method: Annotated[
        str,
        typer.Option(
            "--kway-method",
            rich_help_panel=PANEL_CUT,
            help="With --method kway: discretize (Yu & Shi rotation) or kmeans.",
        ),
    ] = "discretize",
    min_area: Annotated[
        int | None,
        typer.Option(
            "--min-area",
            rich_help_panel=PANEL_CUT,
            help="Smallest region in pixels; smaller fragments merge into their most strongly "
            "connected neighbour. Default: 0.1 % of the image.",
        ),
    ] = None,
    connected: Annotated[
        bool,
        typer.Option(
            "--connected/--classes",
            rich_help_panel=PANEL_CUT,
            help="Make every region one connected patch, or keep the raw cut classes.",
        ),
    ] = True,
    radius: Annotated[
        float | None,
        typer.Option(
            "--radius",
            "-r",
            rich_help_panel=PANEL_GRAPH,
            show_default="5; 3 in objects mode",
            help="Link pixels within this distance (pixels). Time and memory grow with r².",
        ),
    ] = None,
    cue: Annotated[
        str,
        typer.Option(
            "--cue",
            rich_help_panel=PANEL_GRAPH,
            help="Affinity: intensity (colour/brightness similarity × distance), contour "
            "(intervening contour) or combined (their product).",
        ),
    ] = "combined",
    sigma_feature: Annotated[
        float | None,
        typer.Option(
            "--sigma-feature",
            rich_help_panel=PANEL_GRAPH,
            help="Scale of the intensity/colour difference; default from the image.",
        ),
    ] = None,
    sigma_distance: Annotated[
        float | None,
        typer.Option(
            "--sigma-distance",
            rich_help_panel=PANEL_GRAPH,
            help="Scale of the pixel distance; default from the radius.",
        ),
    ] = None,
    sigma_edge: Annotated[
        float | None,
        typer.Option(
            "--sigma-edge",
            rich_help_panel=PANEL_GRAPH,
            help="Scale of the edge strength crossed (contour cue); default from the image.",
        ),
    ] = None,
    solver: Annotated[
        str,
        typer.Option(
            "--solver",
            rich_help_panel=PANEL_GRAPH,
            help=(
                "Eigensolver: auto (dense up to 1000 nodes, above that LOBPCG with a "
                "two-level preconditioner built from the image's edges, Lanczos as "
                "fallback), twolevel, arpack, lobpcg-amg or dense."
            ),
        ),
    ] = "auto",
    scale: Annotated[
        str,
        typer.Option(
            "--scale",
            rich_help_panel=PANEL_GRAPH,
            help=_SCALE_HELP,
        ),
    ] = DEFAULT_SCALE,
    tol: Annotated[
        float | None,
        typer.Option(
            "--tol",
            rich_help_panel=PANEL_GRAPH,
            help="Eigenvector residual tolerance (default: 1e-5 single-scale, 3e-2 multiscale).",
        ),
    ] = None,
    maxiter: Annotated[
        int | None,
        typer.Option("--maxiter", rich_help_panel=PANEL_GRAPH, help="Eigensolver iteration limit."),
    ] = None,
    n_eigenvectors: Annotated[
        int | None,
        typer.Option(
            "--n-eigenvectors",
            rich_help_panel=PANEL_GRAPH,
            help="Eigenvectors solved on the whole image (default: 3 recursive, N k-way).",
        ),
    ] = None,
    memory_budget: Annotated[
        float | None,
        typer.Option(
            "--memory-budget",
            rich_help_panel=PANEL_GRAPH,
            metavar="GIB",
            help="Refuse graphs whose estimated memory exceeds this many GiB (default 4).",
        ),
    ] = None,
    seed: Annotated[
        int,
        typer.Option(
            "--seed",
            rich_help_panel=PANEL_GRAPH,
            help="Seed of every random start; same image + options + seed = same labels.",
        ),
    ] = 0,
    working_pixels: Annotated[
        int | None,
        typer.Option(
            "--working-pixels",
            rich_help_panel=PANEL_CUT,
            metavar="N",
            help="Method boundary: a photograph with more pixels is segmented on a copy of "
            "about N pixels and mapped back with its borders re-drawn at full resolution "
            "(default: 250000, near the size the photo preset was tuned at); 0: full "
            "resolution (slower, more memory).",
        ),
    ] = None,
    mode: Annotated[
        str,
        typer.Option(
            "--mode",
            rich_help_panel=PANEL_CUT,
            help="What labels mean: regions (tile the whole image) or objects (bright objects "
            "such as nuclei on a dark background, which stays label 0).",
        ),
    ] = "regions",
    object_diameter: Annotated[
        float | None,
        typer.Option(
            "--object-diameter",
            rich_help_panel=PANEL_OBJECTS,
            show_default="estimated",
            help="Typical object diameter in pixels (micrometres with --pixel-size).",
        ),
    ] = None,
    pixel_size: Annotated[
        float | None,
        typer.Option(
            "--pixel-size",
            rich_help_panel=PANEL_OBJECTS,
            help="Pixel size in micrometres; --object-diameter is then in micrometres.",
        ),
    ] = None,
    exclude_border: Annotated[
        bool,
        typer.Option(
            "--exclude-border",
            rich_help_panel=PANEL_OBJECTS,
            help="Drop objects that touch the image border.",
        ),
    ] = False,
    small_objects: Annotated[
        str,
        typer.Option(
            "--small-objects",
            rich_help_panel=PANEL_OBJECTS,
            help="Debris below --min-area (default 30 here): drop, or merge into the touching "
            "object.",
        ),
    ] = "drop",
    foreground: Annotated[
        str,
        typer.Option(
            "--foreground",
            rich_help_panel=PANEL_OBJECTS,
            help="Foreground threshold: ncut (two-way normalized cut on intensity) or otsu.",
        ),
    ] = "ncut",
    channel: Annotated[
        str | None,
        typer.Option(
            "--channel",
            rich_help_panel=PANEL_INPUT,
            metavar="I[,J…]",
            help="Channels to segment, 0-based (e.g. 1 or 0,2). For a plain multi-page TIFF, "
            "reads the pages as channels.",
        ),
    ] = None,
    plane: Annotated[
        str | None,
        typer.Option(
            "--plane",
            rich_help_panel=PANEL_INPUT,
            metavar="I|max",
            help="Plane of a z-stack / time series (0-based), or 'max' for the maximum projection.",
        ),
    ] = None,
    max_pixels: Annotated[
        int,
        typer.Option(
            "--max-pixels",
            rich_help_panel=PANEL_INPUT,
            help="Refuse images with more pixels (height × width) than this, before decoding.",
        ),
    ] = 100_000_000,
    label_format: Annotated[
        str,
        typer.Option(
            "--label-format",
            rich_help_panel=PANEL_OUTPUT,
            help="png (8/16-bit) or tiff (for microscopy pipelines, up to 32-bit).",
        ),
    ] = "png",
    fill: Annotated[
        float | None,
        typer.Option(
            "--fill",
            rich_help_panel=PANEL_OUTPUT,
            metavar="OPACITY",
            help="Wash each region of the overlay in its own colour at this opacity (0–1).",
        ),
    ] = None,
    masks: Annotated[
        bool,
        typer.Option(
            "--masks",
            rich_help_panel=PANEL_OUTPUT,
            help="Also write one binary PNG per region (NAME.masks/region-0001.png, …).",
        ),
    ] = False,
    eigenvectors: Annotated[
        bool,
        typer.Option(
            "--eigenvectors",
            rich_help_panel=PANEL_OUTPUT,
            help="Also write NAME.eigenvectors.png: the eigenvectors as colour-mapped panels.",
        ),
    ] = False,
) -> None:
    """The segmentation options of ``imgcut segment`` and ``imgcut batch`` (a signature only)."""


def with_segmentation_options(
    command: Callable[..., None], *, before: int | None = None
) -> Callable[..., None]:
    """``command`` with every segmentation option appended to its own parameters.

    ``command`` takes its own parameters and ``**segment_params``; the returned function has
    a signature typer can read (own parameters, then the shared ones, all keyword-only) and
    passes the shared values on in ``**segment_params``. With ``before=n`` only the first
    ``n`` own parameters come before the shared ones (the rest follow them).
    """
    own = [
        p
        for p in inspect.signature(command, eval_str=True).parameters.values()
        if p.kind is not p.VAR_KEYWORD
    ]
    taken = {p.name for p in own}
    shared = [
        p
        for p in inspect.signature(_segmentation_options, eval_str=True).parameters.values()
        if p.kind is not p.VAR_KEYWORD and p.name not in taken
    ]
    cut = len(own) if before is None else before
    params = [
        p.replace(kind=inspect.Parameter.KEYWORD_ONLY) for p in own[:cut] + shared + own[cut:]
    ]

    def run(**kwargs: Any) -> None:
        own_kwargs = {k: v for k, v in kwargs.items() if k in taken}
        segment_kwargs = {k: v for k, v in kwargs.items() if k not in taken}
        command(**own_kwargs, **segment_kwargs)

    run.__signature__ = inspect.Signature(params)  # type: ignore[attr-defined]
    run.__annotations__ = {p.name: p.annotation for p in params}
    run.__doc__ = command.__doc__
    run.__name__ = command.__name__.lstrip("_")
    run.__wrapped_command__ = command  # type: ignore[attr-defined]
    return run
