"""Fixtures shared by every test: a clean colour environment and a private journal."""

from __future__ import annotations

import pytest


@pytest.fixture(autouse=True)
def _clean_environment(monkeypatch, tmp_path_factory):
    """The tester's terminal settings and journal cannot change or receive results."""
    for name in ("FORCE_COLOR", "NO_COLOR", "DIAGNOSE_PACKS", "COLUMNS", "LINES"):
        monkeypatch.delenv(name, raising=False)
    home = tmp_path_factory.mktemp("home")
    monkeypatch.setenv("DIAGNOSE_JOURNAL", str(home / "journal.sqlite3"))
    monkeypatch.setenv("XDG_DATA_HOME", str(home / "data"))
    monkeypatch.setenv("XDG_STATE_HOME", str(home / "state"))
    monkeypatch.setenv("XDG_CACHE_HOME", str(home / "cache"))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(home / "config"))  # not the tester's settings
    monkeypatch.delenv("DIAGNOSE_SETTINGS", raising=False)
    monkeypatch.setenv("DIAGNOSE_DEBUG", "1")  # a bug is a traceback in a test, not one line
