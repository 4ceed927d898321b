"""The per-image pipeline shared by ``imgcut segment`` and ``imgcut batch``.

One image goes through three steps, each usable on its own:

1. :func:`compute` — read the file, segment it, render every output to bytes in memory
   (pure: writes nothing, so it can run in a worker process or on a dask worker);
2. :func:`write` — write those bytes under the output folder, each file atomically, the run
   record ``name.json`` last (its presence means the run finished);
3. :func:`up_to_date` — for resuming: a run is current when its record names the same input
   SHA-256 and the same options fingerprint and every output it lists exists.

:func:`process_image` does 1 + 2 for one image, refusing existing outputs (unless
``overwrite``) *before* spending time on the segmentation.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import os
import platform
import tempfile
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

import imgcut
from imgcut._errors import ImageReadError, OutputExistsError, OutputFolderError
from imgcut.export import LABEL_FORMATS, output_names, record_to_json, render_outputs
from imgcut.io import DEFAULT_MAX_PIXELS, atomic_write, read_image, stale_partials
from imgcut.multiscale import AUTO_MULTISCALE_PIXELS as _AUTO_MULTI
from imgcut.segment import auto_scale

__all__ = [
    "CUES",
    "METHODS",
    "MODES",
    "KWAY_METHODS",
    "SMALL_OBJECTS",
    "FOREGROUNDS",
    "AUTO_REGION_CAP",
    "DEFAULT_REGIONS",
    "AUTO_MAX_NCUT",
    "BOUNDARY_PRESET",
    "choose_method",
    "SCALES",
    "DEFAULT_SCALE",
    "OptionError",
    "SegmentOptions",
    "ComputedImage",
    "RunReport",
    "compute",
    "write",
    "process_image",
    "output_paths",
    "check_out_dir",
    "up_to_date",
    "input_sha256",
    "options_fingerprint",
]

#: Region methods: ``auto`` (``boundary`` for 3-channel colour images, else ``recursive``; see
#: :func:`choose_method`), recursive two-way normalized cuts, simultaneous k-way, or
#: ``boundary``: the region hierarchy of :func:`imgcut.hierarchy.image_hierarchy` (boundary
#: strength from brightness, colour and texture gradients, watershed, greedy merging).
METHODS = ("auto", "recursive", "kway", "boundary")
#: Preset of the boundary method (:mod:`imgcut.presets`), tuned on BSDS500 train photographs.
BOUNDARY_PRESET = "photo"
# options only the pixel-graph methods (recursive, kway) use: set away from their defaults,
# they keep ``auto`` on a graph method and are refused by ``boundary``
_GRAPH_ONLY = (
    "max_ncut",
    "kway_method",
    "radius",
    "cue",
    "sigma_feature",
    "sigma_distance",
    "sigma_edge",
    "min_area",
    "connected",
    "solver",
    "tol",
    "maxiter",
    "n_eigenvectors",
    "memory_budget",
    "scale",
    "eigenvectors",
)
#: Affinity cues: intensity/colour similarity, intervening contour, or their product.
CUES = ("combined", "intensity", "contour")
#: What the labels mean: ``regions`` tile the whole image (:func:`imgcut.segment.segment`);
#: ``objects`` are bright objects on a dark background, label 0
#: (:func:`imgcut.objects.segment_objects`, fluorescence nuclei).
MODES = ("regions", "objects")
#: Objects mode: what happens to debris below min_area, and the foreground threshold method.
SMALL_OBJECTS = ("drop", "merge")
FOREGROUNDS = ("ncut", "otsu")
#: k-way assignment of eigenvector rows to classes (method="kway").
KWAY_METHODS = ("discretize", "kmeans")
#: Region count of the pixel-graph methods when ``n_regions="default"`` (the boundary method
#: then uses its preset's tuned hierarchy level instead).
DEFAULT_REGIONS = 8
#: Region cap of the automatic count (n_regions=None): the max_ncut threshold normally
#: stops the recursive splitting long before.
AUTO_REGION_CAP = 64
#: Ncut threshold of the automatic count (n_regions=None, recursive method) when no max_ncut is
#: given. A rule of thumb of this project, not a published value: Ncut = cut/assoc(A) +
#: cut/assoc(B) (Shi & Malik 2000, eq. 2), so below 0.01 each side sends on average under
#: 0.5 % of its affinity across the cut. Measured on our sample images at the default radius,
#: cuts along object outlines cost 0–0.01 and cuts through one shaded or textured area
#: 0.01–0.06 (scene.png and nuclei.tif, half size; see docs/cli.md).
AUTO_MAX_NCUT = 0.01

_RECORD_FORMAT = 1  # bump when the layout of name.json changes


class OptionError(ValueError):
    """An option value is out of range or not one of the valid choices (a usage error).

    ``option`` is the :class:`SegmentOptions` field name and ``problem`` the rest of the
    message, so a command line can name its own flag.
    """

    def __init__(self, option: str, problem: str) -> None:
        super().__init__(f"{option} {problem}")
        self.option = option
        self.problem = problem

    def __reduce__(self) -> tuple[Any, ...]:  # picklable across worker processes
        return (type(self), (self.option, self.problem))


def _scales() -> tuple[str, ...]:
    try:
        from imgcut.segment import SCALES as scales
    except ImportError:  # pragma: no cover - the segment module ships with imgcut
        return ("single",)
    return tuple(scales)


#: Values of ``scale`` (read from :data:`imgcut.segment.SCALES` when this module loads):
#: ``"single"`` one pixel graph, ``"multi"`` the multiscale pencil (k-way only), and any
#: value the library adds.
SCALES: tuple[str, ...] = _scales()
#: ``"auto"`` when the library offers it (it then picks the scale per image), else ``"single"``.
DEFAULT_SCALE = "auto" if "auto" in SCALES else "single"


def _solvers() -> tuple[str, ...]:
    try:
        from imgcut.spectral import SOLVERS
    except ImportError:  # pragma: no cover - the spectral module ships with imgcut
        return ("auto",)
    return tuple(SOLVERS)


@dataclass(frozen=True)
class SegmentOptions:
    """Every choice that shapes the outputs of one image (and so its fingerprint).

    ``mode="regions"`` (passed to :func:`imgcut.segment.segment`, which documents each):
    ``n_regions`` (a count; None = automatic: recursive cuts split while a cut below
    ``max_ncut`` exists, up to `AUTO_REGION_CAP`, ``max_ncut`` then defaulting to
    `AUTO_MAX_NCUT`, and the boundary method takes its preset's tuned level; ``"default"``:
    `DEFAULT_REGIONS` for the pixel-graph methods, the tuned level for boundary), ``max_ncut``
    (recursive method only), ``method``, ``kway_method``,
    ``radius``, ``cue``, ``sigma_feature``, ``sigma_distance``, ``sigma_edge``, ``min_area``,
    ``connected``, ``solver``, ``tol``, ``maxiter``, ``seed``, ``n_eigenvectors``,
    ``memory_budget`` (bytes), ``scale`` (one of `SCALES`; ``"multi"`` needs method kway),
    ``working_pixels`` (method boundary: the working size of large photographs, None = the
    preset's, 0 = full resolution; see :mod:`imgcut.working_scale`).
    ``mode="objects"`` (passed to :func:`imgcut.objects.segment_objects`): ``object_diameter``,
    ``pixel_size``, ``min_area``, ``small_objects``, ``exclude_border``, ``foreground``,
    ``max_ncut``, ``radius``, ``seed``; the other segmentation fields are not used.
    None always means the library's default for the mode (e.g. radius 5 for regions, 3 for
    objects).
    Reading (:func:`imgcut.io.read_image`): ``channel``, ``plane``, ``max_pixels``.
    Export (:mod:`imgcut.export`): ``label_format``, ``fill``, ``masks``, ``eigenvectors``.

    Raises
    ------
    OptionError
        On construction, for any value out of range, naming the valid values.

    Examples
    --------
    >>> SegmentOptions(n_regions=4, radius=3).segment_kwargs()["n_regions"]
    4
    >>> SegmentOptions(radius=0)
    Traceback (most recent call last):
    ...
    imgcut.runner.OptionError: radius must be > 0 (pixels), got 0
    """

    n_regions: int | str | None = "default"
    max_ncut: float | None = None
    method: str = "auto"
    kway_method: str = "discretize"
    radius: float | None = None
    cue: str = "combined"
    sigma_feature: float | None = None
    sigma_distance: float | None = None
    sigma_edge: float | None = None
    min_area: int | None = None
    connected: bool = True
    solver: str = "auto"
    tol: float | None = None
    maxiter: int | None = None
    seed: int | None = 0
    n_eigenvectors: int | None = None
    memory_budget: int | None = None
    scale: str = DEFAULT_SCALE
    working_pixels: int | None = None
    mode: str = "regions"
    object_diameter: float | None = None
    pixel_size: float | None = None
    exclude_border: bool = False
    small_objects: str = "drop"
    foreground: str = "ncut"
    channel: tuple[int, ...] | None = None
    plane: int | str | None = None
    max_pixels: int = DEFAULT_MAX_PIXELS
    label_format: str = "png"
    fill: float | None = None
    masks: bool = False
    eigenvectors: bool = False

    def __post_init__(self) -> None:
        if self.channel is not None and not isinstance(self.channel, tuple):
            ch = self.channel
            object.__setattr__(self, "channel", (ch,) if isinstance(ch, int) else tuple(ch))
        if (
            self.n_regions is None
            and self.max_ncut is None
            and self.mode == "regions"
            and self.method == "recursive"
        ):  # the automatic count stops at a threshold: the default one, stored with the options
            object.__setattr__(self, "max_ncut", AUTO_MAX_NCUT)
        _check(self)

    def graph_options_set(self) -> list[str]:
        """Names of the options only the pixel-graph methods use that differ from their
        defaults (they keep ``method="auto"`` on a graph method)."""
        defaults = {f.name: f.default for f in dataclasses.fields(self)}
        return [name for name in _GRAPH_ONLY if getattr(self, name) != defaults[name]]

    def segment_kwargs(self, method: str | None = None) -> dict[str, Any]:
        """Keyword arguments for the library function of the mode: :func:`imgcut.segment.segment`
        (regions) or :func:`imgcut.objects.segment_objects` (objects). Unset (None) options
        are left out, so the library's defaults apply.

        ``method`` is the method chosen for the image (:func:`choose_method`); by default
        ``self.method``, with ``"auto"`` taken as ``"recursive"`` (its choice for any image
        that is not 3-channel colour). With the automatic count (``n_regions=None``) and no
        ``max_ncut``, recursive cuts stop at `AUTO_MAX_NCUT`."""
        if self.mode == "objects":
            kwargs: dict[str, Any] = {
                "object_diameter": self.object_diameter,
                "pixel_size": self.pixel_size,
                "small_objects": self.small_objects,
                "exclude_border": self.exclude_border,
                "foreground": self.foreground,
                "seed": self.seed,
            }
            optional = {"min_area": self.min_area, "max_ncut": self.max_ncut, "radius": self.radius}
        else:
            method = method or self.method
            method = "recursive" if method == "auto" else method
            if method == "boundary":
                raise ValueError("method 'boundary' does not call imgcut.segment.segment")
            max_ncut = self.max_ncut
            if self.n_regions is None and max_ncut is None and method == "recursive":
                max_ncut = AUTO_MAX_NCUT
            n_regions = self.n_regions
            if n_regions == "default":
                n_regions = DEFAULT_REGIONS
            kwargs = {
                "n_regions": AUTO_REGION_CAP if n_regions is None else n_regions,
                "method": method,
                "kway_method": self.kway_method,
                "cue": self.cue,
                "sigma_feature": self.sigma_feature,
                "sigma_distance": self.sigma_distance,
                "sigma_edge": self.sigma_edge,
                "max_ncut": max_ncut,
                "min_area": self.min_area,
                "connected": self.connected,
                "solver": self.solver,
                "tol": self.tol,
                "maxiter": self.maxiter,
                "seed": self.seed,
                "n_eigenvectors": self.n_eigenvectors,
                "scale": self.scale,
            }
            optional = {"radius": self.radius, "memory_budget": self.memory_budget}
        kwargs.update({k: v for k, v in optional.items() if v is not None})
        return kwargs

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict of every field."""
        out = dataclasses.asdict(self)
        out["channel"] = None if self.channel is None else list(self.channel)
        return out

    @classmethod
    def from_dict(cls, values: dict[str, Any]) -> SegmentOptions:
        """Inverse of :meth:`to_dict` (unknown keys raise OptionError)."""
        names = {f.name for f in dataclasses.fields(cls)}
        unknown = sorted(set(values) - names)
        if unknown:
            raise OptionError(unknown[0], "is not an option of SegmentOptions")
        values = dict(values)
        if values.get("channel") is not None:
            values["channel"] = tuple(values["channel"])
        return cls(**values)

    def fingerprint(self) -> str:
        """SHA-256 (hex) of the options and the imgcut version; see :func:`options_fingerprint`."""
        return options_fingerprint(self)


