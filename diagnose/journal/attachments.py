"""Photos and files attached to a repair log, stored once by their content.

The store is the folder ``attachments`` beside the journal; each file is
kept as ``attachments/<sha256>`` (the SHA-256 of its bytes, FIPS 180-4), so
the same photo attached twice, or to two sessions, is stored once, and a
stored file cannot be changed without its name no longer matching.

A file is checked before it is copied: it must be a regular file (not a
folder, a device or a path through a symbolic link), no larger than
:data:`MAX_BYTES`, and its type is taken from its first bytes, never from
its name. A name that claims an image (``.jpg``, ``.png``, ...) whose bytes
are not one of the image formats below is refused: a photo that is not a
photo is a mistake worth a clear message.

References:
    NIST FIPS 180-4, Secure Hash Standard (SHA-256).
    File signatures: PNG (ISO/IEC 15948, the 8-byte signature), JPEG
    (ISO/IEC 10918-1, SOI marker FF D8 FF), GIF ("GIF87a"/"GIF89a"), WebP
    ("RIFF....WEBP"), PDF ("%PDF-") (from memory).
"""

from __future__ import annotations

import hashlib
import os
import stat
from dataclasses import dataclass
from pathlib import Path

from diagnose.errors import InputError

FOLDER = "attachments"
MAX_BYTES = 20 * 1024 * 1024  # a phone photo is 2 to 8 MB; 20 MB leaves room, bounds the log
IMAGE_NAMES = (".jpg", ".jpeg", ".png", ".gif", ".webp")
_SIGNATURES = (
    (b"\x89PNG\r\n\x1a\n", "image/png"),
    (b"\xff\xd8\xff", "image/jpeg"),
    (b"GIF87a", "image/gif"),
    (b"GIF89a", "image/gif"),
    (b"%PDF-", "application/pdf"),
)


@dataclass(frozen=True)
class Stored:
    """A file in the store: its digest, size, type and the name it had."""

    sha256: str
    size: int
    media_type: str
    name: str

    @property
    def image(self) -> bool:
        return self.media_type.startswith("image/")


def folder_of(journal: str | os.PathLike[str]) -> Path:
    """The attachment store beside ``journal``.

    >>> folder_of("/data/journal.sqlite3").as_posix()
    '/data/attachments'
    """
    from diagnose.paths import journal_path

    return journal_path(journal).parent / FOLDER  # a team journal's: its local folder


def media_type(head: bytes) -> str:
    """The type of a file from its first bytes (``application/octet-stream`` if none fits).

    >>> media_type(b"\\x89PNG\\r\\n\\x1a\\n...."), media_type(b"RIFF\\x00\\x00\\x00\\x00WEBPVP8 ")
    ('image/png', 'image/webp')
    >>> media_type(b"hello")
    'application/octet-stream'
    """
    for sig, kind in _SIGNATURES:
        if head.startswith(sig):
            return kind
    if head[:4] == b"RIFF" and head[8:12] == b"WEBP":
        return "image/webp"
    return "application/octet-stream"


def check(path: str | os.PathLike[str], *, max_bytes: int = MAX_BYTES) -> Stored:
    """What storing ``path`` would keep, without writing anything (the same refusals)."""
    source = Path(path).expanduser()
    data = _read(source, max_bytes)
    return _stored(source, data)


def _stored(source: Path, data: bytes) -> Stored:
    kind = media_type(data[:16])
    if source.suffix.lower() in IMAGE_NAMES and not kind.startswith("image/"):
        raise InputError("attach", f"{source.name} is named as an image, but its content is "
                                   "not a PNG, JPEG, GIF or WebP picture; nothing was attached")
    return Stored(hashlib.sha256(data).hexdigest(), len(data), kind, source.name)


def store(path: str | os.PathLike[str], journal: str | os.PathLike[str], *,
          max_bytes: int = MAX_BYTES) -> Stored:
    """Copy ``path`` into the store beside ``journal`` (once per content); what was stored.

    Raises:
        InputError: not a readable regular file, a symbolic link, too large, or a
            name that claims an image whose bytes are not one.
    """
    source = Path(path).expanduser()
    data = _read(source, max_bytes)
    kept = _stored(source, data)
    target = folder_of(journal) / kept.sha256
    if not _holds(target, kept.sha256):
        _write(target, data)
    return kept


def _read(source: Path, max_bytes: int) -> bytes:
    try:
        info = os.lstat(source)
    except OSError as exc:
        raise InputError("attach", f"cannot read {source}: {exc.strerror}") from None
    if stat.S_ISLNK(info.st_mode):
        raise InputError("attach", f"{source} is a symbolic link; attach the file itself")
    if not stat.S_ISREG(info.st_mode):
        raise InputError("attach", f"{source} is not a file")
    if info.st_size > max_bytes:
        raise InputError("attach", f"{source.name} is {info.st_size / 1e6:.1f} MB; the limit "
                                   f"is {max_bytes / 1e6:.0f} MB (make the photo smaller)")
    try:
        with open(source, "rb") as fh:
            data = fh.read(max_bytes + 1)
    except OSError as exc:
        raise InputError("attach", f"cannot read {source}: {exc.strerror}") from None
    if len(data) > max_bytes:  # it grew while we looked
        raise InputError("attach", f"{source.name} is over the limit of "
                                   f"{max_bytes / 1e6:.0f} MB")
    return data


def _holds(target: Path, digest: str) -> bool:
    """True when the store already holds this content under its digest (and it is intact)."""
    try:
        return hashlib.sha256(target.read_bytes()).hexdigest() == digest
    except OSError:
        return False


def _write(target: Path, data: bytes) -> None:
    from diagnose.paths import replace_atomically

    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError("attach", f"cannot make the folder {target.parent}: "
                                   f"{exc.strerror}") from None
    replace_atomically(target, lambda tmp: tmp.write_bytes(data), field="attach")


def read(journal: str | os.PathLike[str], sha256: str) -> bytes | None:
    """The stored bytes of ``sha256``, or None when missing or no longer matching."""
    target = folder_of(journal) / sha256
    try:
        data = target.read_bytes()
    except OSError:
        return None
    return data if hashlib.sha256(data).hexdigest() == sha256 else None
