"""How fast the review server answers signal windows on a 10-hour night.

A 10-hour invented night (the generic kit: 100 Hz flow and thermal, 200 Hz snore, 25 Hz
belts) is generated, analysed and opened for review; then windows of 30 s, 2 min, 10 min
and the whole night are fetched over HTTP from the running server (token checked, lanes
sliced and min/max-reduced, JSON encoded) at 1500 pixel columns, from many places in the
night. The goal is <= 200 ms for every window length (issue: paging must feel immediate);
the median and the worst of the repeats are reported, with the payload size.
"""

from __future__ import annotations

import statistics
import time
import urllib.request
from pathlib import Path

SPANS_S: dict[str, float | None] = {"30s": 30.0, "2min": 120.0, "10min": 600.0, "night": None}
REPEATS = 15
GOAL_MS = 200.0
NIGHT_HOURS = 10.0


def _fetch(url: str) -> tuple[float, int]:
    started = time.perf_counter()
    with urllib.request.urlopen(url, timeout=30) as resp:
        body = resp.read()
    return (time.perf_counter() - started) * 1000.0, len(body)


def bench_review(tmpdir: Path) -> dict:
    import hsat.api as api
    from hsat.review import open_review, start_server
    from hsat.synth import generate_night, preset, write_night

    nights = tmpdir / "nights"
    nights.mkdir()
    edf = nights / "bench-review-night.edf"
    write_night(generate_night(preset("moderate", seed=5, duration_h=NIGHT_HOURS)), edf)
    study = tmpdir / "study"
    api.analyze(edf, study, pdf=False)

    started = time.perf_counter()
    session = open_review(study, reviewer="bench")
    figures: dict[str, object] = {
        "night_h": round(session.night_s / 3600.0, 2),
        "startup_read_condition_s": round(time.perf_counter() - started, 2),
    }
    server, thread = start_server(session, idle_minutes=10)
    base = f"http://127.0.0.1:{server.port}/r/{server.key}/api/"
    try:
        _fetch(f"{base}window?t0=0&t1=30&px=1500&token={server.token}")  # warm the socket
        worst_all = 0.0
        for name, span in SPANS_S.items():
            length = session.night_s if span is None else span
            starts = [0.0] if span is None else [
                (session.night_s - length) * k / (REPEATS - 1) for k in range(REPEATS)]
            times, size = [], 0
            for k in range(REPEATS):
                t0 = starts[k % len(starts)]
                ms, size = _fetch(f"{base}window?t0={t0:.2f}&t1={t0 + length:.2f}&px=1500"
                                  f"&token={server.token}")
                times.append(ms)
            worst_all = max(worst_all, max(times))
            figures[f"window_{name}_median_ms"] = round(statistics.median(times), 1)
            figures[f"window_{name}_worst_ms"] = round(max(times), 1)
            figures[f"window_{name}_kib"] = round(size / 1024, 1)
        strip_ms, strip_size = _fetch(f"{base}strip?token={server.token}")
        figures["strip_ms"] = round(strip_ms, 1)
        figures["strip_kib"] = round(strip_size / 1024, 1)
        figures["goal_ms"] = GOAL_MS
        figures["all_windows_within_goal"] = worst_all <= GOAL_MS
    finally:
        server.request_stop()
        thread.join(timeout=5)
        server.server_close()
    return figures


if __name__ == "__main__":
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        for key, value in bench_review(Path(tmp)).items():
            print(f"{key}: {value}")