def _check(o: SegmentOptions) -> None:
    def need(ok: bool, option: str, rule: str, value: Any) -> None:
        if not ok:
            raise OptionError(option, f"must be {rule}, got {value!r}")

    def number(value: Any) -> bool:
        return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(
            value, bool
        )

    def integer(value: Any, low: int) -> bool:
        return isinstance(value, (int, np.integer)) and not isinstance(value, bool) and value >= low

    def choice(option: str, valid: tuple[str, ...]) -> None:
        need(getattr(o, option) in valid, option, f"one of {', '.join(valid)}", getattr(o, option))

    if o.n_regions is None:
        need(
            o.method != "kway" or o.mode != "regions",
            "n_regions",
            "a count ≥ 1 with method kway (the automatic count needs method recursive, "
            "boundary or auto)",
            None,
        )
    elif o.n_regions != "default":
        need(integer(o.n_regions, 1), "n_regions", "an integer ≥ 1", o.n_regions)
    if o.max_ncut is not None:
        need(
            number(o.max_ncut) and 0 < o.max_ncut <= 2,
            "max_ncut",
            "in (0, 2] (normalized cut values lie in [0, 2])",
            o.max_ncut,
        )
    choice("method", METHODS)
    choice("kway_method", KWAY_METHODS)
    if o.max_ncut is not None and o.mode == "regions":
        need(
            o.method in ("recursive", "auto"),
            "max_ncut",
            "used with method recursive only",
            o.method,
        )
    need(isinstance(o.connected, (bool, np.bool_)), "connected", "True or False", o.connected)
    need(
        o.radius is None or (number(o.radius) and np.isfinite(o.radius) and o.radius > 0),
        "radius",
        "> 0 (pixels)",
        o.radius,
    )
    choice("cue", CUES)
    for name in ("sigma_feature", "sigma_distance", "sigma_edge"):
        v = getattr(o, name)
        need(
            v is None or (number(v) and np.isfinite(v) and v > 0),
            name,
            "> 0 (or unset for the automatic value)",
            v,
        )
    need(
        o.min_area is None or integer(o.min_area, 1),
        "min_area",
        "an integer ≥ 1 (pixels)",
        o.min_area,
    )
    choice("solver", _solvers())
    need(o.tol is None or (number(o.tol) and 0 < o.tol < 1), "tol", "in (0, 1)", o.tol)
    need(o.maxiter is None or integer(o.maxiter, 1), "maxiter", "an integer ≥ 1", o.maxiter)
    need(o.seed is None or integer(o.seed, 0), "seed", "an integer ≥ 0", o.seed)
    need(
        o.n_eigenvectors is None or integer(o.n_eigenvectors, 2),
        "n_eigenvectors",
        "an integer ≥ 2",
        o.n_eigenvectors,
    )
    if o.method == "kway" and o.n_eigenvectors is not None and o.n_regions is not None:
        count = DEFAULT_REGIONS if o.n_regions == "default" else o.n_regions
        need(
            o.n_eigenvectors >= count,
            "n_eigenvectors",
            f"≥ the number of regions ({count}) with method kway",
            o.n_eigenvectors,
        )
    need(
        o.memory_budget is None or integer(o.memory_budget, 1),
        "memory_budget",
        "a number of bytes ≥ 1",
        o.memory_budget,
    )
    choice("scale", SCALES)
    if o.method == "boundary" and o.mode == "regions":
        unused = o.graph_options_set()
        if unused:
            raise OptionError(
                unused[0],
                "is not used by method boundary (it builds no pixel graph); drop it or choose "
                "method recursive or kway",
            )
    if o.scale == "multi" and (o.mode != "regions" or o.method != "kway"):
        what = f"mode {o.mode}" if o.mode != "regions" else f"method {o.method}"
        raise OptionError(
            "scale",
            f"multi needs mode regions with method kway (the multiscale eigenvectors are "
            f"partitioned k-way in one step), got {what}",
        )
    choice("mode", MODES)
    choice("small_objects", SMALL_OBJECTS)
    choice("foreground", FOREGROUNDS)
    for name in ("object_diameter", "pixel_size"):
        v = getattr(o, name)
        need(v is None or (number(v) and np.isfinite(v) and v > 0), name, "> 0", v)
    need(
        isinstance(o.exclude_border, (bool, np.bool_)),
        "exclude_border",
        "True or False",
        o.exclude_border,
    )
    if o.mode != "objects":
        for name, default in (
            ("object_diameter", None),
            ("pixel_size", None),
            ("exclude_border", False),
            ("small_objects", "drop"),
            ("foreground", "ncut"),
        ):
            need(getattr(o, name) == default, name, "used with mode objects only", getattr(o, name))
    else:
        need(
            not o.eigenvectors,
            "eigenvectors",
            "used with mode regions only (objects mode keeps no whole-image eigenvectors)",
            o.eigenvectors,
        )
        need(
            o.pixel_size is None or o.object_diameter is not None,
            "pixel_size",
            "given together with object_diameter (in micrometres)",
            o.pixel_size,
        )
    need(
        o.channel is None or (len(o.channel) > 0 and all(integer(c, 0) for c in o.channel)),
        "channel",
        "indices ≥ 0",
        o.channel,
    )
    need(
        o.plane is None or o.plane == "max" or integer(o.plane, 0),
        "plane",
        "an index ≥ 0 or 'max'",
        o.plane,
    )
    need(integer(o.max_pixels, 1), "max_pixels", "an integer ≥ 1", o.max_pixels)
    if o.working_pixels is not None:
        need(
            integer(o.working_pixels, 0),
            "working_pixels",
            "an integer ≥ 0 (0: full resolution)",
            o.working_pixels,
        )
        need(
            o.mode == "regions" and o.method in ("auto", "boundary"),
            "working_pixels",
            "used by method boundary only (with --method auto or boundary, mode regions)",
            o.working_pixels,
        )
    choice("label_format", LABEL_FORMATS)
    need(
        o.fill is None or (number(o.fill) and 0 <= o.fill <= 1),
        "fill",
        "an opacity in [0, 1]",
        o.fill,
    )


