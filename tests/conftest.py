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


# --- a PostgreSQL server of the tests' own (tests/pgserver.py) ---------------------------------


@pytest.fixture(scope="session")
def pg_server():
    """A real PostgreSQL server for the whole run, stopped at the end; skipped without one."""
    try:
        import psycopg  # noqa: F401
    except ImportError:
        pytest.skip("no psycopg: pip install -e '.[test]' to test the PostgreSQL journal")
    from pgserver import PgServer, find_bindir

    bindir = find_bindir()
    if bindir is None:
        pytest.skip("no PostgreSQL server binaries (initdb, pg_ctl): the PostgreSQL journal "
                    "is not tested")
    server = PgServer(bindir)
    try:
        server.start()
    except RuntimeError as exc:
        server.stop()
        pytest.skip(f"cannot start a PostgreSQL test server: {exc}")
    yield server
    server.stop()


@pytest.fixture()
def pg_url(pg_server):
    """The URL of a fresh, empty PostgreSQL database of this test's own."""
    return pg_server.url(pg_server.new_database())


@pytest.fixture(params=["sqlite", "postgresql"])
def journal_target(request, tmp_path):
    """Where a journal is, for the tests of the store's guarantees: an SQLite file's path,
    then a fresh PostgreSQL database's URL (skipped when no server can be had)."""
    if request.param == "sqlite":
        return str(tmp_path / "data" / "journal.sqlite3")
    return request.getfixturevalue("pg_url")
