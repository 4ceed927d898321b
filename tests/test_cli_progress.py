"""Tests of ``imgcut.cli._progress``: the one progress helper of every command."""

from __future__ import annotations

import io

from imgcut.cli._progress import CountingBar, StageSpinner


class Terminal(io.StringIO):
    """A text stream that says it is a terminal, so the rich line is drawn."""

    def isatty(self) -> bool:
        return True


def test_stage_spinner_names_each_stage_on_a_terminal():
    screen = Terminal()
    with StageSpinner("cells.png", stream=screen) as tell:
        assert tell.live
        tell("read")
        tell("segment")
        tell.say("a [bold]message")
    text = screen.getvalue()
    assert "cells.png: starting" in text or "cells.png: reading" in text
    assert "a [bold]message" in text  # literal, not rich markup


def test_stage_spinner_is_silent_off_a_terminal_and_when_quiet():
    for stream, quiet in ((io.StringIO(), False), (Terminal(), True)):
        with StageSpinner("cells.png", stream=stream, quiet=quiet) as tell:
            assert not tell.live
            tell("read")
        assert stream.getvalue() == ""


def test_counting_bar_shows_counts_and_fields():
    screen = Terminal()
    with CountingBar("work", "{task.fields[failed]} failed", stream=screen) as bar:
        bar.show(total=4, completed=0, failed=0)
        bar.show(completed=3, failed=1)
    text = screen.getvalue()
    assert "3/4" in text and "1 failed" in text


def test_plain_lines_off_a_terminal():
    stream = io.StringIO()
    with CountingBar("work", "", stream=stream) as bar:
        bar.show(total=2, completed=1)  # no live line: nothing drawn
        bar.say("one line")
    assert stream.getvalue() == "one line\n"


def test_evaluate_bar_counts_failures(monkeypatch):
    import sys

    from imgcut.cli.evaluate_cmd import _Bar

    screen = Terminal()
    monkeypatch.setattr(sys, "stderr", screen)
    with _Bar(3, quiet=False) as bar:
        bar("a", None)
        bar("b", "bad [x]")
        bar("c", None)
    text = screen.getvalue()
    assert "3/3" in text and "1 failed" in text and "b: failed, skipped: bad [x]" in text
