"""The review server's security, its JSON API, the edit log and rescoring.

Security checks follow common practice for a local web service holding patient data
(OWASP guidance on path traversal and access tokens, from memory): loopback only, a
random token on every request, one study per token, no file outside the study folder.
Rescoring is checked against the AASM HSAT definition REI = (apneas + hypopneas) x 60 /
monitoring time (min) (standards.md section 1.6 and check-value row 5).
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import socket
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from _review_study import api_url, clone_study, http, make_study, quiet_onset, session_for
from hsat.errors import UnreadableInput
from hsat.review import (
    EDIT_LOG,
    REVIEWED_EVENTS,
    ReviewSession,
    open_review,
    read_auto_events,
    rescore_study,
    start_server,
)
from hsat.review._decimate import MAX_COLUMNS, window_envelope

RESPIRATORY = {"obstructive_apnea", "central_apnea", "mixed_apnea", "unclassified_apnea",
               "hypopnea"}


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_study(tmp_path_factory.mktemp("review-api"))


@pytest.fixture(scope="module")
def base_session(study: Path) -> ReviewSession:
    return open_review(study, reviewer="Dr Test Reviewer")


@pytest.fixture()
def served(base_session: ReviewSession, study: Path, tmp_path: Path):
    """A server on a private copy of the study; stopped after the test."""
    session = session_for(base_session, clone_study(study, "copy"))
    server, thread = start_server(session, idle_minutes=5)
    yield server
    server.request_stop()
    thread.join(timeout=5)
    server.server_close()


def _json(status_body: tuple[int, bytes]) -> dict:
    status, body = status_body
    assert status == 200, body
    return json.loads(body)


def _edit(server, **request) -> dict:
    request.setdefault("reviewer", "Dr Test Reviewer")
    return _json(http(api_url(server, "api/edit"), body=request))


# ------------------------------------------------------------------------- security
def test_requests_without_the_token_are_refused(served):
    base = f"http://127.0.0.1:{served.port}/r/{served.key}/"
    for path in ("", "static/app.js", "api/study", "api/events", "api/window?t0=0&t1=30"):
        status, _ = http(base + path)
        assert status == 403, path
        status, _ = http(base + path + ("&" if "?" in path else "?") + "token=wrong")
        assert status == 403, path
    status, _ = http(base + "api/edit", body={"action": "confirm", "reviewer": "x"})
    assert status == 403
    assert not (served.session.folder / EDIT_LOG).exists()
    # The same address with the token (query or header) is served.
    assert http(base + "api/study", headers={"X-Review-Token": served.token})[0] == 200
    assert http(api_url(served, ""))[0] == 200


def test_a_token_for_another_study_is_refused(base_session, study, tmp_path):
    other = session_for(base_session, clone_study(study, "another-study"))
    first, t1 = start_server(session_for(base_session, clone_study(study, "first-study")))
    second, t2 = start_server(other)
    try:
        assert first.token != second.token
        assert http(api_url(second, "api/study", token=first.token))[0] == 403
        assert http(api_url(first, "api/study", token=second.token))[0] == 403
        # The other study's address on this server is unknown even with this token.
        wrong_key = f"http://127.0.0.1:{first.port}/r/{second.key}/api/study?token={first.token}"
        assert http(wrong_key)[0] == 404
        assert http(api_url(second, "api/study"))[0] == 200
    finally:
        for server, thread in ((first, t1), (second, t2)):
            server.request_stop()
            thread.join(timeout=5)
            server.server_close()


def _local_non_loopback_ipv4() -> set[str]:
    """This machine's own IPv4 addresses other than 127.0.0.0/8."""
    found: set[str] = set()
    with contextlib.suppress(OSError):
        found.add(socket.gethostbyname(socket.gethostname()))
    try:
        out = subprocess.run(["ip", "-4", "-o", "addr"], capture_output=True, text=True,
                             timeout=5, check=False).stdout
        for line in out.splitlines():
            parts = line.split()
            if "inet" in parts:
                found.add(parts[parts.index("inet") + 1].split("/")[0])
    except (OSError, subprocess.SubprocessError):
        pass
    return {ip for ip in found if ip and not ip.startswith("127.")}