def input_sha256(path: str | os.PathLike[str]) -> str:
    """SHA-256 (hex) of a file's bytes, read in 1 MiB chunks.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a"; _ = p.write_bytes(b"abc")
    >>> input_sha256(p)[:16]
    'ba7816bf8f01cfea'
    """
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def options_fingerprint(options: SegmentOptions) -> str:
    """SHA-256 (hex) of the canonical JSON of the options plus the imgcut version.

    Two runs with equal fingerprints on inputs with equal SHA-256 produce the same outputs
    (segmentation is deterministic for a fixed seed), so a batch may skip the second. The
    version is included because a new release may segment differently.

    Examples
    --------
    >>> options_fingerprint(SegmentOptions()) == options_fingerprint(SegmentOptions())
    True
    >>> options_fingerprint(SegmentOptions()) == options_fingerprint(SegmentOptions(seed=1))
    False
    """
    payload = {
        "imgcut": imgcut.__version__,
        "record_format": _RECORD_FORMAT,
        "options": options.to_dict(),
    }
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------------------------
# results


@dataclass
class ComputedImage:
    """Everything :func:`compute` made for one image, ready to be written (picklable).

    Attributes
    ----------
    source : Path
        The input file.
    stem : str
        Base name of the outputs (input name without its last suffix).
    options : SegmentOptions
    files : dict
        Relative output name → bytes, without the run record.
    record : dict
        The run record so far (no write timing, no output list yet).
    regions : int
        Number of labels 1..K.
    objects : int or None
        Number of objects in an objects mode, else None.
    shape : tuple of int
        Shape of the segmented array.
    seconds : float
        Wall time of compute.
    warnings : list of str
        One line per warning raised while segmenting.
    labels : numpy.ndarray or None
        The label image (kept only when asked; not needed to write).
    """

    source: Path
    stem: str
    options: SegmentOptions
    files: dict[str, bytes]
    record: dict[str, Any]
    regions: int
    objects: int | None
    shape: tuple[int, ...]
    seconds: float
    warnings: list[str] = field(default_factory=list)
    labels: np.ndarray | None = None


