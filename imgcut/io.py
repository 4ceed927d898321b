"""Read images from disk and write files atomically.

Reading covers PNG, JPEG, BMP (through Pillow) and TIFF (through tifffile: 8/16/32-bit
integer and float samples, single- or multi-page, multichannel, ImageJ hyperstacks).
A multi-page stack is never flattened silently: the caller picks a plane (or the maximum
projection) and, optionally, channels. Every failure is a one-line error that names the file.

Writing goes through :func:`atomic_write`: the bytes land in a hidden temporary file in the
destination folder, are flushed to disk, and only then renamed over the final name, so an
interrupted run never leaves a half-written file under a name a later run would trust.
"""

from __future__ import annotations

import contextlib
import os
import re
import tempfile
import threading
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from imgcut._errors import ImageReadError, ImageTooLargeError

__all__ = [
    "DEFAULT_MAX_PIXELS",
    "PARTIAL_SUFFIX",
    "LoadedImage",
    "read_image",
    "atomic_write",
    "stale_partials",
]

#: Default upper bound on height × width of one image plane (100 megapixels). Large enough for
#: any camera or slide tile imgcut can segment in memory, small enough that a forged header
#: claiming billions of pixels is refused before anything is decoded.
DEFAULT_MAX_PIXELS = 100_000_000

#: Suffix of the temporary files written by :func:`atomic_write`.
PARTIAL_SUFFIX = ".imgcut-partial"

# A stack is decoded whole before a plane is picked; bound the total number of samples
# decoded relative to the per-plane limit so that a stack of many planes cannot exhaust memory.
_MAX_SAMPLES_PER_PIXEL = 16

_TIFF_MAGIC = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")  # classic and BigTIFF headers
_PIL_LOCK = threading.Lock()  # PIL.Image.MAX_IMAGE_PIXELS is process-global


@dataclass(frozen=True)
class LoadedImage:
    """An image read from disk, with what was selected from the file.

    Attributes
    ----------
    pixels : numpy.ndarray
        ``(H, W)`` for one channel or ``(H, W, C)`` for several, in the file's own sample
        type (uint8, uint16, int32, float32, ...); bilevel images become uint8 0/255.
    path : pathlib.Path
        The file that was read.
    format : str
        ``"TIFF"``, ``"PNG"``, ``"JPEG"``, ``"BMP"``, ... (detected from the content).
    source_shape : tuple of int
        Shape of the stored array (for TIFF: the first series, axes in ``source_axes``).
    source_axes : str
        Axis letters of ``source_shape``: Y, X rows/columns, S samples, C channels,
        Z/T/I/Q planes (tifffile's letters).
    source_dtype : str
        Sample type in the file.
    channels : tuple of int or None
        Channels selected, or None for all.
    plane : int, "max" or None
        Plane selected from a stack, ``"max"`` for the maximum projection, None for a
        single-plane file.
    n_planes, n_channels : int
        Planes and channels present in the file.
    notes : tuple of str
        What was done to the samples on the way in (alpha dropped, palette expanded, ...).
    """

    pixels: np.ndarray
    path: Path
    format: str
    source_shape: tuple[int, ...]
    source_axes: str
    source_dtype: str
    channels: tuple[int, ...] | None = None
    plane: int | str | None = None
    n_planes: int = 1
    n_channels: int = 1
    notes: tuple[str, ...] = field(default=())

    def to_record(self) -> dict[str, Any]:
        """JSON-ready description of what was read (for the run record)."""
        return {
            "path": str(self.path),
            "format": self.format,
            "source_shape": list(self.source_shape),
            "source_axes": self.source_axes,
            "source_dtype": self.source_dtype,
            "n_planes": self.n_planes,
            "n_channels": self.n_channels,
            "channels": None if self.channels is None else list(self.channels),
            "plane": self.plane,
            "shape": list(self.pixels.shape),
            "dtype": str(self.pixels.dtype),
            "notes": list(self.notes),
        }


