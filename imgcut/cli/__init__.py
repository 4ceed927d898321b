"""imgcut command line: a thin layer over the library (parsing, files, progress, messages)."""

import os

from imgcut.cli import batch_cmd, evaluate_cmd, segment_cmd  # noqa: F401  (registers commands)
from imgcut.cli._app import app

__all__ = ["app", "main"]


@app.callback()
def _root() -> None:
    """Segment images by normalized cuts; export label images, overlays and scores."""


def _numpy_multiarray():
    """NumPy's ``multiarray`` module (``numpy._core`` from NumPy 2, ``numpy.core`` before)."""
    try:
        from numpy._core import multiarray
    except ImportError:  # pragma: no cover - NumPy 1.x
        from numpy.core import multiarray
    return multiarray


def _no_numpy_hugepages() -> bool:
    """Stop NumPy from marking large arrays for transparent huge pages, in this process.

    On Linux, NumPy calls ``madvise(MADV_HUGEPAGE)`` on every array over 4 MB. Where the
    kernel's ``transparent_hugepage/defrag`` is ``madvise`` (a common default), a page fault
    in such memory can stall on synchronous compaction once memory is fragmented (NumPy
    issue 31590). Measured here on a 2048 x 2048 field, same machine state, alternating runs:
    14.1 and 14.6 s without the advice, 24.9 and 21.8 s with it (docs/performance.md).
    An explicit ``NUMPY_MADVISE_HUGEPAGE`` in the environment (NumPy's documented switch) is
    respected. Only the command line does this; the library leaves NumPy's state alone.

    Returns
    -------
    bool
        True when the advice was switched off here.
    """
    if "NUMPY_MADVISE_HUGEPAGE" in os.environ:
        return False
    multiarray = _numpy_multiarray()
    setter = getattr(multiarray, "_set_madvise_hugepage", None)
    if setter is None:  # pragma: no cover - a NumPy without the switch
        return False
    setter(False)
    return True


def main() -> None:
    """Entry point of the ``imgcut`` console script."""
    _no_numpy_hugepages()
    app()
