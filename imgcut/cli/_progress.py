"""Progress displays of the imgcut commands: one rich line on a terminal, plain lines elsewhere.

Every command shows progress the same way: on a terminal a rich progress line (a spinner with
the current stage for one image, a bar with counts and the time left for many); on any other
stream (a log file, a job scheduler) plain lines; nothing with ``--quiet``. Messages printed
during the run go above the live line, literally (never read as rich markup).
"""

from __future__ import annotations

import sys
from typing import Any

__all__ = ["Display", "StageSpinner", "CountingBar"]


def _isatty(stream: Any) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # closed or not a real stream
        return False


class Display:
    """Base of the displays: a rich ``Progress`` while live, plain lines otherwise.

    Parameters
    ----------
    stream : file-like, optional
        Where everything goes; default ``sys.stderr``.
    quiet : bool, default False
        Show no progress at all (messages given to :meth:`say` still print).
    transient : bool, default True
        Remove the live line when done.
    """

    def __init__(self, *, stream: Any = None, quiet: bool = False, transient: bool = True) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.quiet = quiet
        self.live = (not quiet) and _isatty(self.stream)
        self.transient = transient
        self._progress: Any = None
        self._task: Any = None

    def _columns(self) -> list[Any]:  # pragma: no cover - every display defines its own
        raise NotImplementedError

    def __enter__(self) -> Any:
        if self.live:
            from rich.console import Console
            from rich.progress import Progress

            self._progress = Progress(
                *self._columns(),
                console=Console(file=self.stream),
                transient=self.transient,
            )
            self._progress.__enter__()
        return self

    def __exit__(self, *exc: object) -> None:
        if self._progress is not None:
            self._progress.__exit__(*exc)
            self._progress = None

    def say(self, text: str) -> None:
        """Print one message line (above the live line when there is one)."""
        if self._progress is not None:
            self._progress.console.print(text, markup=False, highlight=False, soft_wrap=True)
        else:
            print(text, file=self.stream, flush=True)

    def show(self, **fields: Any) -> None:
        """Update the live line (the first call creates it); does nothing when not live."""
        if self._progress is None:
            return
        if self._task is None:
            self._task = self._progress.add_task(fields.pop("description", ""), **fields)
        else:
            self._progress.update(self._task, **fields)


class StageSpinner(Display):
    """A transient spinner naming the current stage of one image and the elapsed time.

    Calling it with a stage name (``"read"``, ``"segment"``, …) updates the line; it is the
    ``progress`` callback of :func:`imgcut.runner.process_image`.
    """

    STAGES = {
        "read": "reading",
        "segment": "segmenting",
        "render": "drawing outputs",
        "write": "writing files",
    }

    def __init__(self, name: str, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.name = name

    def _columns(self) -> list[Any]:
        from rich.progress import SpinnerColumn, TextColumn, TimeElapsedColumn

        return [SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn()]

    def __enter__(self) -> StageSpinner:
        super().__enter__()
        self.show(description=f"{self.name}: starting", total=None)
        return self

    def __call__(self, stage: str) -> None:
        self.show(description=f"{self.name}: {self.STAGES.get(stage, stage)}")


class CountingBar(Display):
    """A bar over a number of items: label, bar, done/total, a fields line, elapsed, time left.

    Parameters
    ----------
    label : str
        Shown before the bar (rich markup allowed).
    fields : str
        A rich ``TextColumn`` format using ``{task.fields[...]}`` of the values passed to
        :meth:`show`.
    """

    def __init__(self, label: str, fields: str, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.label = label
        self.fields = fields

    def _columns(self) -> list[Any]:
        from rich.progress import (
            BarColumn,
            MofNCompleteColumn,
            TextColumn,
            TimeElapsedColumn,
            TimeRemainingColumn,
        )

        return [
            TextColumn(self.label),
            BarColumn(),
            MofNCompleteColumn(),
            TextColumn(self.fields),
            TimeElapsedColumn(),
            TextColumn("ETA"),
            TimeRemainingColumn(),
        ]
