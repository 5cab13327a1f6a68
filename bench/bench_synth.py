"""Benchmark: generating and writing a 9-hour synthetic night for each kit.

Figures: wall-clock seconds to generate (``generate_night``) and to write
(``write_night``: EDF+ and truth JSON) a 9 h night of the ``moderate`` and ``severe``
presets per kit, the EDF size, and the number of breaths and events.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

NIGHT_HOURS = 9.0


def bench_synth() -> dict:
    from hsat.synth import KIT_NAMES, generate_night, preset, write_night

    figures: dict[str, float] = {}
    with tempfile.TemporaryDirectory(prefix="hsat-bench-synth-") as tmp:
        for name in ("moderate", "severe"):
            for kit in KIT_NAMES:
                started = time.perf_counter()
                night = generate_night(preset(name, seed=1, kit=kit, duration_h=NIGHT_HOURS))
                generated = time.perf_counter()
                edf, _ = write_night(night, Path(tmp) / f"{name}-{kit}.edf")
                written = time.perf_counter()
                key = f"{name}_{kit}_9h"
                figures[f"{key}_generate_s"] = round(generated - started, 2)
                figures[f"{key}_write_s"] = round(written - generated, 2)
                figures[f"{key}_edf_mb"] = round(edf.stat().st_size / 1e6, 1)
                figures[f"{key}_breaths"] = night.truth["physiology"]["breaths"]
                figures[f"{key}_events"] = len(night.truth["events"])
    return figures


if __name__ == "__main__":
    for k, v in bench_synth().items():
        print(f"{k}: {v}")