def read_image(
    path: str | os.PathLike[str],
    *,
    channel: int | Sequence[int] | None = None,
    plane: int | str | None = None,
    max_pixels: int = DEFAULT_MAX_PIXELS,
) -> LoadedImage:
    """Read one image file into an array, refusing anything that is not a sound image.

    Parameters
    ----------
    path : str or os.PathLike
        PNG, JPEG, BMP (or anything else Pillow decodes) or TIFF; the format is detected
        from the file's first bytes, not its name.
    channel : int or sequence of int, optional
        Channels to keep, 0-based. One index gives an ``(H, W)`` array, several an
        ``(H, W, C)`` array in the order given. For a multi-page TIFF without a channel axis
        this declares the pages to be channels. Default: all channels.
    plane : int or "max", optional
        Plane of a multi-plane stack (Z, T or unlabelled pages, flattened in file order),
        or ``"max"`` for the maximum-intensity projection over all planes. Required when
        the file holds more than one plane.
    max_pixels : int, default DEFAULT_MAX_PIXELS
        Largest accepted height × width, checked from the header before any pixel is
        decoded (a guard against decompression bombs). Pillow's own limit
        ``PIL.Image.MAX_IMAGE_PIXELS`` is set to the same value while the file is opened.

    Returns
    -------
    LoadedImage
        ``.pixels`` holds the array; the other fields describe the file and the selection.

    Raises
    ------
    FileNotFoundError
        No such file.
    IsADirectoryError
        The path is a folder.
    ImageTooLargeError
        More than ``max_pixels`` pixels per plane.
    ImageReadError
        Empty, not an image, truncated or corrupt, NaN/inf samples, an unsupported sample
        type, or a stack/channel selection that does not fit the file. Also a
        ``ValueError``, so library callers can catch either.
    ValueError
        ``max_pixels`` < 1 or a malformed ``channel``/``plane``.

    Notes
    -----
    TIFF axes follow tifffile's series metadata. Samples (S) or channels (C) form the
    channel axis; every other non-spatial axis counts as planes. A plain multi-page file
    (axis I or Q) is ambiguous, so it is refused unless ``plane`` or ``channel`` says what
    its pages are. Orientation tags (EXIF) are not applied: arrays come out in stored
    order, as other scientific readers return them.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, tifffile
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> stack = np.arange(2 * 3 * 4 * 5, dtype=np.uint16).reshape(2, 3, 4, 5)
    >>> tifffile.imwrite(folder / "s.tif", stack, imagej=True, metadata={"axes": "ZCYX"})
    >>> img = read_image(folder / "s.tif", plane=1, channel=[0, 2])
    >>> img.pixels.shape, img.pixels.dtype.name, img.source_axes
    ((4, 5, 2), 'uint16', 'ZCYX')
    """
    path = Path(path)
    if isinstance(max_pixels, bool) or not isinstance(max_pixels, (int, np.integer)):
        raise ValueError(f"max_pixels must be a positive integer, got {max_pixels!r}")
    if max_pixels < 1:
        raise ValueError(f"max_pixels must be a positive integer, got {max_pixels}")
    channels = _normalise_channel(channel)
    plane = _normalise_plane(plane)

    if not path.exists():
        raise FileNotFoundError(f"{path}: no such file")
    if path.is_dir():
        raise IsADirectoryError(f"{path}: is a folder, not an image file")
    try:
        with open(path, "rb") as fh:
            head = fh.read(16)
    except OSError as exc:
        raise ImageReadError(f"{path}: cannot be opened ({_reason(exc)})") from exc
    if not head:
        raise ImageReadError(f"{path}: file is empty (0 bytes)")

    if head[:4] in _TIFF_MAGIC:
        stack, axes, fmt, info = _read_tiff(path, max_pixels)
    else:
        stack, axes, fmt, info = _read_pil(path, max_pixels)
    return _select(path, stack, axes, fmt, info, channels, plane)


# --------------------------------------------------------------------------------------------
# decoders: each returns a canonical (P, H, W, C) stack plus a description of the source


@dataclass
class _Source:
    shape: tuple[int, ...]
    axes: str
    dtype: str
    plane_axes: str  # letters of the axes flattened into P ("" when P == 1)
    channel_axis: str  # letter of the axis that became C ("" when C == 1 and none)
    pages_ambiguous: bool  # P > 1 from unlabelled pages (I/Q): may also be channels
    notes: list[str]


def _read_tiff(path: Path, max_pixels: int) -> tuple[np.ndarray, str, str, _Source]:
    import tifffile

    try:
        with tifffile.TiffFile(path) as tif:
            if not tif.series:
                raise ImageReadError(f"{path}: TIFF holds no image")
            series = tif.series[0]
            shape = tuple(int(s) for s in series.shape)
            axes = str(series.axes)
            dtype = np.dtype(series.dtype)
            _check_tiff_layout(path, shape, axes, max_pixels)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # tifffile logs/warns on odd tags; errors raise
                data = series.asarray()
    except (ImageReadError, MemoryError):
        raise
    except Exception as exc:  # tifffile raises many types for damaged files
        raise ImageReadError(f"{path}: truncated or corrupt TIFF ({_reason(exc)})") from exc
    if data.shape != shape:
        raise ImageReadError(f"{path}: corrupt TIFF (decoded {data.shape}, header {shape})")
    stack, source = _canonical_from_axes(data, axes)
    source.dtype = str(dtype)
    return stack, axes, "TIFF", source


