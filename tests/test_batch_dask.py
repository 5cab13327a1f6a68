"""``hsat batch --scheduler``: the same per-study job on a Dask cluster gives the same
results and the same registry as the local process pool.

The cluster is a LocalCluster on the loopback address (127.0.0.1) with two small worker
processes; nothing leaves this machine.
"""

from __future__ import annotations

import contextlib
import io
import json
from pathlib import Path

import pytest

from _batch_nights import INADEQUATE, SHORT, write_corrupt, write_plan
from hsat.batch import open_registry
from hsat.cli import main

distributed = pytest.importorskip("dask.distributed", reason="needs hsat[cluster]")

#: summary.json keys that legitimately differ between two runs (when, and where).
_VOLATILE_STUDY_KEYS = ("analyzed_at",)


def _hsat(*args: object) -> int:
    with contextlib.redirect_stdout(io.StringIO()):
        return main([str(a) for a in args])


def _comparable(folder: Path) -> tuple[dict, str]:
    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    for key in _VOLATILE_STUDY_KEYS:
        summary.get("study", {}).pop(key, None)
    summary.get("software", {}).pop("run_at", None)
    return summary, (folder / "events.csv").read_text(encoding="utf-8")


def _registry(out: Path) -> dict[str, tuple]:
    with open_registry(out, create=False) as registry:
        return {r.file_name: (r.study_sha256, r.status, r.error_kind, r.config_hash,
                              r.software_version, r.rule_sets, r.monitoring_time_h,
                              r.adequacy_reasons, r.t90_pct, r.nadir_pct,
                              r.hypoxic_burden, r.results, Path(str(r.folder)).name
                              if r.folder else None)
                for r in registry.list_runs(all_runs=True)}


@pytest.fixture(scope="module")
def inbox(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("inbox")
    write_plan(folder, INADEQUATE)
    write_plan(folder, SHORT[1])
    write_plan(folder, SHORT[2])
    write_corrupt(folder)
    return folder


def test_dask_path_matches_local_path(inbox: Path, tmp_path: Path) -> None:
    local = tmp_path / "local"
    assert _hsat("batch", inbox, "--out", local, "--jobs", "2", "--no-report") == 9
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
        protocol="tcp", dashboard_address=None, worker_dashboard_address=None)
    try:
        remote = tmp_path / "dask"
        code = _hsat("batch", inbox, "--out", remote, "--scheduler",
                     cluster.scheduler_address, "--no-report")
    finally:
        cluster.close()
    assert code == 9  # the corrupt file fails on the cluster too
    local_rows, remote_rows = _registry(local), _registry(remote)
    assert local_rows == remote_rows
    assert local_rows["night-x-corrupt.edf"][1] == "failed"
    for name, row in local_rows.items():
        if row[-1] is None:
            continue
        assert _comparable(local / "studies" / row[-1]) == _comparable(
            remote / "studies" / row[-1]), name
    with open_registry(remote, create=False) as registry:
        (batch,) = registry.conn.execute("SELECT scheduler FROM batches").fetchall()
    assert batch[0] == cluster.scheduler_address


def test_unreachable_scheduler_is_a_clear_error(inbox: Path, tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    # Port 9 on loopback ("discard") has no Dask scheduler listening.
    code = main(["batch", str(inbox), "--out", str(tmp_path / "o"), "--scheduler",
                 "tcp://127.0.0.1:9", "--scheduler-timeout", "2"])
    assert code == 6
    assert "cannot reach the Dask scheduler" in capsys.readouterr().err
