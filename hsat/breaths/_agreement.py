"""Agreement of detected event times with reference marks (validation, not scoring).

Used by the tests and benchmarks that compare breath detection with manual breath marks
(BIDMC, tests/test_breaths_bidmc.py): a one-to-one matching within a tolerance, then
sensitivity, positive predictive value and F1 (common practice for event detection).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

#: Sample rate of the BIDMC waveforms (dataset README: use 125 Hz and the row index).
BIDMC_FS = 125.0


@dataclass(frozen=True)
class Agreement:
    """Counts and rates of a one-to-one matching."""

    n_reference: int
    n_detected: int
    n_matched: int

    @property
    def sensitivity(self) -> float:
        return self.n_matched / self.n_reference if self.n_reference else float("nan")

    @property
    def ppv(self) -> float:
        return self.n_matched / self.n_detected if self.n_detected else float("nan")

    @property
    def f1(self) -> float:
        total = self.n_reference + self.n_detected
        return 2 * self.n_matched / total if total else float("nan")

    def __add__(self, other: Agreement) -> Agreement:
        return Agreement(
            self.n_reference + other.n_reference,
            self.n_detected + other.n_detected,
            self.n_matched + other.n_matched,
        )


def match_times(
    reference: np.ndarray, detected: np.ndarray, tolerance_s: float
) -> list[tuple[int, int]]:
    """Optimal one-to-one matching of two sets of times within ``tolerance_s``.

    The most pairs are matched, and among such matchings the smallest total distance
    (Hungarian algorithm, ``scipy.optimize.linear_sum_assignment``), solved separately
    on each cluster of times that lie within the tolerance of one another.

    Returns
    -------
    list of (reference index, detected index) pairs.
    """
    ref = np.asarray(reference, dtype=float)
    det = np.asarray(detected, dtype=float)
    if len(ref) == 0 or len(det) == 0:
        return []
    times = np.concatenate((ref, det))
    which = np.concatenate((np.zeros(len(ref), int), np.ones(len(det), int)))
    index = np.concatenate((np.arange(len(ref)), np.arange(len(det))))
    order = np.argsort(times, kind="stable")
    times, which, index = times[order], which[order], index[order]
    # evaluation only: imported here to keep scipy.optimize off the analysis start-up
    from scipy.optimize import linear_sum_assignment

    breaks = np.flatnonzero(np.diff(times) > tolerance_s) + 1
    pairs: list[tuple[int, int]] = []
    for lo, hi in zip(np.r_[0, breaks], np.r_[breaks, len(times)], strict=True):
        r = index[lo:hi][which[lo:hi] == 0]
        d = index[lo:hi][which[lo:hi] == 1]
        if len(r) == 0 or len(d) == 0:
            continue
        cost = np.abs(ref[r][:, None] - det[d][None, :])
        too_far = cost > tolerance_s
        # an unmatched-distance penalty larger than any sum of real distances makes the
        # solver maximise the number of pairs first
        cost = np.where(too_far, tolerance_s * (len(r) + len(d) + 1), cost)
        rows, cols = linear_sum_assignment(cost)
        pairs.extend(
            (int(r[i]), int(d[j])) for i, j in zip(rows, cols, strict=True) if not too_far[i, j]
        )
    return sorted(pairs)


def agreement(reference: np.ndarray, detected: np.ndarray, tolerance_s: float) -> Agreement:
    """Sensitivity / PPV / F1 counts of ``detected`` against ``reference`` times."""
    return Agreement(len(reference), len(detected),
                     len(match_times(reference, detected, tolerance_s)))


@dataclass(frozen=True)
class BidmcRecord:
    """One BIDMC record: the impedance respiration waveform and both annotators' marks."""

    number: int
    resp: np.ndarray
    annotator1_s: np.ndarray
    annotator2_s: np.ndarray


def read_bidmc(folder: str | Path) -> list[BidmcRecord]:
    """Read every BIDMC record of the dataset's CSV edition.

    ``folder`` is ``../shared/data/bidmc``. Per its README: ``RESP`` column of
    ``physionet/bidmc_csv/bidmc_NN_Signals.csv.xz`` at 125 Hz with the row index as time,
    and the breath marks (sample numbers) of annotator 1 and 2 in the first and second
    column of ``bidmc_NN_Breaths.csv``.
    """
    import pandas as pd

    csv_dir = Path(folder) / "physionet" / "bidmc_csv"
    records: list[BidmcRecord] = []
    for signals in sorted(csv_dir.glob("bidmc_*_Signals.csv.xz")):
        number = int(signals.name.split("_")[1])
        resp = pd.read_csv(signals, skipinitialspace=True, usecols=["RESP"])["RESP"]
        marks = pd.read_csv(csv_dir / f"bidmc_{number:02d}_Breaths.csv", skipinitialspace=True)
        records.append(BidmcRecord(
            number=number,
            resp=resp.to_numpy(dtype=float),
            annotator1_s=marks.iloc[:, 0].dropna().to_numpy(dtype=float) / BIDMC_FS,
            annotator2_s=marks.iloc[:, 1].dropna().to_numpy(dtype=float) / BIDMC_FS,
        ))
    return records