def _check_tiff_layout(path: Path, shape: tuple[int, ...], axes: str, max_pixels: int) -> None:
    if "Y" not in axes or "X" not in axes:
        raise ImageReadError(f"{path}: TIFF layout {axes!r} has no Y/X image axes")
    h, w = shape[axes.index("Y")], shape[axes.index("X")]
    if h == 0 or w == 0:
        raise ImageReadError(f"{path}: image is empty ({h}×{w} pixels)")
    if h * w > max_pixels:
        raise ImageTooLargeError(
            f"{path}: image is {h}×{w} = {h * w:,} pixels, over the limit of {max_pixels:,} "
            f"(raise it with --max-pixels if the file is trusted)"
        )
    total = int(np.prod(shape, dtype=np.int64))
    if total > _MAX_SAMPLES_PER_PIXEL * max_pixels:
        raise ImageTooLargeError(
            f"{path}: stack holds {total:,} samples, over the limit of "
            f"{_MAX_SAMPLES_PER_PIXEL} × {max_pixels:,} (raise --max-pixels if trusted)"
        )


def _canonical_from_axes(data: np.ndarray, axes: str) -> tuple[np.ndarray, _Source]:
    """Move a tifffile array with axis letters into (P, H, W, C)."""
    shape = data.shape
    others = [i for i, a in enumerate(axes) if a not in "YX"]
    # channel axis: samples first (RGB pixels), else an explicit channel axis
    chan = next((i for i in others if axes[i] == "S" and shape[i] > 1), None)
    if chan is None:
        chan = next((i for i in others if axes[i] == "C" and shape[i] > 1), None)
    plane_idx = [i for i in others if i != chan]
    order = plane_idx + [axes.index("Y"), axes.index("X")] + ([chan] if chan is not None else [])
    moved = np.transpose(data, order)
    h, w = shape[axes.index("Y")], shape[axes.index("X")]
    n_planes = int(np.prod([shape[i] for i in plane_idx], dtype=np.int64)) if plane_idx else 1
    n_chan = shape[chan] if chan is not None else 1
    stack = moved.reshape(n_planes, h, w, n_chan)
    real_plane_axes = "".join(axes[i] for i in plane_idx if shape[i] > 1)
    ambiguous = chan is None and real_plane_axes in ("I", "Q")
    source = _Source(
        shape=tuple(shape),
        axes=axes,
        dtype=str(data.dtype),
        plane_axes=real_plane_axes,
        channel_axis=axes[chan] if chan is not None else "",
        pages_ambiguous=ambiguous,
        notes=[],
    )
    return stack, source


def _read_pil(path: Path, max_pixels: int) -> tuple[np.ndarray, str, str, _Source]:
    from PIL import Image, UnidentifiedImageError

    notes: list[str] = []
    with _pil_pixel_limit(max_pixels):
        try:
            with Image.open(path) as im:
                fmt = str(im.format or "image")
                w, h = im.size
                if h == 0 or w == 0:
                    raise ImageReadError(f"{path}: image is empty ({h}×{w} pixels)")
                if h * w > max_pixels:
                    raise ImageTooLargeError(
                        f"{path}: image is {h}×{w} = {h * w:,} pixels, over the limit of "
                        f"{max_pixels:,} (raise it with --max-pixels if the file is trusted)"
                    )
                n_frames = int(getattr(im, "n_frames", 1) or 1)
                if n_frames * h * w > _MAX_SAMPLES_PER_PIXEL * max_pixels:
                    raise ImageTooLargeError(
                        f"{path}: {n_frames} frames of {h}×{w} pixels are over the limit of "
                        f"{_MAX_SAMPLES_PER_PIXEL} × {max_pixels:,} (raise --max-pixels if "
                        "trusted)"
                    )
                frames = []
                for k in range(n_frames):  # animated PNG/GIF, multi-frame formats
                    im.seek(k)
                    im.load()
                    frame, note = _pil_to_plain_mode(im)
                    if note and note not in notes:
                        notes.append(note)
                    frames.append(np.asarray(frame))
                mode = frame.mode
                if len({(f.shape, f.dtype) for f in frames}) > 1:
                    raise ImageReadError(f"{path}: frames differ in size or sample type")
                data = np.stack(frames)
        except (ImageReadError, MemoryError):
            raise
        except UnidentifiedImageError as exc:
            raise ImageReadError(f"{path}: not an image file (format not recognised)") from exc
        except Image.DecompressionBombError as exc:
            # Pillow refuses in Image.open (above twice its limit) before our size check
            found = re.search(r"\((\d+) pixels\)", str(exc))
            size = f"{int(found.group(1)):,} pixels" if found else "too many pixels"
            raise ImageTooLargeError(
                f"{path}: image is {size}, over the limit of {max_pixels:,} "
                f"(raise it with --max-pixels if the file is trusted)"
            ) from exc
        except (OSError, SyntaxError, ValueError, EOFError, IndexError, KeyError) as exc:
            raise ImageReadError(f"{path}: truncated or corrupt image ({_reason(exc)})") from exc
    if data.dtype == bool:
        data = data.astype(np.uint8) * np.uint8(255)
        notes.append("bilevel samples mapped to 0/255")
    stack = data[..., None] if data.ndim == 3 else data  # (frames, H, W, C)
    axes = "YX" if data.ndim == 3 else "YXS"
    shape = tuple(data.shape[1:])
    if stack.shape[0] > 1:
        axes, shape = "T" + axes, tuple(data.shape)
    source = _Source(
        shape=shape,
        axes=axes,
        dtype=f"{data.dtype} ({mode})",
        plane_axes="T" if stack.shape[0] > 1 else "",
        channel_axis="S" if data.ndim == 4 else "",
        pages_ambiguous=False,
        notes=notes,
    )
    return stack, axes, fmt, source