@dataclass
class RunReport:
    """What one run of the pipeline did.

    Attributes
    ----------
    source : Path
    out_dir : Path
    outputs : dict
        kind → path: ``labels``, ``overlay``, ``regions``, ``record`` and, when asked,
        ``masks`` (the folder) and ``eigenvectors``.
    files : list of Path
        Every file written, the record last.
    regions : int
    objects : int or None
    shape : tuple of int
    seconds : float
        Wall time of compute + write.
    timings : dict
        Seconds per stage (``read``, ``segment``, ``render``, ``write``, ``total``, plus the
        library's own stage timings under ``segment_stages``).
    input_sha256 : str
    fingerprint : str
    warnings : list of str
    record : dict
        The run record as written to ``name.json``.
    """

    source: Path
    out_dir: Path
    outputs: dict[str, Path]
    files: list[Path]
    regions: int
    objects: int | None
    shape: tuple[int, ...]
    seconds: float
    timings: dict[str, Any]
    input_sha256: str
    fingerprint: str
    warnings: list[str]
    record: dict[str, Any]


# --------------------------------------------------------------------------------------------
# the steps


def choose_method(options: SegmentOptions, shape: tuple[int, ...]) -> tuple[str, str]:
    """The region method that runs on an image of ``shape``, and why.

    ``method="auto"`` picks ``"boundary"`` for a 3-channel colour image (a photograph: the
    boundary hierarchy gives the best segmentations of natural images measured in
    ``docs/benchmarks.md``) unless an option only the pixel-graph methods use is set (then
    ``"recursive"``), and ``"recursive"`` for grey and other multichannel images
    (microscopy), where the normalized cut of the pixel graph is the established method here.
    Any other method is used as asked.

    Parameters
    ----------
    options : SegmentOptions
    shape : tuple of int
        Shape of the image to segment, ``(H, W)`` or ``(H, W, C)``.

    Returns
    -------
    method : str
        ``"recursive"``, ``"kway"`` or ``"boundary"`` (``"objects"`` in objects mode).
    reason : str
        One sentence for the run record.

    Examples
    --------
    >>> choose_method(SegmentOptions(), (40, 60, 3))[0]
    'boundary'
    >>> choose_method(SegmentOptions(), (40, 60))[0]
    'recursive'
    >>> choose_method(SegmentOptions(radius=3), (40, 60, 3))
    ('recursive', 'colour image, but radius is set, an option of the pixel-graph methods')
    """
    if options.mode == "objects":
        return "objects", "objects mode: imgcut.objects.segment_objects"
    if options.method != "auto":
        return options.method, f"method {options.method} was asked for"
    if len(shape) != 3 or shape[2] != 3:
        what = "grey" if len(shape) == 2 else f"{shape[2]}-channel"
        pixels = int(shape[0]) * int(shape[1])
        large = auto_scale(shape[:2], "kway") == "multi"  # the library's own rule
        if options.scale == "auto" and options.n_regions is not None and large:
            return (
                "kway",
                f"{what} image of {pixels} pixels (over {_AUTO_MULTI}): k-way normalized cut "
                "on the multiscale graph, the default for large images",
            )
        return (
            "recursive",
            f"{what} image: recursive normalized cuts, the default for grey and microscopy images",
        )
    graph = options.graph_options_set()
    if graph:
        names = ", ".join(graph)
        verb = "is" if len(graph) == 1 else "are"
        return (
            "recursive",
            f"colour image, but {names} {verb} set, an option of the pixel-graph methods",
        )
    return (
        "boundary",
        "3-channel colour image: boundary hierarchy with the photo preset, the best "
        "setting on natural photographs (docs/benchmarks.md)",
    )


