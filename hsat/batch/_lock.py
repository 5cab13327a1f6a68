"""One batch at a time per output folder (a cron run that overlaps the last one waits
its turn instead of writing the same registry and folders twice)."""

from __future__ import annotations

import fcntl
import os
from pathlib import Path

from hsat.errors import OutputError

LOCK_FILE = ".batch.lock"


class BatchLock:
    """An exclusive ``flock`` on ``OUT/.batch.lock``, released on close or process death.

    The descriptor is not inherited by spawned worker processes, so a killed batch's lock
    goes with it.
    """

    def __init__(self, out_dir: Path, mode: int = 0o600) -> None:
        self.path = out_dir / LOCK_FILE
        self._fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, mode)
        try:
            fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(self._fd, 32, 0).decode("ascii", "replace").strip()
            os.close(self._fd)
            raise OutputError(out_dir, "another batch is writing to this folder"
                              + (f" (process {holder})" if holder else "")) from None
        os.ftruncate(self._fd, 0)
        os.pwrite(self._fd, f"{os.getpid()}\n".encode("ascii"), 0)

    def release(self) -> None:
        if self._fd >= 0:
            fcntl.flock(self._fd, fcntl.LOCK_UN)
            os.close(self._fd)
            self._fd = -1

    def __enter__(self) -> BatchLock:
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()
