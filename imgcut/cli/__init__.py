"""imgcut command line: a thin layer over the library (parsing, files, progress, messages)."""

from imgcut.cli import batch_cmd, evaluate_cmd, segment_cmd  # noqa: F401  (registers commands)
from imgcut.cli._app import app

__all__ = ["app", "main"]


@app.callback()
def _root() -> None:
    """Segment images by normalized cuts; export label images, overlays and scores."""


def main() -> None:
    """Entry point of the ``imgcut`` console script."""
    app()