@dataclass
class _BoundarySegmentation:
    """Result of the boundary method, shaped like the library's results for :func:`compute`."""

    labels: np.ndarray
    record: dict[str, Any]

    def to_record(self) -> dict[str, Any]:
        return self.record


def _boundary_model_record(image: np.ndarray, preset) -> dict[str, Any] | None:
    """Which learned boundary model the hierarchy used (None: the preset has none)."""
    if not preset.boundary_model:
        return None
    from imgcut.boundary_model import load_boundary_model, model_applies, model_digest
    from imgcut.cues import channel_names

    model = load_boundary_model(preset.boundary_model)
    return {
        "name": preset.boundary_model,
        "sha256": model_digest(preset.boundary_model),
        # False: the image lacks cue channels the model reads (grey or non-RGB under the
        # photo model), and the preset's hand cue weights were used
        "applied": model_applies(model, channel_names(image.shape, preset.colour_space)),
    }


def _boundary_segment(image: np.ndarray, options: SegmentOptions) -> _BoundarySegmentation:
    """Labels from the region hierarchy: ``n_regions`` regions, or (automatic count or no
    count given) the preset's tuned level."""
    from imgcut.hierarchy import image_hierarchy
    from imgcut.presets import get_preset
    from imgcut.working_scale import working_scale

    preset = get_preset(BOUNDARY_PRESET)
    if options.working_pixels is not None:
        preset = get_preset(preset, working_pixels=options.working_pixels)
    start = time.perf_counter()
    hierarchy = image_hierarchy(image, preset=preset, seed=options.seed)
    built = time.perf_counter()
    if options.n_regions in (None, "default"):  # the preset's tuned level
        level = hierarchy.default_level
        labels = hierarchy.labels_at(level)
    else:
        labels = hierarchy.labels_with(options.n_regions)
        level = None
    record = {
        "method": "boundary",
        "preset": BOUNDARY_PRESET,
        "preset_params": preset.as_dict(),
        "level": level,
        "n_regions_asked": options.n_regions,
        "n_regions": int(labels.max()) if labels.size else 0,
        "n_base_regions": hierarchy.n_base,
        # < 1: the hierarchy was built on a copy of the image resampled by this factor
        # (the preset's working_pixels) and its borders re-drawn at full resolution
        "working_scale": working_scale(image.shape, preset.working_pixels),
        "boundary_model": _boundary_model_record(image, preset),
        "timings": {
            "hierarchy": built - start,
            "labels": time.perf_counter() - built,
        },
    }
    return _BoundarySegmentation(labels=np.asarray(labels, dtype=np.int32), record=record)


