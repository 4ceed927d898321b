"""Turn a label image into files people open elsewhere.

For an input ``name.ext`` the outputs are

==============================  ==============================================================
``name.labels.png`` / ``.tif``  label image: 0 = unlabelled, regions 1..K (8-bit when K ≤ 255,
                                16-bit PNG up to 65 535, 32-bit TIFF beyond)
``name.overlay.png``            the input (8-bit RGB view) with region boundaries drawn in a
                                colour that stands out from the image, optional translucent fill
``name.regions.csv``            one row per region: label, area, centroid, bounding box,
                                perimeter, mean intensity per channel
``name.json``                   the run record (written last: its presence means a whole run)
``name.masks/region-NNNN.png``  with masks: one 0/255 PNG per region, full image size
``name.eigenvectors.png``       with eigenvectors: colour-mapped panels of the eigenvectors
==============================  ==============================================================

Rendering (array → bytes) is separate from writing (bytes → atomic files), so a worker on
another machine can render and a client can write (see ``imgcut.runner``).
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from imgcut._errors import OutputExistsError
from imgcut.io import atomic_write

__all__ = [
    "BOUNDARY_COLOURS",
    "LABEL_FORMATS",
    "output_names",
    "encode_labels",
    "display_rgb",
    "render_overlay",
    "region_table",
    "table_to_csv",
    "record_to_json",
    "encode_masks",
    "render_eigenvector_grid",
    "encode_png",
    "render_outputs",
    "write_files",
    "write_outputs",
]

#: Label-image file formats.
LABEL_FORMATS = ("png", "tiff")

#: Boundary colours tried for the overlay (saturated primaries/secondaries, RGB 0..255);
#: the one farthest from the image colours under the boundaries is drawn.
BOUNDARY_COLOURS: dict[str, tuple[int, int, int]] = {
    "yellow": (255, 255, 0),
    "magenta": (255, 0, 255),
    "cyan": (0, 255, 255),
    "red": (255, 0, 0),
    "lime": (0, 255, 0),
}


def output_names(
    stem: str, *, label_format: str = "png", masks: bool = False, eigenvectors: bool = False
) -> dict[str, str]:
    """File names (relative to the output folder) that a run writes for input ``stem``.

    Returns
    -------
    dict
        kind → name, kinds ``labels``, ``overlay``, ``regions``, ``record`` and, when asked,
        ``masks`` (a folder) and ``eigenvectors``.

    Examples
    --------
    >>> output_names("scene")["overlay"]
    'scene.overlay.png'
    >>> output_names("cells", label_format="tiff", masks=True)["masks"]
    'cells.masks'
    """
    _check_choice("label_format", label_format, LABEL_FORMATS)
    names = {
        "labels": f"{stem}.labels.{'png' if label_format == 'png' else 'tif'}",
        "overlay": f"{stem}.overlay.png",
        "regions": f"{stem}.regions.csv",
        "record": f"{stem}.json",
    }
    if masks:
        names["masks"] = f"{stem}.masks"
    if eigenvectors:
        names["eigenvectors"] = f"{stem}.eigenvectors.png"
    return names


# --------------------------------------------------------------------------------------------
# label image


def encode_labels(labels: np.ndarray, *, label_format: str = "png") -> bytes:
    """Encode a label image losslessly.

    Parameters
    ----------
    labels : (H, W) integer array
        0 = unlabelled, regions 1..K.
    label_format : {"png", "tiff"}
        PNG is 8-bit grey when the largest label ≤ 255, else 16-bit (≤ 65 535; more labels
        need TIFF). TIFF (zlib-compressed) uses the smallest of uint8/uint16/uint32.

    Returns
    -------
    bytes

    Raises
    ------
    ValueError
        Not a 2-D integer array, negative labels, or too many labels for PNG.

    Examples
    --------
    >>> import numpy as np
    >>> data = encode_labels(np.array([[0, 1], [300, 2]], dtype=np.int32))
    >>> from PIL import Image; import io
    >>> np.asarray(Image.open(io.BytesIO(data))).tolist()
    [[0, 1], [300, 2]]
    """
    _check_choice("label_format", label_format, LABEL_FORMATS)
    labels = np.asarray(labels)
    if labels.ndim != 2 or labels.dtype.kind not in "iu":
        raise ValueError(
            f"labels must be a 2-D integer array (H, W), got {labels.dtype} {labels.shape}"
        )
    top = int(labels.max()) if labels.size else 0
    if labels.size and int(labels.min()) < 0:
        raise ValueError("labels must be ≥ 0 (0 = unlabelled)")
    dtype = np.uint8 if top <= 0xFF else np.uint16 if top <= 0xFFFF else np.uint32
    data = labels.astype(dtype)
    buf = io.BytesIO()
    if label_format == "png":
        if dtype == np.uint32:
            raise ValueError(f"{top} labels do not fit a 16-bit PNG; use label_format='tiff'")
        from PIL import Image

        Image.fromarray(data).save(buf, format="PNG", optimize=False, compress_level=6)
    else:
        import tifffile

        tifffile.imwrite(buf, data, photometric="minisblack", compression="zlib")
    return buf.getvalue()


# --------------------------------------------------------------------------------------------
# overlay


def display_rgb(image: np.ndarray) -> np.ndarray:
    """An 8-bit RGB view of any image, for drawing on.

    uint8 samples are kept as they are; other types are stretched linearly between their
    0.5th and 99.5th percentiles (common practice for displaying 12/16-bit micrographs).
    One channel becomes grey, two channels magenta/green (first, second), three RGB, more
    than three keep the first three.

    Examples
    --------
    >>> import numpy as np
    >>> display_rgb(np.array([[0, 4095]], dtype=np.uint16)).tolist()
    [[[0, 0, 0], [255, 255, 255]]]
    """
    img = np.asarray(image)
    if img.ndim == 2:
        img = img[..., None]
    if img.ndim != 3:
        raise ValueError(f"image must be (H, W) or (H, W, C), got shape {np.shape(image)}")
    if img.dtype != np.uint8:
        f = img.astype(np.float64)
        lo, hi = np.percentile(f, [0.5, 99.5])
        if not hi > lo:
            lo, hi = float(f.min()), float(f.max())
        scaled = (f - lo) / (hi - lo) if hi > lo else np.zeros_like(f)
        img = np.round(np.clip(scaled, 0.0, 1.0) * 255.0).astype(np.uint8)
    c = img.shape[2]
    if c == 1:
        return np.repeat(img, 3, axis=2)
    if c == 2:
        a, b = img[..., 0], img[..., 1]
        return np.stack([a, b, a], axis=2)  # first channel magenta, second green
    return np.ascontiguousarray(img[..., :3])


def _region_colours(n: int) -> np.ndarray:
    """(n + 1, 3) uint8 fill colours, row k for label k (row 0 unused), from matplotlib's
    qualitative tab20 map, cycled."""
    from matplotlib import colormaps

    table = np.asarray(colormaps["tab20"].colors)[:, :3]
    idx = (np.arange(n + 1) - 1) % len(table)
    return np.round(table[idx] * 255).astype(np.uint8)


def _pick_boundary_colour(rgb: np.ndarray, boundary: np.ndarray) -> tuple[int, int, int]:
    """The candidate colour whose 10th-percentile distance to the pixels under the
    boundaries is largest (the worst-lit stretches of boundary stay visible)."""
    under = rgb[boundary].astype(np.float64)
    if under.size == 0:
        return BOUNDARY_COLOURS["yellow"]
    if len(under) > 20000:  # plenty for a percentile; deterministic stride
        under = under[:: len(under) // 20000 + 1]
    best, best_score = BOUNDARY_COLOURS["yellow"], -1.0
    for colour in BOUNDARY_COLOURS.values():
        dist = np.linalg.norm(under - np.asarray(colour, dtype=np.float64), axis=1)
        score = float(np.percentile(dist, 10))
        if score > best_score + 1e-9:
            best, best_score = colour, score
    return best


def render_overlay(
    image: np.ndarray,
    labels: np.ndarray,
    *,
    fill: float | None = None,
    boundary_colour: str | tuple[int, int, int] = "auto",
) -> np.ndarray:
    """The input with region boundaries drawn on it.

    Parameters
    ----------
    image : (H, W) or (H, W, C) array
        The image that was segmented (any sample type; see `display_rgb`).
    labels : (H, W) integer array
        Label image; boundaries are drawn between any two different labels, 0 included.
    fill : float in [0, 1], optional
        Opacity of a per-region colour wash (tab20 colours by label; label 0 unfilled).
        None or 0: no fill.
    boundary_colour : "auto", a name of `BOUNDARY_COLOURS`, or an RGB triple
        "auto" picks the candidate that contrasts most with the image under the boundaries.

    Returns
    -------
    (H, W, 3) uint8 array

    Notes
    -----
    Boundaries are scikit-image ``find_boundaries(mode="thick")`` pixels: both sides of
    every label change, so a line is 2 pixels wide; images over 1000 pixels on their short
    side get it dilated once more so it stays visible when the picture is shrunk to a screen.

    Examples
    --------
    >>> import numpy as np
    >>> lab = np.ones((4, 6), np.int32); lab[:, 3:] = 2
    >>> out = render_overlay(np.zeros((4, 6), np.uint8), lab, boundary_colour="red")
    >>> out.shape, out[0, 2].tolist(), out[0, 0].tolist()
    ((4, 6, 3), [255, 0, 0], [0, 0, 0])
    """
    from scipy.ndimage import binary_dilation
    from skimage.segmentation import find_boundaries

    labels = np.asarray(labels)
    rgb = display_rgb(image)
    if labels.shape != rgb.shape[:2]:
        raise ValueError(f"labels shape {labels.shape} does not match image {rgb.shape[:2]}")
    if fill is not None and not 0.0 <= float(fill) <= 1.0:
        raise ValueError(f"fill must be an opacity in [0, 1], got {fill}")
    out = rgb.copy()
    if fill:
        colours = _region_colours(int(labels.max()) if labels.size else 0)
        wash = colours[labels].astype(np.float64)
        a = float(fill)
        blended = np.round((1.0 - a) * out + a * wash).astype(np.uint8)
        inside = labels > 0
        out[inside] = blended[inside]
    boundary = find_boundaries(labels, mode="thick")
    if min(labels.shape) > 1000:
        boundary = binary_dilation(boundary, structure=np.ones((3, 3), bool))
    if isinstance(boundary_colour, str):
        if boundary_colour == "auto":
            colour = _pick_boundary_colour(rgb, boundary)
        else:
            _check_choice("boundary_colour", boundary_colour, ("auto", *BOUNDARY_COLOURS))
            colour = BOUNDARY_COLOURS[boundary_colour]
    else:
        colour = tuple(int(v) for v in boundary_colour)  # type: ignore[assignment]
        if len(colour) != 3 or not all(0 <= v <= 255 for v in colour):
            raise ValueError(f"boundary_colour must be an RGB triple in 0..255, got {colour}")
    out[boundary] = np.asarray(colour, dtype=np.uint8)
    return out


def encode_png(array: np.ndarray) -> bytes:
    """PNG bytes of an (H, W) or (H, W, 3) uint8/uint16 array.

    Examples
    --------
    >>> import numpy as np
    >>> encode_png(np.zeros((2, 2), np.uint8))[:4]
    b'\\x89PNG'
    """
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(np.ascontiguousarray(array)).save(buf, format="PNG", compress_level=6)
    return buf.getvalue()


# --------------------------------------------------------------------------------------------
# region table


def region_table(labels: np.ndarray, image: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Measurements of each region, one entry per label 1..K (label 0 is skipped).

    Parameters
    ----------
    labels : (H, W) integer array
    image : (H, W) or (H, W, C) array, optional
        Intensities in their own units (e.g. 16-bit counts) for the mean per channel.

    Returns
    -------
    dict of column name → 1-D array
        ``label``, ``area`` (pixels), ``centroid_row``, ``centroid_col``,
        ``bbox_min_row``, ``bbox_min_col``, ``bbox_max_row``, ``bbox_max_col`` (max
        exclusive, as in slicing), ``perimeter`` (pixels), ``eccentricity`` (of the ellipse
        with the region's second moments: 0 circle, → 1 elongated), then with an image
        ``mean_intensity`` and ``integrated_intensity`` (sum over the region) for one
        channel, or ``mean_intensity_0`` …, ``integrated_intensity_0`` … for several.

    Notes
    -----
    Computed with scikit-image ``measure.regionprops_table``; the perimeter is its
    4-connected boundary-length estimate (straight runs count 1, diagonal steps √2).

    Examples
    --------
    >>> import numpy as np
    >>> lab = np.zeros((4, 5), np.int32); lab[1:3, 1:4] = 1
    >>> t = region_table(lab, np.full((4, 5), 7, np.uint16))
    >>> int(t["area"][0]), float(t["mean_intensity"][0]), int(t["bbox_max_col"][0])
    (6, 7.0, 4)
    """
    from skimage.measure import regionprops_table

    labels = np.asarray(labels)
    props = ["label", "area", "centroid", "bbox", "perimeter", "eccentricity"]
    intensity = None
    if image is not None:
        intensity = np.asarray(image)
        if intensity.shape[:2] != labels.shape:
            raise ValueError(f"image shape {intensity.shape} does not match labels {labels.shape}")
        intensity = intensity.astype(np.float64, copy=False)
        props.append("intensity_mean")
    raw = regionprops_table(labels, intensity_image=intensity, properties=props)
    table: dict[str, np.ndarray] = {
        "label": raw["label"].astype(np.int64),
        "area": raw["area"].astype(np.int64),
        "centroid_row": raw["centroid-0"],
        "centroid_col": raw["centroid-1"],
        "bbox_min_row": raw["bbox-0"].astype(np.int64),
        "bbox_min_col": raw["bbox-1"].astype(np.int64),
        "bbox_max_row": raw["bbox-2"].astype(np.int64),
        "bbox_max_col": raw["bbox-3"].astype(np.int64),
        "perimeter": raw["perimeter"],
        "eccentricity": raw["eccentricity"],
    }
    if intensity is not None:
        flat = labels.ravel()
        idx = table["label"]
        planes = [intensity] if intensity.ndim == 2 else list(np.moveaxis(intensity, -1, 0))
        suffixes = [""] if intensity.ndim == 2 else [f"_{c}" for c in range(len(planes))]
        for c, suffix in enumerate(suffixes):
            key = "intensity_mean" if intensity.ndim == 2 else f"intensity_mean-{c}"
            table[f"mean_intensity{suffix}"] = raw[key]
        for plane, suffix in zip(planes, suffixes, strict=True):
            sums = np.bincount(flat, weights=plane.ravel(), minlength=int(flat.max()) + 1)
            table[f"integrated_intensity{suffix}"] = sums[idx]
    return table


