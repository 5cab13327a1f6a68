"""hsat's breath detection against manual breath marks on open data (BIDMC).

Dataset: BIDMC PPG and Respiration Dataset v1.0.0 (Pimentel et al., IEEE TBME 2017;
PhysioNet doi 10.13026/C2208R), CSV edition in ../shared/data/bidmc, read as its README
says (RESP column, 125 Hz, row index as time, annotator 1 = first column of
*_Breaths.csv). 53 eight-minute impedance-pneumography records of ICU adults.

Comparison: one-to-one optimal matching within 1 s (the tolerance of issue 3; the README
suggests 0.5-1 s), pooled over all records. Reference figures from issue 3, measured the
same way: neurokit2 rsp_clean + rsp_peaks F1 0.947 (sensitivity 0.970, PPV 0.925),
annotator 2 against annotator 1 F1 0.978. Both are recomputed here.

The breath is counted at its inspiratory extreme (``peak_s``): the annotators mark the
end-inspiratory crest, as measured below (``onset_s`` matches far worse). The impedance
trace is volume-like, so it is analysed as a belt ('thorax' role). Results go to
bench/results/bidmc_breaths.csv.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from hsat.breaths import BIDMC_FS, Agreement, BidmcRecord, agreement, find_breaths, read_bidmc
from hsat.outputs import atomic_write_text

BIDMC_DIR = Path(__file__).parents[1] / ".." / "shared" / "data" / "bidmc"
RESULTS = Path(__file__).parents[1] / "bench" / "results" / "bidmc_breaths.csv"
TOLERANCE_S = 1.0
#: issue 3: neurokit2 rsp_clean + rsp_peaks on all 53 records, and annotator 2.
NEUROKIT2_F1 = 0.947
ANNOTATOR2_F1 = 0.978

Results = dict[str, dict[int, Agreement]]


@pytest.fixture(scope="session")
def records(request: pytest.FixtureRequest) -> list[BidmcRecord]:
    csv_dir = BIDMC_DIR / "physionet" / "bidmc_csv"
    if not csv_dir.is_dir():
        pytest.skip(f"BIDMC data not found at {BIDMC_DIR.resolve()} (../shared/data/bidmc)")
    found = _cached_read(csv_dir, Path(request.config.cache.mkdir("hsat-bidmc")))
    assert len(found) == 53, f"expected the 53 BIDMC records, found {len(found)}"
    return found


def _cached_read(csv_dir: Path, cache_dir: Path) -> list[BidmcRecord]:
    """read_bidmc, kept decoded in pytest's cache folder (decompressing takes seconds).

    The cache is keyed on the source files' names, sizes and modification times.
    """
    import hashlib

    stamp = hashlib.sha256(repr(sorted(
        (f.name, f.stat().st_size, f.stat().st_mtime_ns) for f in csv_dir.iterdir()
    )).encode()).hexdigest()[:16]
    cached = cache_dir / f"records-{stamp}.npz"
    if cached.exists():
        with np.load(cached) as z:
            numbers = z["numbers"]
            return [BidmcRecord(int(n), z[f"resp{n}"], z[f"ann1_{n}"], z[f"ann2_{n}"])
                    for n in numbers]
    found = read_bidmc(BIDMC_DIR)
    arrays: dict[str, np.ndarray] = {"numbers": np.array([r.number for r in found])}
    for r in found:
        arrays |= {f"resp{r.number}": r.resp, f"ann1_{r.number}": r.annotator1_s,
                   f"ann2_{r.number}": r.annotator2_s}
    for old in cache_dir.glob("records-*.npz"):
        old.unlink()
    tmp = cache_dir / f".records-{stamp}.tmp.npz"
    np.savez(tmp, **arrays)  # type: ignore[arg-type]
    tmp.replace(cached)
    return found


def _neurokit2_peaks(resp: np.ndarray) -> np.ndarray:
    import neurokit2 as nk

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cleaned = nk.rsp_clean(resp, sampling_rate=BIDMC_FS)
        _, info = nk.rsp_peaks(cleaned, sampling_rate=BIDMC_FS)
    return np.asarray(info["RSP_Peaks"], dtype=float) / BIDMC_FS


@pytest.fixture(scope="session")
def results(records: list[BidmcRecord]) -> Results:
    """Agreement with annotator 1 per method and record, computed once per session."""
    out: Results = {}

    def add(method: str, number: int, detected: np.ndarray, ref: np.ndarray) -> None:
        out.setdefault(method, {})[number] = agreement(ref, detected, TOLERANCE_S)

    for rec in records:
        ref = rec.annotator1_s
        auto = find_breaths(rec.resp, BIDMC_FS, role="thorax")
        shown = find_breaths(rec.resp, BIDMC_FS, role="thorax", polarity=1)
        add("hsat peak, polarity from data", rec.number, auto.peak_s, ref)
        add("hsat onset, polarity from data", rec.number, auto.onset_s, ref)
        add("hsat peak, polarity as recorded", rec.number, shown.peak_s, ref)
        add("neurokit2 rsp_clean+rsp_peaks", rec.number, _neurokit2_peaks(rec.resp), ref)
        add("annotator 2", rec.number, rec.annotator2_s, ref)
    _write_csv(out, records)
    return out


def _pooled(per_record: dict[int, Agreement]) -> Agreement:
    return sum(per_record.values(), Agreement(0, 0, 0))


def _write_csv(out: Results, records: list[BidmcRecord]) -> None:
    lines = ["record,method,n_annotator1,n_detected,n_matched,sensitivity,ppv,f1"]
    for method, per_record in out.items():
        rows = [(f"{rec.number:02d}", per_record[rec.number]) for rec in records]
        rows.append(("pooled", _pooled(per_record)))
        lines += [
            f'{name},"{method}",{a.n_reference},'
            f"{a.n_detected},{a.n_matched},"
            f"{a.sensitivity:.4f},{a.ppv:.4f},{a.f1:.4f}"
            for name, a in rows
        ]
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(RESULTS, "\n".join(lines) + "\n")


def test_bidmc_breath_detection_reaches_neurokit2(results: Results) -> None:
    pooled = {method: _pooled(per) for method, per in results.items()}
    print(f"\nBIDMC, 53 records, annotator 1, one-to-one within {TOLERANCE_S:g} s:")
    for method, a in pooled.items():
        print(f"  {method:34s} F1 {a.f1:.3f}  sensitivity {a.sensitivity:.3f}  "
              f"PPV {a.ppv:.3f}  ({a.n_matched}/{a.n_reference} marks, {a.n_detected} found)")
    hsat = pooled["hsat peak, polarity from data"]
    neurokit2 = pooled["neurokit2 rsp_clean+rsp_peaks"]
    # the reference figures of issue 3 are reproduced by this matching
    assert neurokit2.f1 == pytest.approx(NEUROKIT2_F1, abs=0.002)
    assert pooled["annotator 2"].f1 == pytest.approx(ANNOTATOR2_F1, abs=0.002)
    # hsat, run as the pipeline runs it (polarity decided from the data), must reach
    # neurokit2's figure, measured here and as published in issue 3
    assert hsat.f1 >= NEUROKIT2_F1
    assert hsat.f1 >= neurokit2.f1
    assert hsat.sensitivity >= 0.95 and hsat.ppv >= 0.95
    # the annotators mark the end-inspiratory crest, not the start of inspiration
    assert hsat.f1 > pooled["hsat onset, polarity from data"].f1 + 0.2


def test_bidmc_no_record_is_lost(results: Results) -> None:
    # Per record: with the recorded polarity every record agrees with annotator 1 except
    # record 44, whose annotator marked the troughs of the trace; with the polarity
    # decided from the data, record 44 is read the annotator's way round and one other
    # record (27, a trace with a flat top and a sharp dip) the other way.
    shown = results["hsat peak, polarity as recorded"]
    auto = results["hsat peak, polarity from data"]
    poor_shown = sorted(n for n, a in shown.items() if a.f1 < 0.8)
    assert poor_shown == [44]
    assert auto[44].f1 >= 0.95
    poor_auto = [n for n, a in auto.items() if a.f1 < 0.8]
    assert len(poor_auto) <= 1, poor_auto
