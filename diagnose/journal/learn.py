"""Cause priors learned from closed repairs: a Dirichlet update on top of the pack's own.

The pack's priors say how often each cause is the one found, per 1,000
service calls. Read as a Dirichlet prior over the share of each known cause,
they count as ``weight`` pseudo-observations (``DEFAULT_WEIGHT`` = 20: the
trainers' estimate weighs as much as twenty confirmed repairs). Each closed
session whose cause was confirmed by a cure adds one observation of that
cause. The learned prior is the posterior mean, scaled back so that the
known causes keep the pack's total rate per 1,000 calls:

    α_i = weight · p_i / Σp          (the pack's priors as pseudo-counts)
    p'_i = Σp · (α_i + n_i) / (weight + n)

"None of the known causes" keeps its own prior (``unknown_prior``): a cure
never confirms it. The result is written as JSON beside the journal,
``<journal folder>/learned/<pack>.json``; the trainers' YAML is never
changed, and ``--no-learned`` ignores the file.

References:
    A. Gelman et al., *Bayesian Data Analysis*, 3rd ed., CRC Press 2013,
    section 3.4 (the multinomial model with a Dirichlet prior, posterior
    mean (α_i + n_i) / (Σα + n)).
"""

from __future__ import annotations

import json
import os
from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from diagnose.errors import InputError, JournalError
from diagnose.paths import journal_path, overlay_path

DEFAULT_WEIGHT = 20.0
FORMAT = 1  # version of the overlay file


@dataclass(frozen=True)
class Overlay:
    """Learned priors of one pack, as written beside the journal.

    ``priors`` maps cause id to the learned prior per 1,000 service calls;
    ``counts`` how many confirmed cures each cause had; ``sessions`` their sum.
    """

    pack: str
    content_hash: str
    priors: Mapping[str, float]
    sessions: int
    counts: Mapping[str, int] = field(default_factory=dict)
    weight: float = DEFAULT_WEIGHT
    pack_version: str = ""
    base: Mapping[str, float] = field(default_factory=dict)
    path: Path | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "format": FORMAT, "pack": self.pack, "pack_version": self.pack_version,
            "content_hash": self.content_hash, "weight": self.weight,
            "sessions": self.sessions, "counts": dict(self.counts),
            "priors": {k: round(v, 6) for k, v in self.priors.items()},
            "pack_priors": dict(self.base),
        }


def learned_priors(base: Mapping[str, float], counts: Mapping[str, int],
                   weight: float = DEFAULT_WEIGHT) -> dict[str, float]:
    """The Dirichlet posterior mean of the cause shares, on the scale of ``base``.

    ``base``: the pack's priors (per 1,000 calls); ``counts``: confirmed cures
    per cause (causes not in ``base`` are ignored). With no counts the result is
    ``base`` itself; the total of the priors never changes.

    >>> learned_priors({"a": 10, "b": 30}, {"a": 20}, weight=20)
    {'a': 25.0, 'b': 15.0}
    >>> learned_priors({"a": 10, "b": 30}, {})
    {'a': 10.0, 'b': 30.0}
    """
    if weight <= 0:
        raise InputError("--weight", "the weight of the pack's priors must be above 0")
    total = float(sum(base.values()))
    if total <= 0:
        return {k: float(v) for k, v in base.items()}
    n = sum(int(counts.get(k, 0)) for k in base)
    return {k: total * (weight * float(p) / total + int(counts.get(k, 0))) / (weight + n)
            for k, p in base.items()}


def learn(journal: Any, model: Any, *, weight: float = DEFAULT_WEIGHT) -> Overlay:
    """Learn the priors of ``model`` (compiled with the pack's own priors) from ``journal``.

    Counts the closed sessions of ``model.id`` whose cause was confirmed by a
    cure (see ``diagnose.journal.record.confirmed_cause``), whatever version
    of the pack they ran on, as long as the cause is still in the pack.
    """
    from diagnose.journal.record import session_record

    counts: Counter[str] = Counter()
    for info in journal.sessions("closed", pack_id=model.id):
        cause = session_record(journal, info.id, model).cause
        if cause and cause["id"] in model.causes:
            counts[cause["id"]] += 1
    base = {cid: float(c.prior) for cid, c in model.causes.items()}
    return Overlay(pack=model.id, content_hash=model.content_hash,
                   priors=learned_priors(base, counts, weight), sessions=sum(counts.values()),
                   counts=dict(counts), weight=weight, pack_version=model.version, base=base)


def write_overlay(overlay: Overlay, path: str | os.PathLike[str]) -> Path:
    """Write ``overlay`` as JSON to ``path`` at once (a temporary file, then a rename)."""
    target = Path(path)
    tmp = target.with_name(target.name + ".tmp")
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp.write_text(json.dumps(overlay.to_dict(), indent=2) + "\n", encoding="utf-8")
        os.replace(tmp, target)
    except OSError as exc:
        raise JournalError(f"cannot write the learned priors {target}: {exc.strerror}") from None
    return target


def read_overlay(path: str | os.PathLike[str]) -> Overlay | None:
    """The overlay stored at ``path``, or None when there is none.

    Raises:
        JournalError: the file cannot be read or is not an overlay.
    """
    source = Path(path)
    try:
        data = json.loads(source.read_text(encoding="utf-8"))
    except (FileNotFoundError, NotADirectoryError):  # nothing learned there (yet)
        return None
    except (OSError, ValueError) as exc:
        raise JournalError(f"the learned priors {source} cannot be read ({exc}); run "
                           "`diagnose learn PACK` again or delete the file") from None
    try:
        priors = {str(k): float(v) for k, v in data["priors"].items()}
        return Overlay(pack=str(data["pack"]), content_hash=str(data.get("content_hash", "")),
                       priors=priors, sessions=int(data.get("sessions", 0)),
                       counts={str(k): int(v) for k, v in data.get("counts", {}).items()},
                       weight=float(data.get("weight", DEFAULT_WEIGHT)),
                       pack_version=str(data.get("pack_version", "")),
                       base={str(k): float(v) for k, v in data.get("pack_priors", {}).items()},
                       path=source)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise JournalError(f"the learned priors {source} are not in the expected form "
                           f"({exc!r}); run `diagnose learn PACK` again or delete the file"
                           ) from None


def overlay_for(pack_id: str, journal: str | os.PathLike[str] | None = None) -> Overlay | None:
    """The learned priors of ``pack_id`` beside the journal (``--journal``, DIAGNOSE_JOURNAL or
    the data folder), or None when none were learned."""
    return read_overlay(overlay_path(journal_path(journal), pack_id))