def table_to_csv(table: Mapping[str, np.ndarray]) -> bytes:
    """CSV bytes (UTF-8, header row, ``\\n`` line ends) of a column table.

    Integers are written as integers, floats with 10 significant digits.

    Examples
    --------
    >>> import numpy as np
    >>> table_to_csv({"label": np.array([1, 2]), "area": np.array([0.5, 2.0])}).decode()
    'label,area\\n1,0.5\\n2,2\\n'
    """
    names = list(table)
    cols = [np.asarray(table[n]) for n in names]
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(names)
    n = len(cols[0]) if cols else 0
    text_cols = [
        [str(int(v)) for v in c] if c.dtype.kind in "iub" else [f"{float(v):.10g}" for v in c]
        for c in cols
    ]
    for i in range(n):
        writer.writerow([col[i] for col in text_cols])
    return buf.getvalue().encode("utf-8")


# --------------------------------------------------------------------------------------------
# run record


def _jsonable(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist())
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, (str, int)) or value is None:
        return value
    return str(value)


def record_to_json(record: Mapping[str, Any]) -> bytes:
    """Pretty JSON bytes of a run record; numpy scalars/arrays become plain numbers and lists,
    NaN/inf become null (strict JSON).

    Examples
    --------
    >>> import numpy as np
    >>> print(record_to_json({"a": np.float32(0.5), "b": [1, float("nan")]}).decode())
    {
      "a": 0.5,
      "b": [1, null]
    }
    <BLANKLINE>
    """
    return (_dumps_compact_lists(_jsonable(record)) + "\n").encode("utf-8")


