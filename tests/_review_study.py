"""A demo-like study folder for the review tests: a short synthetic night, analysed.

The night is invented (``hsat.synth``, an invented patient of the demo clinic); it is
analysed by the real pipeline (``hsat.api.analyze``), so the review sees exactly what a
physician would. ``clone_study`` copies the folder so that each test edits its own, and
``session_for`` reuses the conditioned night (conditioning once per test module).
"""

from __future__ import annotations

import dataclasses
import json
import shutil
import urllib.error
import urllib.request
import uuid
from pathlib import Path
from typing import Any

from hsat.review import ReviewSession, read_auto_events

NIGHT_HOURS = 4.5  # past the 4 h of valid flow and SpO2 an adequate HSAT needs (Kapur 2017)


def make_study(root: Path, *, seed: int = 31, hours: float = NIGHT_HOURS) -> Path:
    """Generate, write and analyse one invented night; return its study folder."""
    import hsat.api as api
    from hsat.synth import generate_night, preset, write_night

    nights = root / "nights"
    nights.mkdir(parents=True, exist_ok=True)
    edf = nights / f"review-night-{seed}.edf"
    write_night(generate_night(preset("moderate", seed=seed, duration_h=hours)), edf)
    out = root / f"study-{seed}"
    api.analyze(edf, out, pdf=True)
    return out


def clone_study(study: Path, name: str) -> Path:
    """A copy of the study folder beside it (so the recording is found as for the
    original), for one test to edit."""
    dest = study.parent / f"{name}-{uuid.uuid4().hex[:8]}"
    shutil.copytree(study, dest)
    return dest


def session_for(base: ReviewSession, folder: Path) -> ReviewSession:
    """A session on another copy of the study, reusing the base session's signals."""
    return dataclasses.replace(base, folder=folder.resolve(), auto=read_auto_events(folder))


def http(url: str, *, body: dict[str, Any] | None = None, headers: dict[str, str] | None = None,
         method: str | None = None) -> tuple[int, bytes]:
    """(status, body) of one request; HTTP errors are returned, not raised."""
    data = json.dumps(body).encode() if body is not None else None
    req = urllib.request.Request(url, data=data, method=method or ("POST" if data else "GET"))
    for name, value in (headers or {}).items():
        req.add_header(name, value)
    if data is not None:
        req.add_header("Content-Type", "application/json")
    try:
        with urllib.request.urlopen(req, timeout=20) as resp:
            return resp.status, resp.read()
    except urllib.error.HTTPError as err:
        return err.code, err.read()


def api_url(server: Any, path: str, *, token: str | None = None) -> str:
    """The address of ``path`` under the server's study, with ``token`` (its own by default)."""
    sep = "&" if "?" in path else "?"
    tok = server.token if token is None else token
    return f"http://127.0.0.1:{server.port}/r/{server.key}/{path}{sep}token={tok}"


def quiet_onset(events: list[dict[str, Any]], cond: Any, night_s: float,
                length_s: float = 20.0) -> float:
    """An onset with no scored event within 90 s, inside analysed (monitoring) time."""
    import numpy as np

    spans = sorted((e["onset_s"], e["onset_s"] + e["duration_s"]) for e in events)
    for t in np.arange(cond.lights_off_s + 600.0, night_s - 600.0, 15.0):
        clear = all(b < t - 90 or a > t + length_s + 90 for a, b in spans)
        if clear and bool(np.all(cond.in_analysis(np.arange(t - 5, t + length_s + 5, 0.5)))):
            return float(t)
    raise AssertionError("no quiet analysed span in the test night")