def test_the_server_listens_on_loopback_only(served):
    assert served.server_address[0] == "127.0.0.1"
    with socket.create_connection(("127.0.0.1", served.port), timeout=3):
        pass  # control: the port is open on loopback
    addresses = _local_non_loopback_ipv4()
    for ip in addresses:  # only this machine's own interfaces are tried
        with pytest.raises(OSError):
            socket.create_connection((ip, served.port), timeout=3).close()
    if not addresses:
        pytest.skip("this machine has no non-loopback IPv4 address to try")


def test_a_foreign_host_header_is_refused(served):
    # A page on another site reaching 127.0.0.1 by DNS rebinding sends its own host name.
    status, _ = http(api_url(served, "api/study"), headers={"Host": f"evil.test:{served.port}"})
    assert status == 403


def test_paths_cannot_leave_the_study_folder(served, tmp_path):
    outside = tmp_path / "outside-secret.json"
    outside.write_text('{"marker": "kept-out-7731"}')
    folder = served.session.folder
    (folder / "link.json").symlink_to(outside)
    for path in (
        "static/../../../../etc/passwd", "static/%2e%2e/%2e%2e/etc/passwd",
        "static/..%2f..%2fsummary.json", "../summary.json", "static/index.html/../../x",
    ):
        status, body = http(api_url(served, path))
        assert status in (403, 404), path
        assert b"root:" not in body and b"schema_version" not in body
    for name in ("../outside-secret.json", "/etc/passwd", "%2e%2e%2fsummary.json",
                 "..%2f..%2fetc%2fpasswd", "link.json", ".", "", "nights", "summary.txt",
                 "sub/summary.json", "..\\summary.json"):
        status, body = http(api_url(served, f"api/file?name={name}"))
        assert status in (403, 404), name
        assert b"kept-out-7731" not in body and b"root:" not in body
    status, body = http(api_url(served, "api/file?name=summary.json"))
    assert status == 200 and json.loads(body)["schema_version"]