def _dumps_compact_lists(value: Any, indent: int = 2, level: int = 0) -> str:
    """JSON with objects indented one key per line but lists of plain scalars on one line
    (eigenvalues, residuals, shapes), which keeps a run record readable."""
    pad, inner = " " * (indent * level), " " * (indent * (level + 1))
    if isinstance(value, dict):
        if not value:
            return "{}"
        items = [
            f"{inner}{json.dumps(k)}: {_dumps_compact_lists(v, indent, level + 1)}"
            for k, v in value.items()
        ]
        return "{\n" + ",\n".join(items) + "\n" + pad + "}"
    if isinstance(value, list):
        if all(not isinstance(v, (dict, list)) for v in value):
            return json.dumps(value, allow_nan=False, separators=(", ", ": "))
        items = [f"{inner}{_dumps_compact_lists(v, indent, level + 1)}" for v in value]
        return "[\n" + ",\n".join(items) + "\n" + pad + "]"
    return json.dumps(value, allow_nan=False)


# --------------------------------------------------------------------------------------------
# masks and eigenvectors


def encode_masks(labels: np.ndarray) -> dict[str, bytes]:
    """One 8-bit PNG (0 background, 255 region) per label 1..K, full image size.

    Returns
    -------
    dict
        ``"region-0001.png"`` → PNG bytes, in label order (4 digits, more when K > 9999).

    Examples
    --------
    >>> import numpy as np
    >>> sorted(encode_masks(np.array([[1, 2], [2, 0]], np.int32)))
    ['region-0001.png', 'region-0002.png']
    """
    labels = np.asarray(labels)
    present = np.unique(labels)
    present = present[present > 0]
    width = max(4, len(str(int(present[-1])))) if present.size else 4
    return {
        f"region-{int(k):0{width}d}.png": encode_png(np.where(labels == k, 255, 0).astype(np.uint8))
        for k in present
    }


