"""Writing files safely: whole or not at all, and never over a file that exists unless asked."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


class FileExists(FileExistsError):
    pass


def _temp_beside(path: Path, data: bytes) -> Path:
    fd, name = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as out:
            out.write(data)
            out.flush()
            os.fsync(out.fileno())
    except BaseException:
        os.unlink(name)
        raise
    return Path(name)


def write_new(path: Path, data: str | bytes) -> None:
    """Create ``path`` atomically; raise :class:`FileExists` (and write nothing) if it is already there."""
    raw = data.encode("utf-8") if isinstance(data, str) else data
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.exists():
        raise FileExists(f"{path} already exists; choose another id or edit the file")
    tmp = _temp_beside(path, raw)
    try:
        os.link(tmp, path)  # fails if the name appeared meanwhile: no overwrite, even in a race
    except FileExistsError:
        raise FileExists(f"{path} already exists; choose another id or edit the file") from None
    finally:
        tmp.unlink()


def write_replace(path: Path, data: str | bytes) -> None:
    """Write ``path`` atomically, replacing any earlier version (for generated files only)."""
    raw = data.encode("utf-8") if isinstance(data, str) else data
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = _temp_beside(path, raw)
    os.replace(tmp, path)
