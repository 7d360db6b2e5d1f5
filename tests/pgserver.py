"""A real PostgreSQL server of the tests' own: initdb and pg_ctl in a temporary folder.

The server's binaries are found by ``pg_config --bindir``, on PATH, or in
``/usr/lib/postgresql/*/bin`` (the newest). It listens on 127.0.0.1 only,
on a free port, and on a unix socket in its folder; it trusts local
connections (it is the tests' alone and lives as long as the test run).
PostgreSQL refuses to run as root: when the tests run as root, initdb and
pg_ctl run as the ``postgres`` account (``runuser``), the folder given to it.

``find_bindir()`` is None when no server can be had; the fixtures in
``conftest.py`` then skip with that reason.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from pathlib import Path

SUPERUSER = "diagnose"


def find_bindir() -> Path | None:
    """The folder holding initdb and pg_ctl, or None."""
    candidates: list[Path] = []
    pg_config = shutil.which("pg_config")
    if pg_config:
        try:
            out = subprocess.run([pg_config, "--bindir"], capture_output=True, text=True,
                                 timeout=10, check=False).stdout.strip()
            if out:
                candidates.append(Path(out))
        except (OSError, subprocess.SubprocessError):
            pass
    initdb = shutil.which("initdb")
    if initdb:
        candidates.append(Path(os.path.realpath(initdb)).parent)

    def version(folder: str) -> tuple[int, ...]:
        name = Path(folder).parent.name
        return tuple(int(p) for p in name.split(".") if p.isdigit())

    candidates += [Path(p) for p in sorted(glob.glob("/usr/lib/postgresql/*/bin"), key=version,
                                           reverse=True)]
    for folder in candidates:
        if (folder / "initdb").is_file() and (folder / "pg_ctl").is_file():
            return folder
    return None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class PgServer:
    """One server in a temporary folder: ``start``, ``url``, ``new_database``, ``stop``."""

    def __init__(self, bindir: Path) -> None:
        self.bindir = bindir
        self.base = Path(tempfile.mkdtemp(prefix="diagnose-pg-"))
        self.data = self.base / "data"
        self.socket_dir = self.base / "sock"
        self.socket_dir.mkdir()
        self.port = 0
        self._as: list[str] = []
        self._databases = 0
        if os.geteuid() == 0:
            try:
                account = pwd.getpwnam("postgres")
            except KeyError:
                raise RuntimeError("running as root, and there is no postgres account to run "
                                   "the test server as") from None
            runuser = shutil.which("runuser")
            self._as = ([runuser, "-u", "postgres", "--"] if runuser
                        else ["su", "postgres", "-s", "/bin/sh", "-c"])
            for path in (self.base, self.socket_dir):
                os.chown(path, account.pw_uid, account.pw_gid)

    def _run(self, *argv: str, timeout: float = 120) -> subprocess.CompletedProcess[str]:
        if self._as and self._as[0] == "su":
            import shlex

            cmd = [*self._as, " ".join(shlex.quote(a) for a in argv)]
        else:
            cmd = [*self._as, *argv]
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False,
                             cwd=self.base)
        if res.returncode != 0:
            raise RuntimeError(f"{Path(argv[0]).name} failed: {res.stderr.strip()[-500:]}")
        return res

    def start(self) -> PgServer:
        self._run(str(self.bindir / "initdb"), "-D", str(self.data), "-U", SUPERUSER,
                  "--auth=trust", "-E", "UTF8", "--locale=C", "--no-sync")
        for _ in range(5):  # a port taken between the check and the start: try another
            self.port = _free_port()
            options = (f"-c listen_addresses=127.0.0.1 -p {self.port} "
                       f"-c unix_socket_directories={self.socket_dir} -c fsync=off "
                       "-c full_page_writes=off -c max_connections=60")
            try:
                self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-l",
                          str(self.base / "server.log"), "-o", options, "-w", "-t", "60",
                          "start")
                return self
            except RuntimeError:
                log = self.base / "server.log"
                if log.exists() and "could not bind" in log.read_text(errors="replace"):
                    continue
                raise
        raise RuntimeError("no free port for the test server")

    def url(self, database: str = "postgres", user: str = SUPERUSER,
            password: str | None = None) -> str:
        who = user if password is None else f"{user}:{password}"
        return f"postgresql://{who}@127.0.0.1:{self.port}/{database}"

    def execute(self, sql: str, database: str = "postgres") -> None:
        import psycopg

        with psycopg.connect(self.url(database), autocommit=True) as conn:
            conn.execute(sql)

    def new_database(self) -> str:
        """A fresh, empty database; its name."""
        self._databases += 1
        name = f"t{os.getpid()}_{self._databases}"
        self.execute(f"CREATE DATABASE {name}")
        return name

    def stop(self) -> None:
        try:
            if self.data.exists():
                self._run(str(self.bindir / "pg_ctl"), "-D", str(self.data), "-m", "immediate",
                          "-w", "stop", timeout=60)
        except (RuntimeError, subprocess.SubprocessError):
            pass
        finally:
            shutil.rmtree(self.base, ignore_errors=True)


def is_url(target: str) -> bool:
    return str(target).startswith(("postgresql://", "postgres://"))


def raw_sql(target: str | Path, sql: str, params: tuple = ()) -> list[tuple]:
    """Run ``sql`` on the journal ``target`` behind the program's back (a test altering a
    row, counting rows); ``?`` placeholders, as SQLite has them. Returns the rows."""
    if is_url(str(target)):
        import psycopg

        with psycopg.connect(str(target), autocommit=True) as conn:
            cur = conn.execute(sql.replace("?", "%s"), params)
            return cur.fetchall() if cur.description else []
    import sqlite3

    conn = sqlite3.connect(target, isolation_level=None)
    try:
        return conn.execute(sql, params).fetchall()
    finally:
        conn.close()
