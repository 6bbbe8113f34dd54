"""Reading a user's text file with one-line errors (not found, unreadable, not UTF-8)."""

from __future__ import annotations

import hashlib
from pathlib import Path

from .errors import CaseError


def read_user_text(path: str | Path, what: str, encoding: str = "utf-8") -> tuple[str, str]:
    """Text of a user's file and the SHA-256 of its bytes.

    Parameters
    ----------
    path : str or Path
        The file.
    what : str
        What the file should be, for messages (e.g. "a YAML case file").
    encoding : str
        Text encoding ("utf-8-sig" also drops a byte-order mark).

    Raises
    ------
    CaseError
        When the file is missing, unreadable or not UTF-8 text.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise CaseError(str(path), None, "", f"file not found; give the path of {what}") from None
    except OSError as exc:
        raise CaseError(str(path), None, "", f"cannot be read ({exc.strerror}); check the path and permissions") from None
    try:
        text = raw.decode(encoding)
    except UnicodeDecodeError:
        raise CaseError(str(path), None, "", f"is not UTF-8 text; save it as UTF-8 ({what})") from None
    return text, hashlib.sha256(raw).hexdigest()
