"""Pixel features for the affinity graph: validation, normalisation, colour, edge strength.

One job: turn an image array of any supported shape and dtype into

* ``values`` — an ``(H, W, C)`` float64 feature vector per pixel, on a common scale where a
  difference of 0.1 means roughly "10 % of the image's intensity range" for every kind of input,
* ``edges`` — an ``(H, W)`` float64 edge-strength map (>= 0) for the intervening-contour cue.

The graph builder (:mod:`imgcut.graph`) consumes both.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

__all__ = ["Features", "compute_features", "validate_image"]

_COLOR_MODES = ("auto", "lab", "channels")
_DEFAULT_PERCENTILES = (0.5, 99.5)
# Lab channels are divided by this so that L* spans [0, 1] like a normalised gray image
# (CIE L* runs from 0 to 100; a*, b* of sRGB colours lie roughly within ±100).
_LAB_SCALE = 100.0
# Pixels converted to Lab per call, bounding scikit-image's temporaries.
_LAB_BLOCK_PIXELS = 1 << 18


@dataclass(frozen=True, eq=False)
class Features:
    """Per-pixel features of one image.

    Attributes
    ----------
    values : numpy.ndarray
        ``(H, W, C)`` float64 feature vectors. Gray and per-channel inputs lie in ``[0, 1]``
        after percentile normalisation; colour inputs are CIE Lab divided by 100 (L* in
        ``[0, 1]``, a*, b* roughly in ``[-1, 1]``).
    edges : numpy.ndarray
        ``(H, W)`` float64 edge strength, ``>= 0``: the scale-normalised gradient magnitude of
        ``values`` (see :func:`compute_features`).
    kind : str
        ``"gray"``, ``"lab"`` or ``"channels"``: how ``values`` were made.
    low, high : numpy.ndarray
        Per-channel (or, for ``"lab"``, joint) input intensities mapped to 0 and 1.
    percentiles : tuple of float or None
        Percentiles used for the normalisation; None when the dtype range was used.
    edge_scales : tuple of float
        Gaussian scales (pixels) of the edge map.
    """

    values: np.ndarray
    edges: np.ndarray
    kind: str
    low: np.ndarray = field(repr=False)
    high: np.ndarray = field(repr=False)
    percentiles: tuple[float, float] | None = None
    edge_scales: tuple[float, ...] = (1.0,)

    @property
    def shape(self) -> tuple[int, int]:
        """Image shape ``(H, W)``."""
        return (int(self.values.shape[0]), int(self.values.shape[1]))

    @property
    def n_channels(self) -> int:
        """Number of feature channels ``C``."""
        return int(self.values.shape[2])


def validate_image(image) -> np.ndarray:
    """Check that an array is an image imgcut can segment and return it as an ndarray.

    Parameters
    ----------
    image : array_like
        ``(H, W)`` gray or ``(H, W, C)`` with any channel count ``C >= 1``; any real
        integer or floating dtype.

    Returns
    -------
    numpy.ndarray
        The same data as an ndarray (no copy when ``image`` already is one), shape unchanged.

    Raises
    ------
    ValueError
        Empty array or a zero-length dimension, ``ndim`` other than 2 or 3, boolean, complex or
        non-numeric dtype, NaN or infinite values.

    Notes
    -----
    A 1×1 image and single-row or single-column images are valid here; the pipeline handles
    such trivial cases itself.

    Examples
    --------
    >>> import numpy as np
    >>> validate_image(np.zeros((4, 5), dtype=np.uint8)).shape
    (4, 5)
    >>> validate_image(np.zeros((2, 2, 2, 2)))
    Traceback (most recent call last):
    ...
    ValueError: image must have shape (H, W) or (H, W, C), got 4-D array of shape (2, 2, 2, 2)
    """
    arr = np.asarray(image)
    if arr.ndim not in (2, 3):
        raise ValueError(
            f"image must have shape (H, W) or (H, W, C), got {arr.ndim}-D array of shape "
            f"{arr.shape}"
        )
    if arr.size == 0 or 0 in arr.shape:
        raise ValueError(
            f"image is empty (shape {arr.shape}); expected (H, W) or (H, W, C) with H, W, C >= 1"
        )
    if arr.dtype == np.bool_:
        raise ValueError(
            "image has boolean dtype; pass a gray/colour image with an integer or float dtype "
            "(a boolean array is a mask: use the mask option)"
        )
    if np.iscomplexobj(arr):
        raise ValueError(
            f"image has complex dtype {arr.dtype}; expected a real integer or float dtype"
        )
    if not (np.issubdtype(arr.dtype, np.integer) or np.issubdtype(arr.dtype, np.floating)):
        raise ValueError(f"image has dtype {arr.dtype}; expected a real integer or float dtype")
    if np.issubdtype(arr.dtype, np.floating) and not np.isfinite(arr).all():
        raise ValueError("image contains NaN or infinite values")
    return arr


def compute_features(
    image,
    *,
    color: str = "auto",
    percentiles: tuple[float, float] | None = _DEFAULT_PERCENTILES,
    edge_scales: tuple[float, ...] | float = (1.0,),
) -> Features:
    """Normalise an image and compute its per-pixel features and edge-strength map.

    Parameters
    ----------
    image : array_like
        ``(H, W)`` gray, ``(H, W, 3)`` RGB or ``(H, W, C)`` multichannel; any real dtype
        (uint8, uint16, other integers, float). See :func:`validate_image`.
    color : {"auto", "lab", "channels"}, default "auto"
        ``"auto"``: 3-channel images are treated as RGB and converted to CIE Lab, every other
        channel count per channel. ``"lab"``: require 3 channels and convert to Lab.
        ``"channels"``: normalise every channel on its own, no colour conversion (use this for
        3-channel fluorescence stacks that are not RGB photographs).
    percentiles : (float, float) or None, default (0.5, 99.5)
        Intensities at these percentiles are mapped to 0 and 1 and values outside are clipped,
        so that a 12/16-bit micrograph with a few hot pixels behaves like an 8-bit photo. With
        None, integer images are divided by their dtype range and float images are used as
        they are (colour floats must then lie in ``[0, 1]``).
    edge_scales : float or tuple of float, default (1.0,)
        Gaussian scales ``s`` (pixels, > 0) of the gradient in the edge map.

    Returns
    -------
    Features
        ``values`` ``(H, W, C)`` float64, ``edges`` ``(H, W)`` float64 ``>= 0`` and the
        normalisation used.

    Raises
    ------
    ValueError
        Invalid image (see :func:`validate_image`), unknown ``color`` (valid: "auto", "lab",
        "channels"), ``color="lab"`` without 3 channels, percentiles not
        ``0 <= low < high <= 100``, non-positive or non-finite edge scales, a float RGB image
        outside ``[0, 1]`` with ``percentiles=None``.

    Notes
    -----
    *Normalisation.* Per channel ``c`` (jointly over R, G, B for colour, so hues are kept),
    ``v = clip((x - q_low) / (q_high - q_low), 0, 1)`` with ``q`` the chosen percentiles. A
    channel with ``q_high == q_low`` (a constant image) maps to 0 — no division by zero.
    Percentile stretching is common practice for microscopy display, not a theorem.

    *Colour.* Normalised RGB goes through ``skimage.color.rgb2lab`` (D65, 2°) and each Lab
    channel is divided by 100, so a Euclidean distance of 0.1 between Lab features is a
    CIE76 colour difference ΔE*ab of 10 and corresponds to a gray-level difference of 10 % of
    the range: gray and colour features share the same σ scale.

    *Edges.* For each scale ``s`` the gradient of the Gaussian-smoothed features ``G_s * v`` is
    taken per channel and combined as the Frobenius norm of the Jacobian,
    ``g_s = sqrt(sum_c |∇(G_s * v_c)|²)`` (the colour gradient of the Lab vector). Scales are
    combined by ``E = max_s s · g_s``: the factor ``s`` is the γ = 1 scale normalisation of
    Lindeberg (1998), under which an ideal step of height ``h`` gives the same peak response
    ``h / sqrt(2π)`` at every scale, so a blurred edge is found at a coarse scale without
    sharp edges being drowned. Borders use mirror reflection (``scipy.ndimage`` ``"reflect"``).

    References
    ----------
    .. [1] CIE 15:2004, Colorimetry (CIE L*a*b*, ΔE*ab).
    .. [2] T. Lindeberg, "Edge detection and ridge detection with automatic scale selection",
       IJCV 30(2), 1998.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((8, 8), dtype=np.uint8)
    >>> img[:, 4:] = 200
    >>> f = compute_features(img)
    >>> f.kind, f.values.shape, f.edges.shape
    ('gray', (8, 8, 1), (8, 8))
    >>> float(f.values.min()), float(f.values.max())
    (0.0, 1.0)
    """
    arr = validate_image(image)
    if color not in _COLOR_MODES:
        raise ValueError(f"color must be one of {_COLOR_MODES}, got {color!r}")
    pct = _check_percentiles(percentiles)
    scales = _check_edge_scales(edge_scales)

    source = arr if arr.ndim == 3 else arr[:, :, None]
    n_channels = source.shape[2]

    if color == "lab" and n_channels != 3:
        raise ValueError(
            f"color='lab' needs an (H, W, 3) RGB image, got {n_channels} channel(s); "
            "use color='channels' or 'auto'"
        )
    use_lab = n_channels == 3 and color in ("auto", "lab")

    if use_lab:
        rgb, low, high = _normalise(source, pct, joint=True)
        if pct is None and (rgb.min() < 0.0 or rgb.max() > 1.0):
            raise ValueError(
                "a float RGB image must lie in [0, 1] when percentiles=None "
                f"(got values in [{rgb.min():g}, {rgb.max():g}]); rescale it or use percentiles"
            )
        values = _rgb_to_scaled_lab(rgb)
        kind = "lab"
    else:
        values, low, high = _normalise(source, pct, joint=False)
        kind = "gray" if n_channels == 1 else "channels"

    edges = _edge_strength(values, scales)
    return Features(
        values=values,
        edges=edges,
        kind=kind,
        low=low,
        high=high,
        percentiles=pct,
        edge_scales=scales,
    )


# --------------------------------------------------------------------------- helpers


def _check_percentiles(percentiles) -> tuple[float, float] | None:
    if percentiles is None:
        return None
    try:
        lo, hi = (float(p) for p in percentiles)
    except (TypeError, ValueError):
        raise ValueError(
            f"percentiles must be a pair (low, high) with 0 <= low < high <= 100 or None, "
            f"got {percentiles!r}"
        ) from None
    if not (np.isfinite(lo) and np.isfinite(hi) and 0.0 <= lo < hi <= 100.0):
        raise ValueError(f"percentiles must satisfy 0 <= low < high <= 100, got ({lo}, {hi})")
    return (lo, hi)


def _check_edge_scales(edge_scales) -> tuple[float, ...]:
    scales = np.atleast_1d(np.asarray(edge_scales, dtype=np.float64)).ravel()
    if scales.size == 0 or not np.all(np.isfinite(scales)) or np.any(scales <= 0):
        raise ValueError(
            f"edge_scales must be one or more finite scales > 0 (pixels), got {edge_scales!r}"
        )
    return tuple(float(s) for s in scales)


def _dtype_range(dtype: np.dtype) -> tuple[float, float]:
    if np.issubdtype(dtype, np.integer):
        info = np.iinfo(dtype)
        return float(info.min), float(info.max)
    return 0.0, 1.0


def _normalise(
    source: np.ndarray, pct: tuple[float, float] | None, *, joint: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Map (H, W, C) intensities to [0, 1] per channel (or jointly) as a new float64 array.

    Returns values, low, high. Percentiles are taken on ``source`` in its own dtype (exact for
    integers, and a smaller temporary copy than float64).
    """
    n_channels = source.shape[2]
    dtype = source.dtype
    if pct is None:
        if np.issubdtype(dtype, np.integer):
            lo, hi = _dtype_range(dtype)
            low = np.full(n_channels, lo)
            high = np.full(n_channels, hi)
        else:  # floats used as they are
            return source.astype(np.float64), np.zeros(n_channels), np.ones(n_channels)
    elif joint:
        q = np.percentile(source, pct)
        low = np.full(n_channels, q[0])
        high = np.full(n_channels, q[1])
    else:
        q = np.percentile(source.reshape(-1, n_channels), pct, axis=0)
        low, high = q[0].astype(np.float64), q[1].astype(np.float64)

    span = high - low
    # A channel whose robust range is zero (or lost in rounding) is constant: it maps to 0.
    tiny = 64.0 * np.finfo(np.float64).eps * np.maximum(np.abs(low), np.abs(high))
    constant = span <= tiny
    scale = np.where(constant, 0.0, 1.0 / np.where(constant, 1.0, span))
    values = source.astype(np.float64)  # the one full-size copy, normalised in place
    values -= low
    values *= scale
    np.clip(values, 0.0, 1.0, out=values)
    return values, low, high