def _pil_to_plain_mode(im: Any) -> tuple[Any, str]:
    """Convert Pillow modes with alpha, palettes or odd colour spaces to L/RGB/I;16/I/F."""
    mode = im.mode
    if mode in ("L", "RGB", "I", "F", "1") or mode.startswith("I;16"):
        if mode.startswith("I;16") and mode != "I;16":
            return im.convert("I"), f"mode {mode} widened to 32-bit integers"
        return im, ""
    if mode == "LA":
        return im.convert("L"), "alpha channel dropped"
    if mode in ("RGBA", "RGBa"):
        return im.convert("RGB"), "alpha channel dropped"
    if mode in ("P", "PA"):
        return im.convert("RGB"), "palette expanded to RGB (alpha dropped)"
    return im.convert("RGB"), f"mode {mode} converted to RGB"


@contextlib.contextmanager
def _pil_pixel_limit(max_pixels: int) -> Iterator[None]:
    """Set Pillow's decompression-bomb limit to ours while a file is opened.

    Pillow warns above ``MAX_IMAGE_PIXELS`` and refuses above twice that; our own check
    (same number) runs first, so the warning is silenced and the value is restored after.
    """
    from PIL import Image

    with _PIL_LOCK:
        old = Image.MAX_IMAGE_PIXELS
        Image.MAX_IMAGE_PIXELS = int(max_pixels)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", Image.DecompressionBombWarning)
                yield
        finally:
            Image.MAX_IMAGE_PIXELS = old


# --------------------------------------------------------------------------------------------
# selection of plane and channels


def _normalise_channel(channel: int | Sequence[int] | None) -> tuple[int, ...] | None:
    if channel is None:
        return None
    if isinstance(channel, (int, np.integer)) and not isinstance(channel, bool):
        values: tuple[int, ...] = (int(channel),)
    else:
        try:
            values = tuple(int(c) for c in channel)  # type: ignore[union-attr]
        except (TypeError, ValueError):
            raise ValueError(
                f"channel must be an index or a list of indices, got {channel!r}"
            ) from None
    if not values:
        raise ValueError("channel must name at least one channel index")
    if any(c < 0 for c in values):
        raise ValueError(f"channel indices must be ≥ 0, got {list(values)}")
    return values


def _normalise_plane(plane: int | str | None) -> int | str | None:
    if plane is None:
        return None
    if isinstance(plane, str):
        if plane.strip().lower() == "max":
            return "max"
        try:
            plane = int(plane)
        except ValueError:
            raise ValueError(f"plane must be an index ≥ 0 or 'max', got {plane!r}") from None
    if isinstance(plane, bool) or not isinstance(plane, (int, np.integer)) or plane < 0:
        raise ValueError(f"plane must be an index ≥ 0 or 'max', got {plane!r}")
    return int(plane)


