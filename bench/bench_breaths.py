"""Benchmark: hsat breath detection against neurokit2 on a 10-hour night, and on BIDMC.

Times ``hsat.breaths.find_breaths`` and neurokit2's ``rsp_clean`` + ``rsp_peaks`` on the
same 10-hour 100 Hz airflow signal (built here: half-sine inspirations, early-peaking
expirations, pauses, apneas, hypopneas, snore bursts, drift), neurokit2's import time in a
fresh interpreter, and both detectors' agreement with annotator 1 on the 53 BIDMC records
(one-to-one within 1 s, the same comparison as tests/test_breaths_bidmc.py).
"""

from __future__ import annotations

import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from hsat.breaths import BIDMC_FS, Agreement, agreement, find_breaths, read_bidmc

HOURS = 10.0
FS = 100.0
BIDMC_DIR = Path(__file__).resolve().parents[1] / ".." / "shared" / "data" / "bidmc"


def night_flow(
    fs: float = FS, hours: float = HOURS, seed: int = 0
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A synthetic night of airflow, its breaths' inspiratory peak times and sizes."""
    rng = np.random.default_rng(seed)
    duration = hours * 3600.0
    n_breaths = int(duration / 4.0 * 1.05)
    period = 4.0 * np.clip(1 + 0.15 * rng.standard_normal(n_breaths), 0.6, 1.6)
    onset = np.cumsum(period) - period[0]
    # one apnea (20-40 s of silence) every ~4 min, one hypopnea (30-70 %) every ~3 min
    apnea_after = rng.random(n_breaths) < 4.0 / 240.0
    onset = onset + np.cumsum(np.where(apnea_after, rng.uniform(20, 40, n_breaths), 0.0))
    keep = onset < duration - 10
    onset, period = onset[keep], period[keep]
    size = np.where(rng.random(len(onset)) < 4.0 / 180.0 * 4, rng.uniform(0.3, 0.7), 1.0)
    size = size * np.clip(1 + 0.1 * rng.standard_normal(len(onset)), 0.7, 1.3)
    t = np.arange(int(duration * fs)) / fs
    k = np.clip(np.searchsorted(onset, t, side="right") - 1, 0, len(onset) - 1)
    u = (t - onset[k]) / period[k]
    insp = np.sin(np.pi * np.clip(u / 0.4, 0, 1))
    xe = np.clip((u - 0.4) / 0.45, 0, 1)
    expi = -(0.4 * 2 / np.pi) / (0.45 * 27 / 48) * 27 / 4 * xe * (1 - xe) ** 2
    flow = size[k] * np.where(u < 0.4, insp, np.where(u < 0.85, expi, 0.0))
    snoring = (rng.random(len(onset)) < 0.3)[k] & (u < 0.4)
    flow += snoring * 0.3 * np.sin(2 * np.pi * 45 * t)
    flow += 0.5 * np.sin(2 * np.pi * t / 900.0) + 0.02 * rng.standard_normal(len(t))
    return flow, onset + 0.2 * period, size


def _neurokit2_peaks(x: np.ndarray, fs: float) -> np.ndarray:
    import neurokit2 as nk

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cleaned = nk.rsp_clean(x, sampling_rate=fs)
        _, info = nk.rsp_peaks(cleaned, sampling_rate=fs)
    return np.asarray(info["RSP_Peaks"], dtype=float) / fs


def _best_of(n: int, func) -> tuple[float, object]:  # type: ignore[no-untyped-def]
    best, result = float("inf"), None
    for _ in range(n):
        started = time.perf_counter()
        result = func()
        best = min(best, time.perf_counter() - started)
    return best, result


def bench_breaths() -> dict:
    """Named figures: timings (s) and BIDMC agreement for hsat and neurokit2."""
    flow, true_peaks, _ = night_flow()
    figures: dict[str, object] = {"night_hours": HOURS, "night_fs_hz": FS,
                                  "night_samples": len(flow),
                                  "night_breaths_generated": len(true_peaks)}
    hsat_s, series = _best_of(3, lambda: find_breaths(flow, FS, role="flow"))
    figures["hsat_find_breaths_s"] = round(hsat_s, 3)
    figures["hsat_breaths_found"] = len(series)  # type: ignore[arg-type]
    figures["hsat_night_f1"] = round(agreement(true_peaks, series.peak_s, 1.0).f1, 4)  # type: ignore[union-attr]

    started = time.perf_counter()
    subprocess.run([sys.executable, "-c", "import neurokit2"], check=True)
    figures["neurokit2_import_s_fresh_process"] = round(time.perf_counter() - started, 2)
    nk_s, nk_peaks = _best_of(3, lambda: _neurokit2_peaks(flow, FS))
    figures["neurokit2_clean_peaks_s"] = round(nk_s, 3)
    figures["neurokit2_breaths_found"] = len(nk_peaks)  # type: ignore[arg-type]
    figures["neurokit2_night_f1"] = round(agreement(true_peaks, nk_peaks, 1.0).f1, 4)  # type: ignore[arg-type]

    if (BIDMC_DIR / "physionet" / "bidmc_csv").is_dir():
        records = read_bidmc(BIDMC_DIR)
        for name, detect in (
            ("hsat", lambda x: find_breaths(x, BIDMC_FS, role="thorax").peak_s),
            ("neurokit2", lambda x: _neurokit2_peaks(x, BIDMC_FS)),
        ):
            started = time.perf_counter()
            pooled = Agreement(0, 0, 0)
            for rec in records:
                pooled = pooled + agreement(rec.annotator1_s, detect(rec.resp), 1.0)
            figures[f"bidmc_{name}_s_53_records"] = round(time.perf_counter() - started, 2)
            figures[f"bidmc_{name}_f1"] = round(pooled.f1, 4)
            figures[f"bidmc_{name}_sensitivity"] = round(pooled.sensitivity, 4)
            figures[f"bidmc_{name}_ppv"] = round(pooled.ppv, 4)
    else:
        figures["bidmc"] = f"skipped: {BIDMC_DIR} not found"
    return figures


if __name__ == "__main__":
    for key, value in bench_breaths().items():
        print(f"{key}: {value}")