def _rgb_to_scaled_lab(rgb: np.ndarray) -> np.ndarray:
    """RGB in [0, 1] → Lab / 100, in place, in blocks of rows (rgb2lab is per pixel)."""
    from skimage.color import rgb2lab

    rows = max(1, _LAB_BLOCK_PIXELS // rgb.shape[1])
    for r0 in range(0, rgb.shape[0], rows):
        block = rgb[r0 : r0 + rows]
        block[...] = rgb2lab(block)  # CIE 15:2004 L*a*b*, D65 2° observer (scikit-image)
        block /= _LAB_SCALE  # L* in [0, 1]: commensurate with normalised gray (see Notes)
    return rgb


def _edge_strength(values: np.ndarray, scales: tuple[float, ...]) -> np.ndarray:
    """max over scales of s * sqrt(sum_c |grad(G_s * v_c)|^2); float64, >= 0.

    One channel at a time, so the working memory is a few (H, W) arrays whatever C is.
    """
    height, width, n_channels = values.shape
    edges = np.zeros((height, width), dtype=np.float64)
    g2 = np.empty((height, width), dtype=np.float64)
    grad = np.empty((height, width), dtype=np.float64)
    for s in scales:
        g2.fill(0.0)
        for c in range(n_channels):
            channel = values[:, :, c]
            for order in ((1, 0), (0, 1)):  # d/dy, d/dx of the Gaussian-smoothed channel
                ndimage.gaussian_filter(channel, s, order=order, mode="reflect", output=grad)
                np.multiply(grad, grad, out=grad)
                g2 += grad
        np.sqrt(g2, out=g2)
        g2 *= s  # Lindeberg 1998, gamma = 1 normalised derivative
        np.maximum(edges, g2, out=edges)
    return edges