def _segment(image: np.ndarray, options: SegmentOptions, method: str) -> Any:
    """Call the library function of the mode and method."""
    if options.mode == "objects":
        from imgcut.objects import segment_objects

        return segment_objects(image, **options.segment_kwargs())
    if method == "boundary":
        return _boundary_segment(image, options)
    from imgcut.segment import segment

    return segment(image, **options.segment_kwargs(method))


def _noop(stage: str) -> None:
    return None


def compute(
    path: str | os.PathLike[str],
    options: SegmentOptions | None = None,
    *,
    progress: Callable[[str], None] | None = None,
    keep_labels: bool = False,
) -> ComputedImage:
    """Read, segment and render one image; write nothing.

    Parameters
    ----------
    path : str or os.PathLike
        The input image.
    options : SegmentOptions, optional
        Default ``SegmentOptions()``.
    progress : callable, optional
        Called with ``"read"``, ``"segment"``, ``"render"`` as each stage starts.
    keep_labels : bool, default False
        Keep the label array in the result (for callers that inspect it).

    Returns
    -------
    ComputedImage

    Raises
    ------
    FileNotFoundError, IsADirectoryError
        The input is missing or a folder.
    ImageReadError
        The file is not a readable image (see :func:`imgcut.io.read_image`) or has fewer
        than 2 pixels.
    ValueError, MemoryError
        The segmentation refused the image (message prefixed with the file name).
    """
    options = options or SegmentOptions()
    tell = progress or _noop
    source = Path(path)
    start = time.perf_counter()

    tell("read")
    loaded = read_image(
        source, channel=options.channel, plane=options.plane, max_pixels=options.max_pixels
    )
    sha = input_sha256(source)
    image = loaded.pixels
    h, w = image.shape[:2]
    if h * w < 2:
        raise ImageReadError(f"{source}: image is {h}×{w} pixel; segmentation needs at least 2")
    if options.mode == "objects" and image.ndim == 3:
        raise ImageReadError(
            f"{source}: objects mode segments one channel and the image has "
            f"{image.shape[2]}; choose one with --channel"
        )
    t_read = time.perf_counter()

    tell("segment")
    method, reason = choose_method(options, image.shape)
    caught: list[str] = []
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        try:
            seg = _segment(image, options, method)
        except (ValueError, MemoryError) as exc:
            text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise (
                type(exc)(f"{source}: {text}")
                if _plain_ctor(exc)
                else ValueError(f"{source}: {text}")
            ) from exc
    for w_ in seen:
        line = f"{w_.category.__name__}: {str(w_.message).strip().splitlines()[0]}"
        if line not in caught:
            caught.append(line)
    labels = np.asarray(seg.labels)
    t_seg = time.perf_counter()

    tell("render")
    eigvecs = getattr(seg, "eigenvectors", None) if options.eigenvectors else None
    files = render_outputs(
        source.stem,
        image,
        labels,
        eigenvectors=eigvecs,
        eigenvalues=getattr(seg, "eigenvalues", None),
        label_format=options.label_format,
        fill=options.fill,
        masks=options.masks,
        eigenvector_grid=options.eigenvectors,
    )
    t_render = time.perf_counter()

    regions = int(labels.max()) if labels.size else 0
    objects = regions if options.mode == "objects" else None
    seg_record = seg.to_record() if hasattr(seg, "to_record") else {}
    record: dict[str, Any] = {
        "record_format": _RECORD_FORMAT,
        "imgcut_version": imgcut.__version__,
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "input": {
            "name": source.name,
            "path": str(source),
            "sha256": sha,
            "bytes": source.stat().st_size,
            **{k: v for k, v in loaded.to_record().items() if k != "path"},
        },
        "options": options.to_dict(),
        "options_fingerprint": options_fingerprint(options),
        "method": _method_record(options, method, reason),
        "result": {
            "regions": regions,
            "objects": objects,
            "labelled_pixels": int(np.count_nonzero(labels)),
            "image_pixels": int(labels.size),
        },
        "segmentation": seg_record,
        "warnings": caught,
        "timings": {
            "read": t_read - start,
            "segment": t_seg - t_read,
            "render": t_render - t_seg,
        },
        "environment": _environment(),
    }
    return ComputedImage(
        source=source,
        stem=source.stem,
        options=options,
        files=files,
        record=record,
        regions=regions,
        objects=objects,
        shape=tuple(image.shape),
        seconds=t_render - start,
        warnings=caught,
        labels=labels if keep_labels else None,
    )


