"""Run the demo scenario: an invented clinic's returned home kits, night by night.

    python demo/run_demo.py --out demo/out

Steps (one function each, so later steps slot in after ``check_step``):

1. ``generate_step``: each invented patient's synthetic night (hsat.synth preset and seed
   from demo/patients.toml) goes into OUT/inbox/ as ``<stem>.edf`` with its ground truth
   ``<stem>.truth.json`` and intake sidecar ``<stem>.intake.toml`` beside it;
2. ``check_step``: ``hsat check`` on each night through ``hsat.api.check``, one verdict
   line per patient, with the generator's truth beside it;
3. ``analyze_step``: ``hsat analyze`` on each night into OUT/reports/<stem>/ (summary.json,
   events.csv and the draft PDF report, with the invented clinic's header);
4. ``sign_step``: the invented interpreting physician signs one study's report
   (report-v1-signed.pdf plus its sign-off log line), and ``hsat verify`` checks it.

Everything here is invented (demo/site.toml, demo/patients.toml): for the demo only.
Automated results must be reviewed against the raw signals by a qualified clinician.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
import tomllib
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path
from typing import Any

from hsat.errors import HsatError
from hsat.outputs import atomic_write_text, ensure_dir
from hsat.recording import Patient
from hsat.synth import NightSpec, generate_night, preset, write_night

DEMO_DIR = Path(__file__).resolve().parent
_SEX_CODE = {"female": "F", "male": "M", "other": "X", "unknown": "X"}


@dataclass(frozen=True)
class DemoNight:
    """One invented patient's night as listed in patients.toml, and its files once written."""

    entry: dict[str, Any]
    profile: str | None
    edf: Path | None = None
    truth: Path | None = None
    intake: Path | None = None

    @property
    def stem(self) -> str:
        return str(self.entry["stem"])

    @property
    def label(self) -> str:
        p = self.entry["patient"]
        return f"{p['name']} ({p['id']}; {self.entry['preset']}, {self.entry['study']['kit']} kit)"


@dataclass(frozen=True)
class Scenario:
    site: Path
    nights: tuple[DemoNight, ...]


def load_scenario(demo_dir: Path = DEMO_DIR) -> Scenario:
    """The invented clinic and patients (demo/site.toml, demo/patients.toml)."""
    data = tomllib.loads((demo_dir / "patients.toml").read_text(encoding="utf-8"))
    kits: dict[str, str] = data["kits"]
    nights = tuple(DemoNight(entry, kits[entry["study"]["kit"]] or None)
                   for entry in data["night"])
    return Scenario(demo_dir / "site.toml", nights)


def night_spec(entry: dict[str, Any]) -> NightSpec:
    """The generator settings of one demo night."""
    p = entry["patient"]
    patient = Patient(code=p["id"], name=p["name"], sex=_SEX_CODE.get(p.get("sex", ""), "X"),
                      birthdate=p.get("birthdate"))
    start = entry["start"]
    return preset(entry["preset"], seed=int(entry["seed"]), kit=entry["study"]["kit"],
                  duration_h=float(entry["hours"]), start=start, patient=patient,
                  recording_code=entry["stem"].upper())


def _toml_value(value: Any) -> str:
    if isinstance(value, date | datetime):
        return value.isoformat()
    if isinstance(value, int | float) and not isinstance(value, bool):
        return repr(value)
    return json.dumps(str(value), ensure_ascii=False)  # a TOML basic string


