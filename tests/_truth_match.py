"""Matching scored events to a synthetic night's ground truth (tests only).

One-to-one by overlap: each truth event pairs with at most one scored event and vice
versa, maximising the total overlap (scipy's linear_sum_assignment). Truth events marked
``ambiguous`` by the generator are left out, together with any scored event that
overlaps one of them and nothing else.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

APNEAS = ("obstructive_apnea", "central_apnea", "mixed_apnea", "unclassified_apnea")


@dataclass(frozen=True)
class MatchResult:
    tp: int
    fp: int
    fn: int
    pairs: list[tuple[int, int]]  # (truth row, scored row)

    @property
    def f1(self) -> float:
        d = 2 * self.tp + self.fp + self.fn
        return 1.0 if d == 0 else 2 * self.tp / d


def _overlap(a0: np.ndarray, a1: np.ndarray, b0: np.ndarray, b1: np.ndarray) -> np.ndarray:
    return np.clip(np.minimum(a1[:, None], b1[None, :]) - np.maximum(a0[:, None], b0[None, :]),
                   0, None)


def match(truth: pd.DataFrame, scored: pd.DataFrame, ambiguous: pd.DataFrame) -> MatchResult:
    """Match truth rows to scored rows (both with onset_s, duration_s)."""
    t0 = truth["onset_s"].to_numpy(float)
    t1 = t0 + truth["duration_s"].to_numpy(float)
    s0 = scored["onset_s"].to_numpy(float)
    s1 = s0 + scored["duration_s"].to_numpy(float)
    pairs: list[tuple[int, int]] = []
    if len(t0) and len(s0):
        ov = _overlap(t0, t1, s0, s1)
        rows, cols = linear_sum_assignment(-ov)
        pairs = [(int(r), int(c)) for r, c in zip(rows, cols, strict=True) if ov[r, c] > 0]
    matched = {c for _, c in pairs}
    unmatched = np.array([c not in matched for c in range(len(s0))], dtype=bool)
    if len(ambiguous) and unmatched.any():
        a0 = ambiguous["onset_s"].to_numpy(float)
        a1 = a0 + ambiguous["duration_s"].to_numpy(float)
        touches = (_overlap(s0, s1, a0, a1) > 0).any(axis=1)
        unmatched &= ~touches
    tp = len(pairs)
    return MatchResult(tp, int(unmatched.sum()), len(t0) - tp, pairs)


def truth_events(truth: dict) -> pd.DataFrame:
    return pd.DataFrame(truth["events"])


def evaluate(truth: dict, events: pd.DataFrame, rule_set: str) -> dict[str, float]:
    """Apnea and hypopnea matches and apnea typing for one rule set of one night."""
    te = truth_events(truth)
    scored = events[events["rule_sets"].str.split(";").map(lambda v: rule_set in v)]
    under = te["scored_under"].map(lambda v: rule_set in v)
    amb = te["ambiguous"].astype(bool)
    out: dict[str, float] = {}
    for label, kinds in (("apnea", APNEAS), ("hypopnea", ("hypopnea",))):
        t_sel = te[te["event"].isin(kinds) & under & ~amb].reset_index(drop=True)
        a_sel = te[amb | ~under].reset_index(drop=True)  # not to be counted either way
        s_sel = scored[scored["event"].isin(kinds)].reset_index(drop=True)
        m = match(t_sel, s_sel, a_sel)
        out[f"{label}_tp"], out[f"{label}_fp"], out[f"{label}_fn"] = m.tp, m.fp, m.fn
        if label == "apnea":
            same = sum(t_sel["event"].iat[r] == s_sel["event"].iat[c] for r, c in m.pairs)
            out["type_pairs"], out["type_same"] = len(m.pairs), int(same)
    return out
