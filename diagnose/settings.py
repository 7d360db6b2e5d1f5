"""The user's settings file: what a technician sets once instead of typing it every time.

The file is ``settings.toml`` in the user's config folder
(:func:`diagnose.paths.config_dir`: ``~/.config/diagnose/settings.toml`` on
Linux, ``$XDG_CONFIG_HOME/diagnose/settings.toml`` when that is set), or the
file the environment variable ``DIAGNOSE_SETTINGS`` names. It is TOML, read
with the standard library's ``tomllib``; every key may be left out::

    units = "inch"              # "metric" (default) or "inch"
    technician = "A. Example"   # the default of --who
    mode = "site"               # "site" (default) or "phone": the mode of `diagnose start`
    journal = "~/jobs/journal.sqlite3"   # or a team journal: "postgresql://ana@desk/jobs"
    team_journal = "postgresql://ana@desk/jobs"   # where `diagnose sync` sends to

``units = "inch"``: a bare number typed for a length measured in mm (an air
gap, a runout, a wear) is taken in inches, and lengths are shown in inches
with millimetres beside them; the ``--units`` option says the same for one
command. ``journal`` comes after ``--journal`` and ``DIAGNOSE_JOURNAL`` and
before the data folder (see :mod:`diagnose.paths`); ``~`` is the home folder
and a relative path is taken from the settings file's folder. ``team_journal``
is the team journal ``diagnose sync`` sends to when ``--to`` is not given
(after ``DIAGNOSE_TEAM_JOURNAL``).

A missing file means the defaults (unless ``DIAGNOSE_SETTINGS`` names it:
then it is an error). A broken file is one line that names the file and the
key: not TOML, an unknown key (with "did you mean" when one is close), a
value of the wrong type or not one of the choices.

References:
    TOML v1.0.0 (https://toml.io/en/v1.0.0); Python ``tomllib`` (PEP 680).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

ENV_SETTINGS = "DIAGNOSE_SETTINGS"
FILE_NAME = "settings.toml"
#: The unit systems a technician may prefer.
UNITS = ("metric", "inch")
#: The modes a diagnosis may start in (``diagnose start --mode``).
MODES = ("site", "phone")
#: Largest settings file read; a larger one is refused.
MAX_BYTES = 64 * 1024
#: Longest technician name.
MAX_NAME = 200


@dataclass(frozen=True)
class Preferences:
    """What the settings file says (the defaults where it says nothing).

    ``source`` is the file read ("" when there was none).
    """

    units: str = "metric"
    technician: str | None = None
    mode: str = "site"
    journal: str | None = None
    source: str = ""
    team_journal: str | None = None  # where `diagnose sync` sends to


#: The keys of the file and what each must be: the choices, or None for free text.
KEYS: dict[str, tuple[str, ...] | None] = {"units": UNITS, "technician": None,
                                            "mode": MODES, "journal": None,
                                            "team_journal": None}


def settings_path(env: Mapping[str, str] | None = None) -> Path | None:
    """The settings file: ``DIAGNOSE_SETTINGS``, or settings.toml in the config folder.

    None when there is no home folder to look in.
    """
    env = os.environ if env is None else env
    chosen = env.get(ENV_SETTINGS, "")
    if chosen:
        return Path(chosen).expanduser()
    from diagnose.paths import config_dir

    try:
        return config_dir(env) / FILE_NAME
    except (RuntimeError, KeyError, OSError):
        return None


def load_preferences(env: Mapping[str, str] | None = None) -> Preferences:
    """The user's preferences from the settings file; the defaults when there is none.

    Raises:
        InputError: the file is broken (the field is the file; the message names the key),
            or ``DIAGNOSE_SETTINGS`` names a file that is not there.

    >>> load_preferences({"DIAGNOSE_SETTINGS": "", "XDG_CONFIG_HOME": "/nonexistent"}).units
    'metric'
    """
    env = os.environ if env is None else env
    path = settings_path(env)
    if path is None:
        return Preferences()
    data = _read(path, named=bool(env.get(ENV_SETTINGS, "")))
    return Preferences() if data is None else preferences_from(data, path)


def preferences_from(data: Mapping[str, Any], path: str | os.PathLike[str]) -> Preferences:
    """The preferences in ``data`` (a settings file's table), each key checked.

    Raises:
        InputError: an unknown key, a value of the wrong type or not one of the choices.

    >>> preferences_from({"units": "inch", "technician": " A. Example "}, "s.toml").technician
    'A. Example'
    """
    from diagnose.errors import InputError

    where = str(path)
    for key in data:
        if key not in KEYS:
            raise InputError(where, f"unknown key {key!r}{_did_you_mean(key, KEYS)}; the keys "
                                    f"are {', '.join(KEYS)}")
    values = {key: _value(where, key, data[key]) for key in KEYS if key in data}
    journal = values.get("journal")
    from diagnose.paths import is_journal_url

    if journal and not is_journal_url(journal):  # a team journal's URL is taken as it is
        folder = Path(path).expanduser().parent
        values["journal"] = str(folder / Path(journal).expanduser())  # absolute stays absolute
    return Preferences(**values, source=where)


def _read(path: Path, *, named: bool) -> dict[str, Any] | None:
    """The table of the TOML file ``path``; None when it is missing and was not named."""
    from diagnose.errors import InputError

    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_BYTES + 1)
    except FileNotFoundError:
        if named:
            raise InputError(ENV_SETTINGS, f"names {path}, which does not exist") from None
        return None
    except IsADirectoryError:
        raise InputError(str(path), "is a folder, not a settings file") from None
    except OSError as exc:
        raise InputError(str(path), f"cannot be read: {exc.strerror or exc}") from None
    if len(raw) > MAX_BYTES:
        raise InputError(str(path), f"is larger than {MAX_BYTES // 1024} KiB; a settings file "
                                    "is a few lines")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(str(path), f"is not UTF-8 text (byte {exc.start})") from None
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # the same parser, before it joined the standard library (PEP 680)
        import tomli as tomllib

    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(str(path), f"is not valid TOML: {exc}") from None


def _value(where: str, key: str, value: Any) -> str | None:
    """The checked value of ``key``: one of its choices, or plain text (None when empty)."""
    from diagnose.errors import InputError
    from diagnose.text import excerpt, unsafe

    choices = KEYS[key]
    if not isinstance(value, str):
        expected = " or ".join(f'"{c}"' for c in choices) if choices else "text in quotes"
        raise InputError(where, f"{key} must be {expected}, not {_type_word(value)}")
    if choices is not None:
        if value not in choices:
            listed = " or ".join(f'"{c}"' for c in choices)
            raise InputError(where, f"{key} must be {listed}, not {excerpt(value)!r}"
                                    f"{_did_you_mean(value, choices)}")
        return value
    bad = unsafe(value)
    if bad is not None:
        raise InputError(where, f"{key} holds a control character ({bad})")
    if key == "technician" and len(value) > MAX_NAME:
        raise InputError(where, f"{key} is longer than {MAX_NAME} characters")
    return value.strip() or None


def _type_word(value: Any) -> str:
    """What a TOML value is, in words: "a number", "a table", "true"."""
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "a list"
    return f"a {type(value).__name__}"


def _did_you_mean(word: str, known: Any) -> str:
    """The note " (did you mean 'x'?)" when one of ``known`` is close to ``word``, else ""."""
    import difflib

    close = difflib.get_close_matches(str(word).lower(), list(known), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""