def render_eigenvector_grid(
    vectors: np.ndarray,
    eigenvalues: np.ndarray | None = None,
    *,
    cmap: str = "RdBu_r",
    max_panels: int = 16,
) -> bytes:
    """PNG of eigenvectors as a grid of colour-mapped panels.

    Parameters
    ----------
    vectors : (H, W, k) array
        Eigenvectors reshaped to the image (NaN where a pixel is outside the graph, drawn grey).
    eigenvalues : (k,) array, optional
        Printed in the panel titles.
    cmap : str, default "RdBu_r"
        A matplotlib colour map; the default diverging map is centred on 0 (each panel
        scaled to ±max|y|), so the sign pattern that a sweep cut thresholds is visible.
    max_panels : int, default 16
        At most this many leading eigenvectors are drawn.

    Returns
    -------
    bytes

    Notes
    -----
    Drawn with matplotlib's object interface on the Agg canvas (no pyplot state), so it is
    safe in worker processes and threads.

    Examples
    --------
    >>> import numpy as np
    >>> png = render_eigenvector_grid(np.random.default_rng(0).normal(size=(8, 10, 3)))
    >>> png[:4]
    b'\\x89PNG'
    """
    from matplotlib import colormaps
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    vecs = np.asarray(vectors, dtype=np.float64)
    if vecs.ndim != 3 or vecs.shape[2] < 1:
        raise ValueError(f"vectors must have shape (H, W, k) with k ≥ 1, got {vecs.shape}")
    if cmap not in colormaps:
        raise ValueError(f"unknown colour map {cmap!r}; see matplotlib.colormaps")
    k = min(vecs.shape[2], int(max_panels))
    h, w = vecs.shape[:2]
    ncols = min(k, 4)
    nrows = math.ceil(k / ncols)
    panel_w = 2.6
    panel_h = panel_w * h / w
    fig = Figure(figsize=(ncols * panel_w, nrows * (panel_h + 0.35)), dpi=100)
    FigureCanvasAgg(fig)
    colour_map = colormaps[cmap].with_extremes(bad=(0.6, 0.6, 0.6))
    for j in range(k):
        ax = fig.add_subplot(nrows, ncols, j + 1)
        panel = vecs[..., j]
        finite = panel[np.isfinite(panel)]
        lim = float(np.max(np.abs(finite))) if finite.size else 1.0
        lim = lim if lim > 0 else 1.0
        ax.imshow(
            np.ma.masked_invalid(panel),
            cmap=colour_map,
            vmin=-lim,
            vmax=lim,
            interpolation="nearest",
        )
        title = f"y{j + 1}"
        if eigenvalues is not None and j < len(eigenvalues):
            title += f"  λ={float(eigenvalues[j]):.3g}"
        ax.set_title(title, fontsize=8)
        ax.set_axis_off()
    fig.subplots_adjust(left=0.01, right=0.99, bottom=0.01, top=0.94, wspace=0.04, hspace=0.2)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