def _method_record(options: SegmentOptions, method: str, reason: str) -> dict[str, Any]:
    """Which method ran and why (and the Ncut threshold recursive cuts stopped at)."""
    out: dict[str, Any] = {"asked": options.method, "used": method, "reason": reason}
    if method in ("recursive", "kway"):
        kwargs = options.segment_kwargs(method)
        out["n_regions"] = kwargs["n_regions"]
        out["max_ncut"] = kwargs["max_ncut"]
    return out


def _plain_ctor(exc: BaseException) -> bool:
    """True when ``type(exc)(message)`` rebuilds the exception faithfully."""
    try:
        rebuilt = type(exc)("x")
    except Exception:
        return False
    return str(rebuilt) == "x"


def _environment() -> dict[str, str]:
    import scipy

    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "platform": platform.platform(terse=True),
    }


def output_paths(
    path: str | os.PathLike[str],
    out_dir: str | os.PathLike[str] | None = None,
    options: SegmentOptions | None = None,
) -> dict[str, Path]:
    """Where the outputs of ``path`` go: kind → path (see :func:`imgcut.export.output_names`).

    ``out_dir`` defaults to the input's own folder.

    Examples
    --------
    >>> output_paths("data/cells.tif", "out")["labels"].as_posix()
    'out/cells.labels.png'
    """
    options = options or SegmentOptions()
    source = Path(path)
    folder = Path(out_dir) if out_dir is not None else source.parent
    names = output_names(
        source.stem,
        label_format=options.label_format,
        masks=options.masks,
        eigenvectors=options.eigenvectors,
    )
    return {kind: folder / name for kind, name in names.items()}


def _existing_outputs(paths: dict[str, Path]) -> list[Path]:
    found = []
    for kind, p in paths.items():
        if kind == "masks":
            if p.is_dir():
                found.extend(sorted(p.glob("region-*.png"))[:1])
            elif p.exists():
                found.append(p)
        elif p.exists():
            found.append(p)
    return found


def _refuse_existing(paths: dict[str, Path]) -> None:
    existing = _existing_outputs(paths)
    if existing:
        raise OutputExistsError(f"{existing[0]}: already exists (use --overwrite to replace it)")


def check_out_dir(out_dir: str | os.PathLike[str]) -> None:
    """Raise OutputFolderError unless ``out_dir`` is, or can be made, a writable folder.

    Creates nothing that stays: an existing folder is probed with a temporary file; a
    missing one is judged by its nearest existing parent.
    """
    folder = Path(out_dir)
    probe_dir = folder
    while not probe_dir.exists():
        if probe_dir.parent == probe_dir:
            break
        probe_dir = probe_dir.parent
    if probe_dir.exists() and not probe_dir.is_dir():
        what = "is not a folder"
        if probe_dir != folder:
            what = f"cannot be made ({probe_dir} is a file)"
        raise OutputFolderError(f"{folder}: output folder {what}")
    try:
        fd, name = tempfile.mkstemp(dir=probe_dir, prefix=".imgcut-probe-")
        os.close(fd)
        os.unlink(name)
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        raise OutputFolderError(f"{folder}: output folder is not writable ({reason})") from exc