def intake_toml(entry: dict[str, Any]) -> str:
    """The intake sidecar text (hsat.intake format) for one demo night."""
    lines = ["# Intake sidecar of an invented demo patient (demo/patients.toml)."]
    for table in ("patient", "study"):
        lines.append(f"\n[{table}]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in entry.get(table, {}).items()]
    for excl in entry.get("diary_exclusions", []):
        lines.append("\n[[diary_exclusions]]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in excl.items()]
    return "\n".join(lines) + "\n"


def generate_step(scenario: Scenario, inbox: Path) -> list[DemoNight]:
    """Write each patient's night, its truth and its intake sidecar into ``inbox``."""
    ensure_dir(inbox)
    written = []
    for night in scenario.nights:
        edf, truth = write_night(generate_night(night_spec(night.entry)),
                                 inbox / f"{night.stem}.edf")
        intake = atomic_write_text(inbox / f"{night.stem}.intake.toml", intake_toml(night.entry))
        written.append(DemoNight(night.entry, night.profile, edf, truth, intake))
    return written


def _truth_summary(truth_path: Path) -> str:
    truth = json.loads(truth_path.read_text(encoding="utf-8"))
    mt_h = truth["monitoring_time_s"] / 3600
    rei = truth["expected"]["aasm-4pct"]["rei"]
    return f"truth: monitoring {mt_h:.1f} h, REI(4%) {rei:.1f}/h"


def check_step(nights: list[DemoNight]) -> list[tuple[DemoNight, dict[str, Any] | str]]:
    """``hsat check`` on each night: its JSON result, or the error message."""
    import hsat.api

    results: list[tuple[DemoNight, dict[str, Any] | str]] = []
    for night in nights:
        assert night.edf is not None
        try:
            results.append((night, hsat.api.check(night.edf, profile=night.profile)))
        except HsatError as exc:
            results.append((night, f"error: {exc}"))
    return results


def verdict_line(night: DemoNight, result: dict[str, Any] | str) -> str:
    """One line per patient: adequacy, monitoring time and why, beside the truth."""
    truth = _truth_summary(night.truth) if night.truth else ""
    if isinstance(result, str):
        return f"{night.stem}: {night.label}: {result}"
    adequate = result.get("adequate")
    verdict = "adequate" if adequate else "INADEQUATE"
    reasons = result.get("adequacy", {}).get("reasons", []) if isinstance(
        result.get("adequacy"), dict) else []
    why = f" ({'; '.join(reasons)})" if reasons and not adequate else ""
    return (f"{night.stem}: {night.label}: {verdict}{why}, monitoring "
            f"{float(result.get('monitoring_time_h', float('nan'))):.1f} h [{truth}]")


def analyze_step(nights: list[DemoNight], reports: Path,
                 site: Path) -> list[tuple[DemoNight, Any]]:
    """``hsat analyze`` on each night: its StudyResult, or the error message."""
    import hsat.api

    done: list[tuple[DemoNight, Any]] = []
    for night in nights:
        assert night.edf is not None
        try:
            result = hsat.api.analyze(night.edf, reports / night.stem, profile=night.profile,
                                      intake=night.intake, site=site)
        except HsatError as exc:
            done.append((night, f"error: {exc}"))
            continue
        indices = result.summary["indices"]
        reis = ", ".join(f"{name} REI {idx['rei']:.1f}/h ({idx['severity']})"
                         for name, idx in indices.items())
        print(f"{night.stem}: {reis}; report {result.report_path}")
        done.append((night, result))
    return done


def demo_interpretation(summary: dict[str, Any], physician: str) -> str:
    """The invented physician's interpretation text, written from the study's own numbers."""
    i3, i4 = summary["indices"]["aasm-3pct"], summary["indices"]["aasm-4pct"]
    spo2 = summary["spo2"]
    return (
        "# Interpretation\n\n"
        f"Home sleep apnea test over {summary['monitoring_time_h']:.1f} h of monitoring time. "
        f"REI {i4['rei']:.1f}/h under the AASM 4 % hypopnea rule ({i4['severity']}) and "
        f"{i3['rei']:.1f}/h under the 3 % rule ({i3['severity']}). SpO2 nadir "
        f"{spo2['nadir_pct']:.0f} %, T90 {spo2['t90_pct']:.1f} % of valid oximetry time.\n\n"
        "# Recommendations\n\n"
        + (
            "- Negative HSAT: this does not exclude OSA; in-lab polysomnography if clinical "
            "suspicion persists.\n"
            if i4["severity"] == "none" else
            "- Discuss treatment options for obstructive sleep apnea at the follow-up visit.\n"
            "- In-lab polysomnography if symptoms persist despite treatment.\n"
        )
        + "\n"
        f"Raw signals reviewed by {physician} (invented demo physician).\n"
    )


def sign_step(analyzed: list[tuple[DemoNight, Any]], site: Path) -> Path | None:
    """Sign one adequate study (the moderate one when present), then verify it."""
    from hsat.signoff import sign, verify

    ordered = sorted(analyzed, key=lambda nr: nr[0].entry["preset"] != "moderate")
    for night, result in ordered:
        if isinstance(result, str) or not result.summary["adequacy"]["adequate"]:
            continue
        physician = str(night.entry["study"]["interpreting_physician"])
        signed = sign(result.out_dir, None, physician, site=site,
                      interpretation_text=demo_interpretation(result.summary, physician))
        check = verify(result.out_dir)
        print(f"{night.stem}: signed by {physician}: {signed.pdf_path}; verify: "
              f"{'all signed reports intact' if check.ok else 'ALTERED'}")
        return Path(signed.pdf_path)
    return None


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Run the invented demo clinic's nights.")
    parser.add_argument("--out", type=Path, required=True, help="output folder (created)")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    scenario = load_scenario()
    inbox = args.out / "inbox"
    nights = generate_step(scenario, inbox)
    print(f"demo: {len(nights)} nights written to {inbox} "
          f"({time.perf_counter() - started:.1f} s)")
    results = check_step(nights)
    for night, result in results:
        print(verdict_line(night, result))
    failures = sum(isinstance(r, str) for _, r in results)
    analyzed = analyze_step(nights, args.out / "reports", scenario.site)
    failures += sum(isinstance(r, str) for _, r in analyzed)
    for night, result in analyzed:
        if isinstance(result, str):
            print(f"{night.stem}: {result}")
    sign_step(analyzed, scenario.site)
    print(f"demo: done in {time.perf_counter() - started:.1f} s"
          + (f"; {failures} step(s) failed" if failures else ""))
    print("Invented demo data. Automated results must be reviewed against the raw signals "
          "by a qualified clinician.")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