# ------------------------------------------------------------------------- API
def test_windows_are_min_max_envelopes_of_the_raw_samples(served):
    session = served.session
    night = session.night_s
    for span in (30.0, 120.0, 600.0, night):
        win = _json(http(api_url(served, f"api/window?t0=0&t1={span}&px=1500")))
        for key, item in win["lanes"].items():
            n = len(item["t"])
            assert n * (1 if item["raw"] else 2) <= 2 * MAX_COLUMNS, (key, span)
    # The envelope against its definition, computed naively column by column.
    lane = session.lanes["flow"]
    t0, t1 = 1000.0, 1600.0
    env = window_envelope(lane.data, lane.fs, lane.t0_s, t0, t1, 700)
    i0, i1 = int(t0 * lane.fs), int(t1 * lane.fs)
    # Column k holds samples floor(k n / 700) .. floor((k + 1) n / 700) - 1.
    edges = [k * (i1 - i0) // 700 for k in range(701)]
    chunk = lane.data[i0:i1]
    naive_lo = [np.nanmin(chunk[a:b]) for a, b in zip(edges[:-1], edges[1:], strict=True)]
    naive_hi = [np.nanmax(chunk[a:b]) for a, b in zip(edges[:-1], edges[1:], strict=True)]
    assert not env.raw and len(env.lo) == 700
    np.testing.assert_allclose(env.lo, naive_lo)
    np.testing.assert_allclose(env.hi, naive_hi)
    # A short window is sent sample by sample.
    short = window_envelope(lane.data, lane.fs, lane.t0_s, 100.0, 105.0, 1000)
    assert short.raw and len(short.lo) == int(5 * lane.fs)


def test_strip_has_one_point_per_30_seconds(served):
    strip = _json(http(api_url(served, "api/strip")))
    night = served.session.night_s
    assert strip["step_s"] == 30.0
    assert len(strip["spo2_mean"]) == int(np.ceil(night / 30.0))
    values = [v for v in strip["spo2_mean"] if v is not None]
    assert values and 50 <= min(values) <= max(values) <= 100  # SpO2 is a percentage


# ------------------------------------------------------------------------- edit log
def _first_respiratory(events: list[dict]) -> dict:
    return next(e for e in events if e["event"] in RESPIRATORY)


def test_edit_log_is_append_only_and_never_touches_events_csv(served):
    folder = served.session.folder
    auto_bytes = (folder / "events.csv").read_bytes()
    events = _json(http(api_url(served, "api/events")))["events"]
    target = _first_respiratory(events)
    other = [e for e in events if e["event"] in RESPIRATORY][1]

    _edit(served, action="reject", event_id=target["event_id"])
    log_after_one = (folder / EDIT_LOG).read_bytes()
    entry = json.loads(log_after_one.decode().splitlines()[0])
    assert entry["action"] == "reject" and entry["reviewer"] == "Dr Test Reviewer"
    assert entry["before"]["status"] == "auto" and entry["after"]["status"] == "rejected"
    assert entry["before"]["event"] == target["event"]
    assert entry["at"].endswith("Z")
    assert entry["auto_events_sha256"] == hashlib.sha256(auto_bytes).hexdigest()

    new_type = "central_apnea" if other["event"] != "central_apnea" else "hypopnea"
    _edit(served, action="retype", event_id=other["event_id"], event=new_type)
    _edit(served, action="adjust", event_id=other["event_id"],
          onset_s=other["onset_s"] - 2.0, duration_s=other["duration_s"] + 3.0)
    _edit(served, action="accept", event_id=target["event_id"])  # brought back
    _edit(served, action="reject", event_id=target["event_id"])
    log = (folder / EDIT_LOG).read_bytes()
    assert log.startswith(log_after_one)  # earlier lines are never rewritten
    assert len(log.decode().splitlines()) == 5
    assert (folder / "events.csv").read_bytes() == auto_bytes

    result = _json(http(api_url(served, "api/events")))
    by_id = {e["event_id"]: e for e in result["events"]}
    assert by_id[target["event_id"]]["status"] == "rejected"
    assert by_id[other["event_id"]]["event"] == new_type
    assert by_id[other["event_id"]]["retyped"] and by_id[other["event_id"]]["adjusted"]
    pending = result["pending"]
    assert (pending["rejected"], pending["retyped"], pending["adjusted"], pending["added"]) \
        == (1, 1, 1, 0)
    assert pending["edited_count"] == 2  # two distinct events


def test_bad_edits_are_refused_and_not_logged(served):
    folder = served.session.folder
    events = _json(http(api_url(served, "api/events")))["events"]
    target = _first_respiratory(events)
    bad = [
        {"action": "reject", "event_id": "a999999"},
        {"action": "retype", "event_id": target["event_id"], "event": "snore_event"},
        {"action": "explode", "event_id": target["event_id"]},
        {"action": "add", "event": "hypopnea", "onset_s": -5, "duration_s": 20},
        {"action": "add", "event": "hypopnea", "onset_s": 100, "duration_s": 0.2},
        {"action": "add", "event": "hypopnea", "onset_s": served.session.night_s - 5,
         "duration_s": 20},
        {"action": "add", "event": "hypopnea", "onset_s": 100, "duration_s": 20,
         "rule_sets": ["no-such-rules"]},
    ]
    for request in bad:
        status, body = http(api_url(served, "api/edit"),
                            body={**request, "reviewer": "Dr Test Reviewer"})
        assert status == 400, request
        assert json.loads(body)["error"]
    status, _ = http(api_url(served, "api/edit"),
                     body={"action": "reject", "event_id": target["event_id"], "reviewer": ""})
    assert status == 400  # who made an edit is part of the log
    assert not (folder / EDIT_LOG).exists()


def test_an_altered_log_is_refused(served):
    folder = served.session.folder
    events = _json(http(api_url(served, "api/events")))["events"]
    target = _first_respiratory(events)
    _edit(served, action="reject", event_id=target["event_id"])
    _edit(served, action="accept", event_id=target["event_id"])
    lines = (folder / EDIT_LOG).read_text().splitlines()
    (folder / EDIT_LOG).write_text(lines[1] + "\n" + lines[0] + "\n")  # reordered
    with pytest.raises(UnreadableInput, match="does not follow"):
        rescore_study(folder, conditioned=served.session.conditioned,
                      breaths=served.session.breaths)


# ------------------------------------------------------------------------- rescoring
def test_rescore_changes_the_rei_by_one_event_per_monitoring_hour(served):
    folder = served.session.folder
    auto_summary = json.loads((folder / "summary.json").read_text())
    events = _json(http(api_url(served, "api/events")))["events"]
    rule_sets = [r["name"] for r in auto_summary["rule_sets"]]
    first = rule_sets[0]
    # Reject one respiratory event scored under every rule set, add one under the first.
    target = next(e for e in events if e["event"] in RESPIRATORY
                  and set(e["rule_sets"]) == set(rule_sets)
                  and bool(served.session.conditioned.in_analysis(e["onset_s"] + 1)))
    onset = quiet_onset(events, served.session.conditioned, served.session.night_s)
    _edit(served, action="reject", event_id=target["event_id"])
    _edit(served, action="add", event="hypopnea", onset_s=onset, duration_s=20.0,
          rule_sets=[first])
    _edit(served, action="reject", event_id=next(
        e for e in events if e["event"] in RESPIRATORY and e is not target
        and set(e["rule_sets"]) == set(rule_sets)
        and bool(served.session.conditioned.in_analysis(e["onset_s"] + 1)))["event_id"])

    result = _json(http(api_url(served, "api/rescore"), body={"reviewer": "Dr Test Reviewer"}))
    new_summary = json.loads((folder / "summary.json").read_text())
    assert result["indices"] == new_summary["indices"]
    mt_h = auto_summary["monitoring_time_h"]
    assert new_summary["monitoring_time_h"] == pytest.approx(mt_h, abs=1e-6)
    # AASM HSAT: REI = events x 60 / MT(min); so each event moves the REI by 1 / MT(h).
    per_event = 1.0 / mt_h
    rounding = 0.051  # summary.json gives the REI to one decimal
    for name in rule_sets:
        change = (-2 + (1 if name == first else 0)) * per_event
        assert new_summary["indices"][name]["rei"] == pytest.approx(
            auto_summary["indices"][name]["rei"] + change, abs=2 * rounding), name

    # The recomputed summary, review object included, follows summary.schema.json.
    import jsonschema

    schema = json.loads((Path(__file__).parents[1] / "hsat/schemas/summary.schema.json")
                        .read_text())
    jsonschema.validate(new_summary, schema)
    review = new_summary["review"]
    assert review["reviewed"] is True and review["reviewer"] == "Dr Test Reviewer"
    assert (review["edited_count"], review["added"], review["rejected"], review["retyped"],
            review["adjusted"]) == (3, 1, 2, 0, 0)
    # The automatic results are kept; the reviewed table lists the kept events.
    assert json.loads((folder / "summary-auto.json").read_text()) == auto_summary
    reviewed = (folder / REVIEWED_EVENTS).read_text().splitlines()
    assert len(reviewed) - 1 == len(read_auto_events(folder).events) - 2 + 1
    assert any(",added" in line for line in reviewed)

    # `hsat rescore` from the command line gives the same indices.
    from hsat.cli import main

    assert main(["rescore", str(folder)]) == 0
    again = json.loads((folder / "summary.json").read_text())
    assert again["indices"] == new_summary["indices"]
    assert again["review"]["edited_count"] == 3


def test_the_server_stops_when_idle_or_asked(base_session, study, tmp_path):
    session = session_for(base_session, clone_study(study, "idle-study"))
    server, thread = start_server(session, idle_minutes=1 / 60)  # one idle second
    thread.join(timeout=15)
    assert not thread.is_alive()
    server.server_close()
    server, thread = start_server(session, idle_minutes=5)
    assert http(api_url(server, "api/close"), body={})[0] == 200
    thread.join(timeout=10)
    assert not thread.is_alive()
    server.server_close()
    time.sleep(0.1)
    with pytest.raises(OSError):
        socket.create_connection(("127.0.0.1", server.port), timeout=2).close()


def test_hsat_review_prints_the_address_and_stops_on_finish(study):
    import sys

    folder = clone_study(study, "cli-study")
    proc = subprocess.Popen(
        [sys.executable, "-m", "hsat.cli", "review", str(folder), "--no-browser",
         "--idle-minutes", "2", "--reviewer", "Dr Test Reviewer"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        url = proc.stdout.readline().strip()
        assert url.startswith("http://127.0.0.1:") and "token=" in url
        page_url, token = url.split("?token=")
        assert len(token) >= 40  # secrets.token_urlsafe(32): 256 random bits
        status, body = http(f"{page_url}api/study?token={token}")
        assert status == 200 and json.loads(body)["default_reviewer"] == "Dr Test Reviewer"
        assert http(f"{page_url}api/study")[0] == 403
        assert http(f"{page_url}api/close?token={token}", body={})[0] == 200
        assert proc.wait(timeout=20) == 0
        assert "Traceback" not in proc.stderr.read()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=5)


def test_hsat_review_names_a_missing_study_folder(tmp_path, capsys):
    from hsat.cli import main

    code = main(["review", str(tmp_path / "no-such-study"), "--no-browser"])
    assert code == 4  # unreadable input (hsat.errors)
    err = capsys.readouterr().err
    assert "no-such-study" in err and "Traceback" not in err


def test_signing_from_the_page_needs_current_indices_and_never_overwrites(served):
    folder = served.session.folder
    events = _json(http(api_url(served, "api/events")))["events"]
    _edit(served, action="reject", event_id=_first_respiratory(events)["event_id"])
    adequate = json.loads((folder / "summary.json").read_text())["adequacy"]["adequate"]
    request = {"physician": "Ines Varga, MD", "interpretation": "Reviewed; see the indices.",
               "acknowledge_inadequate": not adequate}
    status, body = http(api_url(served, "api/sign"), body=request)
    assert status == 409 and b"recompute" in body  # an edit is not in the indices yet
    assert not list(folder.glob("report-v*-signed.pdf"))

    _json(http(api_url(served, "api/rescore"), body={"reviewer": "Dr Test Reviewer"}))
    first = _json(http(api_url(served, "api/sign"), body=request))
    assert (first["version"], first["report"]) == (1, "report-v1-signed.pdf")
    v1 = (folder / first["report"]).read_bytes()
    assert hashlib.sha256(v1).hexdigest() == first["sha256"]
    # Signing again is an amendment (hsat amend): it needs a reason and keeps version 1.
    status, body = http(api_url(served, "api/sign"), body=request)
    assert status == 409 and b"reason" in body
    second = _json(http(api_url(served, "api/sign"),
                        body={**request, "reason": "Added the position findings."}))
    assert second["version"] == 2
    assert (folder / "report-v1-signed.pdf").read_bytes() == v1
    from hsat.signoff import verify

    assert verify(folder).ok


def test_a_moved_hypopnea_is_measured_like_the_scoring_stage(served):
    # The page's estimate for an edited span against the AASM hypopnea rule (>= 30 %
    # airflow drop from the pre-event baseline; a >= 3-point desaturation under rule 1A,
    # standards.md section 1.2) and against the scoring stage's own desaturation figure.
    events = _json(http(api_url(served, "api/events")))["events"]
    hypopneas = [e for e in events if e["event"] == "hypopnea"][:10]
    assert hypopneas
    for e in hypopneas:
        scored = _json(http(api_url(served, f"api/measure?id={e['event_id']}")))["measures"][0]
        assert scored["source"] == "scored"
        _edit(served, action="adjust", event_id=e["event_id"], onset_s=e["onset_s"] + 0.5,
              duration_s=e["duration_s"])
        m = _json(http(api_url(served, f"api/measure?id={e['event_id']}")))["measures"][0]
        assert m["source"] == "estimated"
        assert m["drop_pct"] >= 30.0, e
        assert m["spo2_drop"] == pytest.approx(float(e["scored"]["desat_pct"]), abs=1.5), e
        if "aasm-3pct" in e["rule_sets"]:
            assert m["spo2_drop"] >= 3.0
