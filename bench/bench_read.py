"""Benchmark: read + condition a 10-hour, 8-channel night (nasal pressure at 100 Hz).

The night comes from the synthetic generator (generic kit: nasal pressure and thermal at
100 Hz, belts at 25 Hz, SpO2/pulse/position at 1 Hz, snore at 200 Hz). Timed: writing it
with ``hsat.io.write_edf``; reading it with ``hsat.io.read_recording`` (header, numpy
record decoding, TALs, SHA-256, channel matching); conditioning it with
``hsat.condition.condition_recording``; and, for comparison, pyedflib reading every
channel of the same file. Each timing is the best of three runs (wall clock, one core).
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

HOURS = 10.0
REPEATS = 3


def _best(func: Any) -> tuple[float, Any]:
    best, value = float("inf"), None
    for _ in range(REPEATS):
        started = time.perf_counter()
        value = func()
        best = min(best, time.perf_counter() - started)
    return best, value


def bench_read(tmpdir: Path) -> dict[str, Any]:
    import pyedflib

    from hsat.condition import condition_recording
    from hsat.io import read_recording, write_edf
    from hsat.synth import generate_night, preset

    night = generate_night(preset("moderate", seed=11, kit="generic", duration_h=HOURS))
    path = Path(tmpdir) / "night10h.edf"

    def write() -> Path:
        return write_edf(path, list(night.signals.values()), start=night.start,
                         annotations=night.annotations, patient=night.patient,
                         equipment=night.kit.equipment, physical_ranges=night.physical_ranges)

    write_s, _ = _best(write)
    read_s, rec = _best(lambda: read_recording(path))
    condition_s, cond = _best(lambda: condition_recording(rec))

    def pyedflib_read() -> int:
        reader = pyedflib.EdfReader(str(path))
        try:
            return sum(len(reader.readSignal(i)) for i in range(reader.signals_in_file))
        finally:
            reader.close()

    pyedflib_s, _ = _best(pyedflib_read)
    return {
        "night_h": HOURS,
        "channels": len(rec.signals),
        "flow_fs_hz": rec.signals["flow"].fs,
        "file_mb": round(path.stat().st_size / 1e6, 1),
        "write_edf_s": round(write_s, 3),
        "read_recording_s": round(read_s, 3),
        "condition_s": round(condition_s, 3),
        "read_plus_condition_s": round(read_s + condition_s, 3),
        "pyedflib_read_all_s": round(pyedflib_s, 3),
        "monitoring_time_h": round(cond.monitoring_time_s / 3600, 2),
    }


if __name__ == "__main__":  # pragma: no cover
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        print(bench_read(Path(tmp)))