def write(
    computed: ComputedImage,
    out_dir: str | os.PathLike[str] | None = None,
    *,
    overwrite: bool = False,
    extra: dict[str, Any] | None = None,
    progress: Callable[[str], None] | None = None,
) -> RunReport:
    """Write a :class:`ComputedImage` under ``out_dir``; the run record goes last.

    Parameters
    ----------
    computed : ComputedImage
    out_dir : str or os.PathLike, optional
        Created if missing; default the input's folder.
    overwrite : bool, default False
        Replace existing outputs (stale ``region-*.png`` masks of an earlier run with more
        regions are removed). Without it an existing output raises OutputExistsError and
        nothing is written.
    extra : dict, optional
        Added to the run record under ``"run"`` (e.g. the batch's peak memory and worker).
    progress : callable, optional
        Called with ``"write"``.

    Returns
    -------
    RunReport

    Raises
    ------
    OutputExistsError, OutputFolderError
    """
    tell = progress or _noop
    tell("write")
    start = time.perf_counter()
    options = computed.options
    paths = output_paths(computed.source, out_dir, options)
    folder = paths["record"].parent
    check_out_dir(folder)
    if not overwrite:
        _refuse_existing(paths)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputFolderError(
            f"{folder}: output folder cannot be made ({exc.strerror or type(exc).__name__})"
        ) from exc
    for p in paths.values():  # leftovers of an interrupted earlier run
        for stale in stale_partials(p):
            with contextlib.suppress(OSError):
                stale.unlink()

    written: list[Path] = []
    for name, data in computed.files.items():
        target = folder / name
        target.parent.mkdir(parents=True, exist_ok=True)
        written.append(atomic_write(target, data, overwrite=True))
    if options.masks and overwrite:
        keep = set(written)
        for old in paths["masks"].glob("region-*.png"):
            if old not in keep:
                with contextlib.suppress(OSError):
                    old.unlink()

    record = dict(computed.record)
    timings = dict(record.get("timings", {}))
    timings["write"] = time.perf_counter() - start
    timings["total"] = sum(
        v for k, v in timings.items() if k in ("read", "segment", "render", "write")
    )
    record["timings"] = timings
    record["outputs"] = {kind: p.relative_to(folder).as_posix() for kind, p in paths.items()}
    if options.masks:
        record["outputs"]["mask_files"] = [
            p.relative_to(folder).as_posix() for p in written if p.parent == paths["masks"]
        ]
    if extra:
        record["run"] = dict(extra)
    written.append(atomic_write(paths["record"], record_to_json(record), overwrite=True))
    seg_timings = (
        record.get("segmentation", {}).get("timings")
        if isinstance(record.get("segmentation"), dict)
        else None
    )
    report_timings = dict(timings)
    if seg_timings:
        report_timings["segment_stages"] = seg_timings
    return RunReport(
        source=computed.source,
        out_dir=folder,
        outputs=paths,
        files=written,
        regions=computed.regions,
        objects=computed.objects,
        shape=computed.shape,
        seconds=timings["total"],
        timings=report_timings,
        input_sha256=record["input"]["sha256"],
        fingerprint=record["options_fingerprint"],
        warnings=list(computed.warnings),
        record=record,
    )


def process_image(
    path: str | os.PathLike[str],
    out_dir: str | os.PathLike[str] | None = None,
    options: SegmentOptions | None = None,
    *,
    overwrite: bool = False,
    progress: Callable[[str], None] | None = None,
) -> RunReport:
    """Segment one image file and write all its outputs.

    Parameters
    ----------
    path : str or os.PathLike
        Input image (PNG, JPEG, TIFF, BMP).
    out_dir : str or os.PathLike, optional
        Output folder, created if missing; default the input's folder.
    options : SegmentOptions, optional
    overwrite : bool, default False
        Replace existing outputs; otherwise they are refused before any work is done.
    progress : callable, optional
        Called with the name of each stage as it starts: read, segment, render, write.

    Returns
    -------
    RunReport

    Raises
    ------
    FileNotFoundError, IsADirectoryError
        Input missing or a folder (usage errors).
    OutputExistsError, OutputFolderError
        Outputs exist without ``overwrite``; output folder not usable (usage errors).
    ImageReadError
        Not a readable image, too large, NaN/inf, bad plane/channel (data errors).
    ValueError, MemoryError
        The segmentation refused the image (data errors).

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> from PIL import Image
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> img = np.zeros((12, 16), np.uint8); img[:, 8:] = 200
    >>> Image.fromarray(img).save(folder / "two.png")
    >>> report = process_image(folder / "two.png", folder / "out", SegmentOptions(n_regions=2))
    >>> report.regions, sorted(p.name for p in (folder / "out").iterdir())
    (2, ['two.json', 'two.labels.png', 'two.overlay.png', 'two.regions.csv'])
    """
    options = options or SegmentOptions()
    source = Path(path)
    if not source.exists():
        raise FileNotFoundError(f"{source}: no such file")
    if source.is_dir():
        raise IsADirectoryError(f"{source}: is a folder, not an image file")
    paths = output_paths(source, out_dir, options)
    check_out_dir(paths["record"].parent)
    if not overwrite:
        _refuse_existing(paths)
    computed = compute(source, options, progress=progress)
    return write(computed, out_dir, overwrite=overwrite, progress=progress)


def up_to_date(
    path: str | os.PathLike[str],
    out_dir: str | os.PathLike[str] | None = None,
    options: SegmentOptions | None = None,
) -> dict[str, Any] | None:
    """The run record of ``path`` if its outputs are current, else None.

    Current means: ``name.json`` parses, records the input's present SHA-256 and this
    ``options`` fingerprint, and every output it lists exists.

    Examples
    --------
    >>> up_to_date("no/such/image.png") is None
    True
    """
    options = options or SegmentOptions()
    paths = output_paths(path, out_dir, options)
    try:
        record = json.loads(paths["record"].read_text(encoding="utf-8"))
        if record.get("options_fingerprint") != options_fingerprint(options):
            return None
        if record.get("input", {}).get("sha256") != input_sha256(path):
            return None
        folder = paths["record"].parent
        outputs = record.get("outputs", {})
        names = [v for k, v in outputs.items() if k not in ("masks", "mask_files")]
        names += list(outputs.get("mask_files", []))
        if not all((folder / n).is_file() for n in names):
            return None
    except (OSError, ValueError, AttributeError, TypeError):
        return None
    return record
