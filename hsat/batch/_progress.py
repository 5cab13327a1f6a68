"""What a batch shows while it runs, and the log file it leaves behind.

On a terminal: one line per finished study, and below them a single status line that is
redrawn in place (counts, what is being analysed, elapsed time). Elsewhere (cron, a
pipe): plain time-stamped log lines only. Every line also goes to the batch's log file.
"""

from __future__ import annotations

import os
from collections import Counter
from datetime import datetime
from pathlib import Path
from typing import TextIO

from hsat.outputs import append_line

_CLEAR_LINE = "\r\x1b[K"


def _clock() -> str:
    return datetime.now().astimezone().isoformat(timespec="seconds")


class BatchLog:
    """An append-only, owner-only log file for one batch."""

    def __init__(self, path: Path, mode: int = 0o600) -> None:
        self.path = path
        self.mode = mode
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, mode)
        os.close(fd)

    def write(self, message: str) -> None:
        for part in message.splitlines() or [""]:
            append_line(self.path, f"{_clock()} {part}", mode=self.mode)


def _elapsed(seconds: float) -> str:
    minutes, secs = divmod(int(seconds), 60)
    hours, minutes = divmod(minutes, 60)
    return f"{hours}h{minutes:02d}m" if hours else f"{minutes}m{secs:02d}s"


class Progress:
    """Progress of one batch on ``stream``; ``live`` redraws a status line (a terminal)."""

    def __init__(self, stream: TextIO, log: BatchLog | None, *, live: bool) -> None:
        self.stream = stream
        self.log = log
        self.live = live
        self.total = 0
        self.counts: Counter[str] = Counter()
        self._drawn = False

    def note(self, message: str) -> None:
        """A line for the log and the screen (kept on screen above the status line)."""
        if self.log is not None:
            self.log.write(message)
        self._erase()
        text = message if self.live else f"{_clock()} {message}"
        self.stream.write(text + "\n")
        self.stream.flush()

    def study(self, status: str, name: str, detail: str) -> None:
        """One study finished (or was skipped) with ``status``."""
        self.counts[status] += 1
        self.note(f"{status:<26} {name}  {detail}".rstrip())

    def redraw(self, running: list[str], elapsed_s: float) -> None:
        """Redraw the status line (terminal only)."""
        if not self.live:
            return
        finished = sum(self.counts.values())
        width = 20
        filled = round(width * finished / self.total) if self.total else width
        parts = [f"[{'#' * filled}{'.' * (width - filled)}] {finished}/{self.total}"]
        order = ("new", "done earlier", "inadequate - repeat study", "failed")
        labels = {"inadequate - repeat study": "inadequate"}
        keys = [k for k in order if k in self.counts] + sorted(
            k for k in self.counts if k not in order)
        parts += [f"{labels.get(key, key)} {self.counts[key]}" for key in keys]
        if running:
            shown = ", ".join(running[:3]) + (f" +{len(running) - 3}" if len(running) > 3
                                              else "")
            parts.append(f"analysing {shown}")
        parts.append(_elapsed(elapsed_s))
        line = " | ".join(parts)
        columns = _terminal_columns(self.stream)
        self.stream.write(_CLEAR_LINE + line[: columns - 1])
        self.stream.flush()
        self._drawn = True

    def close(self) -> None:
        self._erase()

    def _erase(self) -> None:
        if self.live and self._drawn:
            self.stream.write(_CLEAR_LINE)
            self._drawn = False


def _terminal_columns(stream: TextIO) -> int:
    try:
        return os.get_terminal_size(stream.fileno()).columns
    except (OSError, ValueError, AttributeError):
        return 100
