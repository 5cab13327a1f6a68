"""Atomic file writes: write to a temporary name in the same folder, then rename.

A reader (or a batch killed with SIGKILL) never sees a half-written file: the rename is
atomic on POSIX file systems when source and target share a folder.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from hsat.errors import OutputError

#: Files and folders hsat creates hold patient data: owner-only by default.
FILE_MODE = 0o600
DIR_MODE = 0o700


def ensure_dir(path: str | Path, mode: int = DIR_MODE) -> Path:
    """Create ``path`` (and parents) readable by the owner only; return it."""
    p = Path(path)
    try:
        p.mkdir(parents=True, exist_ok=True, mode=mode)
    except OSError as exc:
        raise OutputError(p, f"cannot create folder ({exc.strerror})") from None
    if not os.access(p, os.W_OK):
        raise OutputError(p, "folder is not writable")
    return p


def atomic_write_bytes(
    path: str | Path, data: bytes, *, mode: int = FILE_MODE, overwrite: bool = True
) -> Path:
    """Write ``data`` to ``path`` atomically.

    With ``overwrite=False`` an existing file is never replaced (``OutputError``); the
    check and the link are one step (``os.link`` fails if the target exists).
    """
    target = Path(path)
    folder = ensure_dir(target.parent) if not target.parent.exists() else target.parent
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=folder)
    except OSError as exc:
        raise OutputError(folder, f"cannot write here ({exc.strerror})") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        if overwrite:
            os.replace(tmp, target)
        else:
            try:
                os.link(tmp, target)
            except FileExistsError:
                raise OutputError(target, "already exists and will not be overwritten") from None
            os.unlink(tmp)
    except OSError as exc:
        raise OutputError(target, f"cannot write ({exc.strerror})") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
    return target


def atomic_write_text(
    path: str | Path, text: str, *, mode: int = FILE_MODE, overwrite: bool = True
) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically (see ``atomic_write_bytes``)."""
    return atomic_write_bytes(path, text.encode("utf-8"), mode=mode, overwrite=overwrite)


def append_line(path: str | Path, line: str, *, mode: int = FILE_MODE) -> Path:
    """Append one line to an append-only log, flushed to disk before returning.

    One ``write`` of a line shorter than PIPE_BUF on an ``O_APPEND`` file is not
    interleaved with other writers.
    """
    target = Path(path)
    if "\n" in line:
        raise ValueError("a log line must not contain a newline")
    try:
        fd = os.open(target, os.O_WRONLY | os.O_CREAT | os.O_APPEND, mode)
        try:
            os.write(fd, (line + "\n").encode("utf-8"))
            os.fsync(fd)
        finally:
            os.close(fd)
    except OSError as exc:
        raise OutputError(target, f"cannot append ({exc.strerror})") from None
    return target
