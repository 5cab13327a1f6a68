"""Benchmark: ``hsat analyze --no-pdf`` on a 10-hour night against a bare pyedflib read.

Both are timed as whole processes (start-up and imports included), one after the other
on the same file: a 10-hour generic-kit night from the synthetic generator (nasal
pressure and thermal at 100 Hz, belts at 25 Hz, snore at 200 Hz, SpO2/pulse/position at
1 Hz), analysed with both built-in rule sets. The pyedflib process opens the file and
reads every channel. Each timing is the best of ``REPEATS`` runs; peak memory is the
child's maximum resident set size (``os.wait4`` rusage). The analysis must take at most
``LIMIT`` x the read (issue 3). The time of each stage of one in-process run is reported
beside them (``stage_s_in_process``; its stages run one after the other, without the
start-up overlap ``hsat.api.analyze`` arranges).
"""

from __future__ import annotations

import json
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


_GENERATE = (
    "import sys\n"
    "from hsat.synth import generate_night, preset, write_night\n"
    "spec = preset('moderate', seed=21, kit='generic', duration_h=float(sys.argv[2]))\n"
    "write_night(generate_night(spec), sys.argv[1])\n"
)

# One in-process run of the stages, each timed (figures only: the limit is on processes).
_STAGES = (
    "import json, sys, time\n"
    "t0 = time.perf_counter()\n"
    "from hsat import api\n"
    "from hsat.breaths import detect_breaths\n"
    "from hsat.events import score_events\n"
    "from hsat.metrics import summarize\n"
    "from hsat.outputs import write_study\n"
    "from hsat.rulesets import load_rule_sets\n"
    "rules = load_rule_sets(None)\n"
    "t = {'imports': time.perf_counter() - t0}\n"
    "def timed(name, f, *a):\n"
    "    s = time.perf_counter(); r = f(*a); t[name] = time.perf_counter() - s; return r\n"
    "rec = timed('read', api.read, sys.argv[1])\n"
    "cond = timed('condition', api.condition, rec)\n"
    "br = timed('breaths', detect_breaths, cond)\n"
    "sc = timed('scoring', score_events, cond, br, rules)\n"
    "sm = timed('summarize', summarize, cond, br, sc, rules)\n"
    "timed('write', write_study, sys.argv[2], sm, sc)\n"
    "print(json.dumps({k: round(v, 3) for k, v in t.items()}))\n"
)


def bench_analyze(tmpdir: Path) -> dict[str, Any]:
    path = Path(tmpdir) / "night10h.edf"
    # generated in a child, so this process stays small: a child's peak RSS counts the
    # memory it was forked with
    subprocess.run([sys.executable, "-c", _GENERATE, str(path), str(HOURS)], check=True,
                   stdout=subprocess.DEVNULL)
    hsat_cli = [sys.executable, "-m", "hsat.cli", "analyze", str(path), "--out",
                str(Path(tmpdir) / "study"), "--no-pdf"]
    read_s, read_mb = _best([sys.executable, "-c", _PYEDFLIB_READ, str(path)])
    # exit code 3 (inadequate) would still be a complete analysis
    analyze_s, analyze_mb = _best(hsat_cli, ok=(0, 3))
    ratio = analyze_s / read_s
    stages = subprocess.run(
        [sys.executable, "-c", _STAGES, str(path), str(Path(tmpdir) / "stages")],
        check=True, capture_output=True, text=True,
    ).stdout
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
        "stage_s_in_process": json.loads(stages),
    }


if __name__ == "__main__":  # pragma: no cover
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        print(bench_analyze(Path(tmp)))
