"""Reading a user's text file with one-line errors (not found, unreadable, not UTF-8)."""

from __future__ import annotations

import hashlib
from pathlib import Path

from .errors import CaseError

#: Largest text file read (case files and readings are kilobytes; this refuses a wrong file quickly).
MAX_TEXT_BYTES = 20_000_000


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
        When the file is missing, unreadable, larger than MAX_TEXT_BYTES or not UTF-8 text.
    """
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_TEXT_BYTES:
            raise CaseError(str(path), None, "", f"is {size / 1e6:,.0f} MB; {what} is at most {MAX_TEXT_BYTES / 1e6:.0f} MB: "
                                                 "check that this is the right file")
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
