"""Tests of ``imgcut.cli.main``'s process set-up (the console script's entry point)."""

from __future__ import annotations

import pytest


def test_console_script_switches_numpy_hugepage_advice_off_unless_asked(monkeypatch):
    # NumPy's documented switch is the NUMPY_MADVISE_HUGEPAGE variable (numpy.org, "Global
    # state"); when the user sets it, the command line must leave NumPy's choice alone.
    import imgcut.cli as cli

    multiarray = cli._numpy_multiarray()
    if not hasattr(multiarray, "_set_madvise_hugepage"):
        pytest.skip("this NumPy has no huge-page switch")

    before = multiarray._get_madvise_hugepage()
    try:
        multiarray._set_madvise_hugepage(True)
        monkeypatch.setenv("NUMPY_MADVISE_HUGEPAGE", "1")
        assert cli._no_numpy_hugepages() is False
        assert multiarray._get_madvise_hugepage() is True
        monkeypatch.delenv("NUMPY_MADVISE_HUGEPAGE")
        assert cli._no_numpy_hugepages() is True
        assert multiarray._get_madvise_hugepage() is False
    finally:
        multiarray._set_madvise_hugepage(before)
