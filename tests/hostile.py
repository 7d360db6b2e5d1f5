"""Running the program on hostile input in a subprocess under resource limits.

The child gets 200 MB of address space and 5 s of CPU; the run must end
within 2 s of wall time (stretched by the load average when the machine has
more tasks than cores) and use less than 2 s of CPU, without a traceback.
It gets no colour, one numeric thread and never the tester's
``DIAGNOSE_PACKS``; unless the test names a journal of its own, it works on a
copy of a journal holding one recorded session, which must be byte for byte
the same afterwards: hostile input never changes what was recorded.
"""

from __future__ import annotations

import functools
import os
import shutil
import subprocess
import sys
import tempfile
from collections.abc import Mapping
from pathlib import Path

import pytest

resource = pytest.importorskip("resource")  # POSIX only: the limits below need it

MINI = Path(__file__).parent / "fixtures" / "mini"
WALL_SECONDS = 2.0
# The address-space limit measures memory only with one malloc arena: glibc reserves 64 MB
# of address space for each thread's arena, and under the limit a second arena fails and
# malloc keeps retrying (the shell loads its pack on a thread while the notice is read).
# One numeric thread for the same reason.
ADDRESS_SPACE = 200 * 1024 * 1024
CPU_SECONDS = 5


def _limits() -> None:
    """Run in the child before exec: bounded memory and CPU time."""
    resource.setrlimit(resource.RLIMIT_AS, (ADDRESS_SPACE, ADDRESS_SPACE))
    resource.setrlimit(resource.RLIMIT_CPU, (CPU_SECONDS, CPU_SECONDS))


#: A child that sets the limits on itself, then becomes ``python -m diagnose ARGS``; for
#: spawners that cannot run code before exec (a pseudo-terminal).
_EXEC_LIMITED = (
    "import os, resource, sys\n"
    "os.environ.update(MALLOC_ARENA_MAX='1', OPENBLAS_NUM_THREADS='1', OMP_NUM_THREADS='1')\n"
    f"resource.setrlimit(resource.RLIMIT_AS, ({ADDRESS_SPACE}, {ADDRESS_SPACE}))\n"
    f"resource.setrlimit(resource.RLIMIT_CPU, ({CPU_SECONDS}, {CPU_SECONDS}))\n"
    "os.execv(sys.executable, [sys.executable, '-m', 'diagnose', *sys.argv[1:]])\n"
)


def limited_argv(*argv: str) -> list[str]:
    """The argv of ``python -m diagnose ARGV`` under the limits, for any spawner."""
    return [sys.executable, "-c", _EXEC_LIMITED, *argv]


class CpuBudget:
    """``with CpuBudget("what"):`` fails the test when children reaped inside used 2 s of CPU."""

    def __init__(self, what: str) -> None:
        self.what = what

    def __enter__(self) -> CpuBudget:
        self.before = resource.getrusage(resource.RUSAGE_CHILDREN)
        return self

    def __exit__(self, *exc: object) -> None:
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu = (after.ru_utime - self.before.ru_utime) + (after.ru_stime - self.before.ru_stime)
        assert cpu < WALL_SECONDS, f"{self.what} used {cpu:.1f} s of CPU"


def wall_seconds() -> float:
    """WALL_SECONDS, stretched by the load average when there are more tasks than cores."""
    busy = os.getloadavg()[0] / (os.cpu_count() or 1)
    return WALL_SECONDS * min(max(1.0, busy), 5.0)


def diagnose(*argv: str, env: Mapping[str, str] | None = None,
             cwd: str | os.PathLike[str] | None = None) -> subprocess.CompletedProcess[str]:
    """The program with ``argv``, limited; fails the test when it runs too long.

    ``env`` adds to (or, with an empty value, removes from) the environment
    the child gets.
    """
    child = {k: v for k, v in os.environ.items() if k not in ("DIAGNOSE_PACKS", "FORCE_COLOR")}
    child.update(OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", NO_COLOR="1", COLUMNS="100",
                 MALLOC_ARENA_MAX="1")
    journal = None
    if "DIAGNOSE_JOURNAL" not in (env or {}) and "--journal" not in argv:
        journal = Path(tempfile.mkdtemp(prefix="hostile-")) / "journal.sqlite3"
        shutil.copyfile(_seeded_journal(), journal)
        child["DIAGNOSE_JOURNAL"] = str(journal)
        recorded = journal.read_bytes()
    for key, value in (env or {}).items():
        if value:
            child[key] = value
        else:
            child.pop(key, None)
    wall = wall_seconds()
    shown = " ".join(a[:40] for a in argv)
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    try:
        proc = subprocess.run([sys.executable, "-m", "diagnose", *argv], check=False,
                              capture_output=True, text=True, timeout=wall,
                              preexec_fn=_limits, env=child,
                              cwd=None if cwd is None else str(cwd))
    except subprocess.TimeoutExpired:
        pytest.fail(f"diagnose {shown} ran past {wall:.1f} s")
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    assert cpu < WALL_SECONDS, f"diagnose {shown} used {cpu:.1f} s of CPU"
    assert "Traceback" not in proc.stderr and "Traceback" not in proc.stdout, proc.stderr[-800:]
    if journal is not None:
        assert journal.read_bytes() == recorded, f"diagnose {shown} changed the journal"
        shutil.rmtree(journal.parent, ignore_errors=True)
    return proc


@functools.lru_cache(maxsize=1)
def _seeded_journal() -> Path:
    """A journal with one session recorded on the mini pack (made once per test process)."""
    folder = Path(tempfile.mkdtemp(prefix="hostile-seed-"))
    answers = folder / "answers.yaml"
    answers.write_text("complaints: [will_not_release]\nnotes: [recorded before]\n",
                       encoding="utf-8")
    path = folder / "journal.sqlite3"
    env = {**os.environ, "DIAGNOSE_JOURNAL": str(path)}
    env.pop("DIAGNOSE_PACKS", None)
    subprocess.run([sys.executable, "-m", "diagnose", "run", str(MINI), "--answers",
                    str(answers)], check=True, capture_output=True, env=env)
    return path


def one_line_error(proc: subprocess.CompletedProcess[str], needle: str, code: int = 2) -> str:
    """Assert a one-line message on stderr holding ``needle``, exit ``code``; return it."""
    err = proc.stderr.strip()
    assert proc.returncode == code, (proc.returncode, err[-500:])
    assert len(err.splitlines()) == 1, err[:500]
    assert err.startswith("diagnose: ") and needle in err, err[:500]
    assert len(err) < 400, f"message of {len(err)} characters"
    return err


def lint_lines(proc: subprocess.CompletedProcess[str]) -> list[str]:
    """The problem lines of a ``kb lint`` run (without the verdict line)."""
    return [line for line in proc.stdout.splitlines() if ": error: " in line
            or ": warning: " in line]


def write(path: Path, text: str | bytes) -> Path:
    """Write ``text`` at ``path``, making its folder; return the path."""
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path
