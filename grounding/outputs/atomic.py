"""Atomic file writes: a reader sees either the old file or the whole new one, never half of it."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from ..errors import GroundingError


def write_atomic(path: str | Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file in the same folder and a rename.

    Raises
    ------
    GroundingError
        When the folder does not exist or cannot be written.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise GroundingError(f"{path}: folder '{folder}' does not exist; create it or choose another path")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise GroundingError(f"{path}: cannot write in '{folder}' ({exc.strerror}); choose another path") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise GroundingError(f"{path}: cannot be written ({exc.strerror}); choose another path") from None
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
