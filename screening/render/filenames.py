"""File names for building ids: ``safe_filename`` and ``assign_filenames`` (pure).

The rule is in DEVELOPERS.md "File names for building ids".
"""

from __future__ import annotations

import hashlib
import re
import unicodedata
from collections.abc import Sequence

from ..errors import RenderError

_WINDOWS_RESERVED = {
    "CON",
    "PRN",
    "AUX",
    "NUL",
    "CLOCK$",
    "CONIN$",
    "CONOUT$",
    *(f"COM{i}" for i in "0123456789¹²³"),
    *(f"LPT{i}" for i in "0123456789¹²³"),
}
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_MAX_READABLE = 60
_HASH_LEN = 10


def _id_hash(building_id: str, n: int = _HASH_LEN) -> str:
    return hashlib.sha256(building_id.encode("utf-8", "surrogatepass")).hexdigest()[:n]


def safe_filename(building_id: str) -> str:
    """Map a building id to a file stem that is safe on Linux, macOS and Windows.

    The readable part keeps ASCII letters, digits, ``.``, ``_`` and ``-`` (after NFKD
    folding of accents); every other run of characters becomes one ``_``; leading dots,
    dashes and underscores and trailing dots are stripped; it is cut to 60 characters.
    When that changed anything, or the result is empty or a Windows device name
    (CON, NUL, COM1 ... with any extension; then prefixed with ``id_``), ``-`` plus the first 10 hex digits of SHA-256 of the UTF-8 id
    is appended, so two ids that sanitize alike still get different stems. An id that is
    already safe is kept unchanged. Deterministic; no I/O.
    """
    if not isinstance(building_id, str):
        raise TypeError(f"building_id must be a str, got {type(building_id).__name__}: {building_id!r}")
    folded = unicodedata.normalize("NFKD", building_id).encode("ascii", "ignore").decode("ascii")
    readable = _UNSAFE.sub("_", folded).lstrip("._-").rstrip(". ")[:_MAX_READABLE].rstrip(". ")
    reserved = readable.split(".")[0].upper() in _WINDOWS_RESERVED
    if readable == building_id and readable and not reserved:
        return readable
    if reserved:  # Windows reserves "COM1" with any extension too: move the name off it
        readable = f"id_{readable}"
    return f"{readable or 'building'}-{_id_hash(building_id)}"


def assign_filenames(ids: Sequence[str]) -> dict[str, str]:
    """Safe, unique, deterministic file stems for a list of distinct building ids.

    Starts from :func:`safe_filename`; stems that are equal when compared without case
    (they would overwrite each other on Windows and macOS) all get the id's hash appended,
    and then longer hashes until no two stems collide. The result does not depend on the
    order of ``ids``.
    """
    ids = list(ids)
    seen: set[str] = set()
    for bid in ids:
        if bid in seen:
            raise ValueError(f"assign_filenames: building id {bid!r} appears more than once")
        seen.add(bid)
    stems = {bid: safe_filename(bid) for bid in sorted(ids)}
    n = _HASH_LEN
    while True:
        groups: dict[str, list[str]] = {}
        for bid, stem in stems.items():
            groups.setdefault(stem.casefold(), []).append(bid)
        clashes = [g for g in groups.values() if len(g) > 1]
        if not clashes:
            return {bid: stems[bid] for bid in ids}
        n += 6
        if n > 64:  # pragma: no cover - would need a SHA-256 collision
            raise RenderError(f"cannot give distinct file names to ids {clashes[0]!r}")
        for group in clashes:
            for bid in group:
                base = safe_filename(bid)
                if base != bid:  # strip the short hash again
                    base = base.rsplit("-", 1)[0]
                stems[bid] = f"{base}-{_id_hash(bid, n)}"
