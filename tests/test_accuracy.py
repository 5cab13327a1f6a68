"""Accuracy of the whole scoring chain against synthetic ground truth.

24 generated nights (hsat.synth; 6.5 h each, each with a seed of its own): every preset
from normal to severe, positional, Cheyne-Stokes and inadequate, on all three kits
(their sampling rates, signs of inspiration, gains, integer SpO2 and position codes
differ),
with the generator's hard cases (mouth breathing, cannula and probe off, sighs and
post-sigh pauses, back-to-back events, movement, weak, clipping and flat belts, REM-like
irregular breathing, an EDF+D gap). Each night is read, conditioned, its breaths found
and scored exactly as ``hsat analyze`` does.

Matching (``_truth_match``): one-to-one by overlap; truth events the generator marks
``ambiguous`` (within 0.5 s of the 10 s minimum, or a desaturation near the 3/4 %
thresholds or shared with another event) are left out together with scored events
overlapping only them. Floors (issue 3): apnea F1 >= 0.95, hypopnea F1 >= 0.90 under
each rule set, apnea-type accuracy >= 0.90, |REI error| <= 2/h on every night, severity
category (AASM 5/15/30, standards.md §3.1) right on >= 95 % of nights.

The REI and severity floors are checked on the scoring: the truth's events over the
monitoring time hsat computed, against hsat's events over the same time. The generator's
own monitoring time also leaves out wake spent lying still in mid-night, which an HSAT
cannot see (the reason REI "includes wake", standards.md §8); the end-to-end REI against
the truth's monitoring time is in the table too (column ``rei_error_end_to_end``).

The table is written to bench/results/accuracy.md and accuracy.csv.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from _truth_match import APNEAS, evaluate
from hsat import api
from hsat.breaths import detect_breaths
from hsat.events import score_events
from hsat.metrics import severity, summarize
from hsat.rulesets import load_rule_sets
from hsat.synth import generate_night, preset, write_night

pytestmark = pytest.mark.slow

RESULTS = Path(__file__).resolve().parents[1] / "bench" / "results"
RULE_NAMES = ("aasm-3pct", "aasm-4pct")
PROFILES = {"generic": None, "alder": "alder-r3", "birch": "birch-p2"}
# long enough to be technically adequate (>= 4 h of valid flow and oximetry, Kapur 2017,
# standards.md section 3.3), as the nights an REI is reported for are
DURATION_H = 6.5
KITS = ("generic", "alder", "birch")
PRESETS = ("normal", "mild", "moderate", "severe", "positional", "central_csb",
           "inadequate")


@dataclass(frozen=True)
class Night:
    preset: str
    kit: str
    seed: int
    extra: tuple[tuple[str, object], ...] = ()

    @property
    def label(self) -> str:
        more = "+" + ",".join(k for k, _ in self.extra) if self.extra else ""
        return f"{self.preset}/{self.kit}/{self.seed}{more}"


NIGHTS: tuple[Night, ...] = (
    # a seed of its own for every night: each gets its own layout (wake, positions,
    # artefacts) and its own events
    *(Night(p, k, 11 + 10 * i + j) for i, p in enumerate(PRESETS)
      for j, k in enumerate(KITS)),
    Night("mild", "alder", 12, (("flat_belt_count", 1),)),
    Night("moderate", "birch", 12, (("gaps", ((5400.0, 45.0),)),)),
    Night("severe", "generic", 12, (("flat_belt_count", 1),)),
)


@pytest.fixture(scope="session")
def scored(tmp_path_factory) -> pd.DataFrame:
    """One row per night and rule set: matches, truth and scored indices."""
    folder = tmp_path_factory.mktemp("accuracy_nights")
    rules = load_rule_sets(list(RULE_NAMES))
    rows = []
    for night in NIGHTS:
        spec = preset(night.preset, seed=night.seed, kit=night.kit, duration_h=DURATION_H,
                      **dict(night.extra))
        synthetic = generate_night(spec)
        path = folder / f"{night.preset}_{night.kit}_{night.seed}.edf"
        write_night(synthetic, path)
        truth = synthetic.truth
        cond = api.condition(api.read(path, PROFILES[night.kit]))
        breaths = detect_breaths(cond)
        scoring = score_events(cond, breaths, rules)
        summary = summarize(cond, breaths, scoring, rules)
        csb_truth_min = sum(p["end_s"] - p["start_s"] for p in truth["periods"]
                            if p["kind"] == "csb") / 60.0
        h_same, h_pairs = _hypopnea_types(truth, scoring.events)
        for name in RULE_NAMES:
            m = evaluate(truth, scoring.events, name)
            expected = truth["expected"][name]
            ix = summary["indices"][name]
            same_mt = round(expected["events"] / (cond.monitoring_time_s / 3600.0), 1)
            rows.append({
                "night": night.label, "rule_set": name,
                **{k: int(v) for k, v in m.items()},
                "rei_truth": same_mt, "rei_scored": ix["rei"],
                "rei_truth_own_mt": round(expected["rei"], 1),
                "severity_truth": severity(same_mt),
                "severity_scored": ix["severity"],
                "mt_truth_h": round(truth["monitoring_time_s"] / 3600.0, 2),
                "mt_scored_h": summary["monitoring_time_h"],
                "ambiguous": int(sum(e["ambiguous"] for e in truth["events"])),
                "csb_truth_min": round(csb_truth_min, 1),
                "csb_scored": bool(ix["cheyne_stokes"]["present"]),
                "csb_scored_min": ix["cheyne_stokes"]["duration_min"],
                "hypopnea_type_same": h_same, "hypopnea_type_pairs": h_pairs,
            })
    table = pd.DataFrame(rows)
    table["rei_error"] = (table["rei_scored"] - table["rei_truth"]).round(1)
    table["rei_error_end_to_end"] = (table["rei_scored"] - table["rei_truth_own_mt"]).round(1)
    _write_tables(table)
    return table


def _hypopnea_types(truth: dict, events: pd.DataFrame) -> tuple[int, int]:
    """(same, compared): optional hypopnea type of scored hypopneas overlapping a
    non-ambiguous truth hypopnea (truth ``subtype``: obstructive / central)."""
    scored = events[events["event"] == "hypopnea"]
    s0 = scored["onset_s"].to_numpy()
    s1 = s0 + scored["duration_s"].to_numpy()
    same = pairs = 0
    for ev in truth["events"]:
        if ev["event"] != "hypopnea" or ev["ambiguous"] or ev["subtype"] not in (
                "obstructive", "central"):
            continue
        hit = np.flatnonzero((s0 < ev["onset_s"] + ev["duration_s"]) & (s1 > ev["onset_s"]))
        if len(hit):
            pairs += 1
            same += int(scored["hypopnea_type"].iat[hit[0]] == ev["subtype"])
    return same, pairs


def _f1(tp: int, fp: int, fn: int) -> float:
    return 1.0 if tp + fp + fn == 0 else 2 * tp / (2 * tp + fp + fn)


def _totals(table: pd.DataFrame) -> pd.DataFrame:
    out = []
    for name, g in table.groupby("rule_set", sort=False):
        s = g.sum(numeric_only=True)
        out.append({
            "rule_set": name, "nights": len(g),
            "apnea_f1": round(_f1(s.apnea_tp, s.apnea_fp, s.apnea_fn), 3),
            "hypopnea_f1": round(_f1(s.hypopnea_tp, s.hypopnea_fp, s.hypopnea_fn), 3),
            "apnea_type_accuracy": round(s.type_same / max(s.type_pairs, 1), 3),
            "max_abs_rei_error": float(g["rei_error"].abs().max()),
            "mean_abs_rei_error": round(float(g["rei_error"].abs().mean()), 2),
            "max_abs_rei_error_end_to_end": float(g["rei_error_end_to_end"].abs().max()),
            "monitoring_time_error_pct": round(float(
                (100 * (g["mt_scored_h"] / g["mt_truth_h"] - 1)).abs().mean()), 1),
            "severity_right": f"{int((g.severity_truth == g.severity_scored).sum())}/{len(g)}",
            "hypopnea_type_accuracy": round(
                s.hypopnea_type_same / max(s.hypopnea_type_pairs, 1), 3),
        })
    return pd.DataFrame(out)


def _markdown(df: pd.DataFrame) -> list[str]:
    head = "| " + " | ".join(df.columns) + " |"
    rule = "|" + "---|" * len(df.columns)
    return [head, rule, *("| " + " | ".join(str(v) for v in row) + " |"
                          for row in df.itertuples(index=False))]


def _write_tables(table: pd.DataFrame) -> None:
    RESULTS.mkdir(parents=True, exist_ok=True)
    table.to_csv(RESULTS / "accuracy.csv", index=False)
    totals = _totals(table)
    lines = [
        "# Scoring accuracy on synthetic ground truth",
        "",
        f"Written by tests/test_accuracy.py: {len(NIGHTS)} generated nights of "
        f"{DURATION_H:g} h (hsat.synth presets x kits x seeds, with the generator's hard "
        "cases). Matching one-to-one by overlap; truth events marked ambiguous are left "
        "out. Floors: apnea F1 >= 0.95, hypopnea F1 >= 0.90, apnea type >= 0.90, "
        "|REI error| <= 2/h per night, severity right on >= 95 % of nights. REI truth = "
        "the truth's events over hsat's monitoring time (the scoring's error); the "
        "end-to-end error against the truth's own monitoring time (which also leaves "
        "out mid-night wake lying still, invisible to an HSAT) is in the totals and "
        "in accuracy.csv.",
        "",
        "## Totals",
        "",
        *_markdown(totals),
        "",
        "## Per night (tp/fp/fn)",
        "",
        "| night | rule set | apneas | hypopneas | type | REI truth | REI scored | "
        "REI truth (truth MT) | severity |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for r in table.itertuples():
        sev = r.severity_scored + ("" if r.severity_truth == r.severity_scored
                                   else f" (truth {r.severity_truth})")
        lines.append(
            f"| {r.night} | {r.rule_set} | {r.apnea_tp}/{r.apnea_fp}/{r.apnea_fn} | "
            f"{r.hypopnea_tp}/{r.hypopnea_fp}/{r.hypopnea_fn} | "
            f"{r.type_same}/{r.type_pairs} | {r.rei_truth} | {r.rei_scored} | "
            f"{r.rei_truth_own_mt} | {sev} |")
    (RESULTS / "accuracy.md").write_text("\n".join(lines) + "\n")


def test_night_set_spans_the_range(scored):
    assert len(NIGHTS) >= 20
    assert {n.kit for n in NIGHTS} == set(KITS)
    assert {n.preset for n in NIGHTS} == set(PRESETS)
    assert set(scored["severity_truth"]) == {"none", "mild", "moderate", "severe"}


@pytest.mark.parametrize("name", RULE_NAMES)
def test_apnea_f1(scored, name):
    s = scored[scored.rule_set == name].sum(numeric_only=True)
    f1 = _f1(s.apnea_tp, s.apnea_fp, s.apnea_fn)
    print(f"{name}: apnea F1 {f1:.3f} (tp {s.apnea_tp}, fp {s.apnea_fp}, fn {s.apnea_fn})")
    assert f1 >= 0.95


@pytest.mark.parametrize("name", RULE_NAMES)
def test_hypopnea_f1(scored, name):
    s = scored[scored.rule_set == name].sum(numeric_only=True)
    f1 = _f1(s.hypopnea_tp, s.hypopnea_fp, s.hypopnea_fn)
    print(f"{name}: hypopnea F1 {f1:.3f} "
          f"(tp {s.hypopnea_tp}, fp {s.hypopnea_fp}, fn {s.hypopnea_fn})")
    assert f1 >= 0.90


def test_apnea_type_accuracy(scored):
    s = scored[scored.rule_set == RULE_NAMES[0]].sum(numeric_only=True)
    accuracy = s.type_same / s.type_pairs
    print(f"apnea type accuracy {accuracy:.3f} over {s.type_pairs} matched apneas "
          f"({', '.join(APNEAS)})")
    assert accuracy >= 0.90


@pytest.mark.parametrize("name", RULE_NAMES)
def test_rei_error_per_night(scored, name):
    g = scored[scored.rule_set == name]
    worst = g.loc[g["rei_error"].abs().idxmax()]
    print(f"{name}: max |REI error| {abs(worst.rei_error)} on {worst.night}")
    assert (g["rei_error"].abs() <= 2.0).all(), g[g["rei_error"].abs() > 2.0][
        ["night", "rei_truth", "rei_scored"]].to_string()
    # end to end: also against the truth's own monitoring time (wake judgement included)
    worst = g.loc[g["rei_error_end_to_end"].abs().idxmax()]
    print(f"{name}: max |REI error| end to end {abs(worst.rei_error_end_to_end)} on "
          f"{worst.night}")
    assert (g["rei_error_end_to_end"].abs() <= 2.0).all(), g[
        g["rei_error_end_to_end"].abs() > 2.0][
        ["night", "rei_truth_own_mt", "rei_scored"]].to_string()


@pytest.mark.parametrize("name", RULE_NAMES)
def test_severity_category(scored, name):
    g = scored[scored.rule_set == name]
    right = (g.severity_truth == g.severity_scored).mean()
    print(f"{name}: severity right on {right:.1%} of nights")
    assert right >= 0.95


def test_cheyne_stokes_flag(scored):
    # AASM 2012 Cheyne-Stokes criteria (standards.md §1.4): flagged on the nights the
    # generator filled with >= 40 min of crescendo-decrescendo central events, and
    # on no night without any
    g = scored[scored.rule_set == RULE_NAMES[0]]
    expected = g["csb_truth_min"] >= 40.0
    print("Cheyne-Stokes: " + "; ".join(
        f"{r.night} truth {r.csb_truth_min} min, scored {r.csb_scored_min} min"
        for r in g[expected | g.csb_scored].itertuples()))
    assert (g["csb_scored"] == expected).all()


def test_optional_hypopnea_type(scored):
    # optional AASM hypopnea typing (standards.md §1.2); hsat's own floor: 0.85
    g = scored[scored.rule_set == RULE_NAMES[0]]
    accuracy = g["hypopnea_type_same"].sum() / g["hypopnea_type_pairs"].sum()
    print(f"hypopnea type accuracy {accuracy:.3f} over {g['hypopnea_type_pairs'].sum()}")
    assert accuracy >= 0.85
