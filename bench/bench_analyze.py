"""Benchmark: ``hsat analyze --no-pdf`` on a 10-hour night against a bare pyedflib read.

Both are timed as whole processes (start-up and imports included), one after the other
on the same file: a 10-hour generic-kit night from the synthetic generator (nasal
pressure and thermal at 100 Hz, belts at 25 Hz, snore at 200 Hz, SpO2/pulse/position at
1 Hz), analysed with both built-in rule sets. The pyedflib process opens the file and
reads every channel. Each timing is the best of ``REPEATS`` runs; peak memory is the
child's maximum resident set size (``os.wait4`` rusage). The analysis must take at most
``LIMIT`` x the read (issue 3).
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

HOURS = 10.0
REPEATS = 3
LIMIT = 3.0

_PYEDFLIB_READ = (
    "import sys, pyedflib\n"
    "r = pyedflib.EdfReader(sys.argv[1])\n"
    "n = sum(len(r.readSignal(i)) for i in range(r.signals_in_file))\n"
    "r.close()\n"
)


def _run(argv: list[str]) -> tuple[float, float, int]:
    """Wall time (s), peak RSS (MB) and exit code of one child process."""
    started = time.perf_counter()
    proc = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    elapsed = time.perf_counter() - started
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.stderr is not None:
        proc.stderr.close()
    return elapsed, usage.ru_maxrss / 1024.0, proc.returncode


def _best(argv: list[str], ok: tuple[int, ...] = (0,)) -> tuple[float, float]:
    best_s, peak_mb = float("inf"), 0.0
    for _ in range(REPEATS):
        elapsed, rss, code = _run(argv)
        if code not in ok:
            raise RuntimeError(f"{' '.join(argv[:3])} ... exited with {code}")
        best_s, peak_mb = min(best_s, elapsed), max(peak_mb, rss)
    return best_s, peak_mb


def bench_analyze(tmpdir: Path) -> dict[str, Any]:
    from hsat.synth import generate_night, preset, write_night

    spec = preset("moderate", seed=21, kit="generic", duration_h=HOURS)
    path = Path(tmpdir) / "night10h.edf"
    write_night(generate_night(spec), path)
    hsat_cli = [sys.executable, "-m", "hsat.cli", "analyze", str(path), "--out",
                str(Path(tmpdir) / "study"), "--no-pdf"]
    read_s, read_mb = _best([sys.executable, "-c", _PYEDFLIB_READ, str(path)])
    # exit code 3 (inadequate) would still be a complete analysis
    analyze_s, analyze_mb = _best(hsat_cli, ok=(0, 3))
    ratio = analyze_s / read_s
    return {
        "night_h": HOURS,
        "file_mb": round(path.stat().st_size / 1e6, 1),
        "pyedflib_read_process_s": round(read_s, 2),
        "analyze_process_s": round(analyze_s, 2),
        "analyze_over_read": round(ratio, 2),
        "limit_over_read": LIMIT,
        "within_limit": bool(ratio <= LIMIT),
        "pyedflib_read_peak_mb": round(read_mb, 1),
        "analyze_peak_mb": round(analyze_mb, 1),
        "analyze_peak_over_read_peak": round(analyze_mb / read_mb, 2),
    }


if __name__ == "__main__":  # pragma: no cover
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        print(bench_analyze(Path(tmp)))