def _select(
    path: Path,
    stack: np.ndarray,
    axes: str,
    fmt: str,
    source: _Source,
    channels: tuple[int, ...] | None,
    plane: int | str | None,
) -> LoadedImage:
    n_planes, h, w, n_chan = stack.shape
    planes_in_file = n_planes
    notes = list(source.notes)
    if source.pages_ambiguous and channels is not None and plane is None:
        # plain pages declared to be channels
        stack = np.moveaxis(stack[..., 0], 0, -1)[None]
        n_planes, h, w, n_chan = stack.shape
        notes.append(f"{n_chan} pages read as channels")
    if n_planes > 1 and plane is None:
        what = f"{n_planes} pages" if source.pages_ambiguous else f"{n_planes} planes"
        hint = "choose one with --plane INDEX or --plane max"
        if source.pages_ambiguous:
            hint += ", or read the pages as channels with --channel 0,1,..."
        raise ImageReadError(f"{path}: multi-plane stack of {what}; {hint}")
    if isinstance(plane, int) and plane >= n_planes:
        raise ImageReadError(
            f"{path}: --plane {plane} is out of range; the file has {n_planes} "
            f"plane{'s' if n_planes != 1 else ''} (0..{n_planes - 1})"
        )
    if plane == "max":
        image = stack.max(axis=0)
        if n_planes > 1:
            notes.append(f"maximum projection over {n_planes} planes")
    else:
        image = stack[plane or 0]
    if channels is not None:
        bad = [c for c in channels if c >= n_chan]
        if bad:
            raise ImageReadError(
                f"{path}: --channel {bad[0]} is out of range; the image has {n_chan} "
                f"channel{'s' if n_chan != 1 else ''} (0..{n_chan - 1})"
            )
        image = image[..., list(channels)]
    image = np.ascontiguousarray(image[..., 0] if image.shape[-1] == 1 else image)

    kind = image.dtype.kind
    if kind not in "uif":
        raise ImageReadError(f"{path}: unsupported sample type {image.dtype} (need integer/float)")
    if kind == "f":
        bad = int(np.count_nonzero(~np.isfinite(image)))
        if bad:
            raise ImageReadError(
                f"{path}: {bad:,} sample{'s are' if bad != 1 else ' is'} NaN or infinite; "
                "replace them before segmenting"
            )
    return LoadedImage(
        pixels=image,
        path=path,
        format=fmt,
        source_shape=source.shape,
        source_axes=source.axes,
        source_dtype=source.dtype,
        channels=channels,
        plane=plane,
        n_planes=int(planes_in_file),
        n_channels=int(n_chan),
        notes=tuple(notes),
    )


def _reason(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return text[:160]


# --------------------------------------------------------------------------------------------
# atomic writes


def atomic_write(path: str | os.PathLike[str], data: bytes, *, overwrite: bool = True) -> Path:
    """Write ``data`` to ``path`` so that the file is either complete or absent.

    Parameters
    ----------
    path : str or os.PathLike
        Destination; its folder must exist.
    data : bytes
        The whole file content.
    overwrite : bool, default True
        Replace an existing file. When False an existing file raises ``FileExistsError``
        and is left untouched.

    Returns
    -------
    pathlib.Path
        The destination path.

    Raises
    ------
    FileExistsError
        ``overwrite`` is False and the file exists.
    OSError
        The folder is missing or not writable, or the disk is full; no file is left behind.

    Notes
    -----
    The bytes go to a hidden temporary file ``.<name>.<random>.imgcut-partial`` in the same
    folder (so the final rename never crosses file systems), are flushed with ``fsync``,
    given the permissions a normal new file would get (the process umask), and renamed over
    the destination with ``os.replace``, which is atomic on POSIX and Windows. A process
    killed mid-write leaves at most a ``*.imgcut-partial`` file, never a truncated output;
    :func:`stale_partials` finds such leftovers.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a.txt"
    >>> atomic_write(p, b"hello").read_bytes()
    b'hello'
    """
    path = Path(path)
    if not overwrite and path.exists():
        raise FileExistsError(f"{path}: already exists")
    fd, tmp_name = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=PARTIAL_SUFFIX)
    tmp = Path(tmp_name)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_umask())
        if not overwrite and path.exists():
            raise FileExistsError(f"{path}: already exists")
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
    return path


def stale_partials(path: str | os.PathLike[str]) -> list[Path]:
    """Temporary files that an interrupted :func:`atomic_write` to ``path`` left behind.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> stale_partials(pathlib.Path(tempfile.mkdtemp()) / "a.png")
    []
    """
    path = Path(path)
    if not path.parent.is_dir():
        return []
    return sorted(path.parent.glob(f".{_glob_escape(path.name)}.*{PARTIAL_SUFFIX}"))


def _glob_escape(name: str) -> str:
    return "".join(f"[{c}]" if c in "*?[]" else c for c in name)


def _umask() -> int:
    # os.umask can only be read by setting it; do it under a lock and restore at once
    with _UMASK_LOCK:
        mask = os.umask(0o022)
        os.umask(mask)
    return mask


_UMASK_LOCK = threading.Lock()
