"""File names built from historian text: batch ids, units, recipes (one helper for all).

Whatever a batch id holds (``../``, ``/``, ``\\``, control characters, markup, emoji,
500 characters), `safe_name` makes a name that stays in the folder it is joined to:
ASCII letters, digits, ``-``, ``_`` and ``.`` only, never ``..`` nor a leading dot,
length-limited, and ended by a hash of the whole text so two different ids never share
a name — also on case-insensitive file systems, and after the readable part was cut
or lost its accents. `inside` joins a name to a folder and checks the result is in it.
"""

from __future__ import annotations

import hashlib
import re
import unicodedata
from pathlib import Path

#: Hex digits of the hash that ends every name (48 bits).
HASH_DIGITS = 12
#: Longest name `safe_name` makes by default, suffix included [characters].
MAX_NAME = 96

_OUTSIDE = re.compile(r"[^A-Za-z0-9._-]+")
_DOTS = re.compile(r"\.{2,}")
_SUFFIX = re.compile(r"(\.[A-Za-z0-9]+)*")


def safe_name(text: str, suffix: str = "", *, max_len: int = MAX_NAME) -> str:
    """A file name for ``text``, ending in ``suffix`` (such as ``".pdf"``).

    The readable part keeps ASCII letters, digits, ``-``, ``_`` and ``.`` (accented
    letters lose their accents; anything else becomes ``_``), with no ``..`` and no dot,
    dash or underscore at either end; then ``-`` and the first `HASH_DIGITS` hex digits
    of the SHA-256 of the exact text.

    Examples
    --------
    >>> safe_name("TW26-0063 [rework]", ".pdf")
    'TW26-0063_rework-00e46ef23372.pdf'
    >>> safe_name("../../etc/passwd")
    'etc_passwd-3754d6cb3a38'
    """
    if not _SUFFIX.fullmatch(suffix):
        raise ValueError(f"a suffix is dots and ASCII letters or digits, got {suffix!r}")
    room = max_len - len(suffix) - HASH_DIGITS - 1
    if room < 1:
        raise ValueError(f"max_len {max_len} leaves no room for a name with {suffix!r}")
    plain = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode("ascii")
    stem = _DOTS.sub("_", _OUTSIDE.sub("_", plain)).strip("._-")
    stem = stem[:room].rstrip("._-") or "id"
    digest = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()
    return f"{stem}-{digest[:HASH_DIGITS]}{suffix}"


def inside(folder: str | Path, name: str) -> Path:
    """``folder / name``, refused (`ValueError`) unless it lies inside ``folder``."""
    base = Path(folder).resolve()
    path = (base / name).resolve()
    if path.parent != base:
        raise ValueError(f"{name!r} would leave the folder {base}")
    return path