# --------------------------------------------------------------------------------------------
# all outputs at once


def render_outputs(
    stem: str,
    image: np.ndarray,
    labels: np.ndarray,
    *,
    eigenvectors: np.ndarray | None = None,
    eigenvalues: np.ndarray | None = None,
    label_format: str = "png",
    fill: float | None = None,
    masks: bool = False,
    eigenvector_grid: bool = False,
) -> dict[str, bytes]:
    """Every output except the run record, as relative file name → bytes.

    Mask files are named ``<stem>.masks/region-NNNN.png``. ``eigenvector_grid`` needs
    ``eigenvectors``.

    Examples
    --------
    >>> import numpy as np
    >>> lab = np.ones((3, 4), np.int32); lab[:, 2:] = 2
    >>> sorted(render_outputs("x", np.zeros((3, 4), np.uint8), lab, masks=True))
    ['x.labels.png', 'x.masks/region-0001.png', 'x.masks/region-0002.png', 'x.overlay.png', \
'x.regions.csv']
    """
    names = output_names(
        stem, label_format=label_format, masks=masks, eigenvectors=eigenvector_grid
    )
    files = {
        names["labels"]: encode_labels(labels, label_format=label_format),
        names["overlay"]: encode_png(render_overlay(image, labels, fill=fill)),
        names["regions"]: table_to_csv(region_table(labels, image)),
    }
    if masks:
        for name, data in encode_masks(labels).items():
            files[f"{names['masks']}/{name}"] = data
    if eigenvector_grid:
        if eigenvectors is None:
            raise ValueError("eigenvector_grid=True needs the eigenvectors")
        files[names["eigenvectors"]] = render_eigenvector_grid(eigenvectors, eigenvalues)
    return files


def write_files(
    out_dir: str | os.PathLike[str], files: Mapping[str, bytes], *, overwrite: bool = False
) -> list[Path]:
    """Write relative name → bytes under ``out_dir``, each file atomically, in the given order.

    Existing files are refused (``OutputExistsError`` naming the first, before anything is
    written) unless ``overwrite``. Subfolders in names (``x.masks/…``) are created.

    Examples
    --------
    >>> import tempfile
    >>> [p.name for p in write_files(tempfile.mkdtemp(), {"a.txt": b"1"})]
    ['a.txt']
    """
    out = Path(out_dir)
    targets = [(out / name, data) for name, data in files.items()]
    if not overwrite:
        for path, _ in targets:
            if path.exists():
                raise OutputExistsError(f"{path}: already exists (use --overwrite to replace it)")
    written = []
    for path, data in targets:
        path.parent.mkdir(parents=True, exist_ok=True)
        written.append(atomic_write(path, data, overwrite=True))
    return written


def write_outputs(
    out_dir: str | os.PathLike[str],
    stem: str,
    image: np.ndarray,
    labels: np.ndarray,
    *,
    record: Mapping[str, Any] | None = None,
    eigenvectors: np.ndarray | None = None,
    eigenvalues: np.ndarray | None = None,
    label_format: str = "png",
    fill: float | None = None,
    masks: bool = False,
    eigenvector_grid: bool = False,
    overwrite: bool = False,
) -> dict[str, Path]:
    """Render and write every output of one image; the run record (if given) goes last.

    Returns
    -------
    dict
        kind → path (``masks`` → the masks folder), as in `output_names`.

    Raises
    ------
    OutputExistsError
        An output exists and ``overwrite`` is False (nothing is written).

    Examples
    --------
    >>> import tempfile, numpy as np
    >>> lab = np.ones((3, 4), np.int32); lab[:, 2:] = 2
    >>> paths = write_outputs(tempfile.mkdtemp(), "x", np.zeros((3, 4)), lab, record={"k": 2})
    >>> sorted(paths)
    ['labels', 'overlay', 'record', 'regions']
    """
    names = output_names(
        stem, label_format=label_format, masks=masks, eigenvectors=eigenvector_grid
    )
    files = render_outputs(
        stem,
        image,
        labels,
        eigenvectors=eigenvectors,
        eigenvalues=eigenvalues,
        label_format=label_format,
        fill=fill,
        masks=masks,
        eigenvector_grid=eigenvector_grid,
    )
    if record is not None:
        files[names["record"]] = record_to_json(record)
    else:
        names.pop("record")
    write_files(out_dir, files, overwrite=overwrite)
    return {kind: Path(out_dir) / name for kind, name in names.items()}


def _check_choice(name: str, value: Any, valid: tuple[str, ...]) -> None:
    if value not in valid:
        raise ValueError(f"{name} must be one of {', '.join(map(repr, valid))}; got {value!r}")
