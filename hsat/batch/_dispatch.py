"""Where the per-study job runs: a local process pool, or a Dask distributed cluster.

Both hand back the same :class:`StudyOutcome` objects to the batch process, which alone
writes the registry. Dask is imported only when a scheduler address is given.
"""

from __future__ import annotations

import multiprocessing
import os
import time
from collections.abc import Callable, Generator, Iterator
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from typing import Any

from hsat.batch._study import StudyOutcome, StudyTask, _failed, process_study, watch_parent
from hsat.errors import ConfigError

#: How often the batch looks at its running studies (and redraws the progress line).
POLL_S = 0.25

Tick = Callable[[list[StudyTask]], None]


def _crashed(task: StudyTask, why: str) -> StudyOutcome:
    return _failed(task, "", time.monotonic(), why, "internal")


def _run_pool(tasks: list[StudyTask], jobs: int, tick: Tick,
              job: Callable[[StudyTask], StudyOutcome]
              ) -> Generator[StudyOutcome, None, list[StudyTask]]:
    """Yield the outcomes one pool produces; return the tasks lost when it broke."""
    pool = ProcessPoolExecutor(max_workers=max(1, min(jobs, len(tasks))),
                               mp_context=multiprocessing.get_context("spawn"),
                               initializer=watch_parent, initargs=(os.getpid(),))
    pending: dict[Future[StudyOutcome], StudyTask] = {pool.submit(job, t): t for t in tasks}
    lost: list[StudyTask] = []
    try:
        while pending:
            finished = [f for f in pending if f.done()]
            if not finished:
                # The pool marks one queued job "running" ahead: show at most `jobs`.
                tick([pending[f] for f in pending if f.running()][:jobs])
                time.sleep(POLL_S)
                continue
            for future in finished:
                task = pending.pop(future)
                try:
                    outcome = future.result()
                except BrokenProcessPool:
                    lost.append(task)
                    continue
                yield outcome
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
    return lost


def run_local(tasks: list[StudyTask], jobs: int, tick: Tick,
              job: Callable[[StudyTask], StudyOutcome] = process_study
              ) -> Iterator[StudyOutcome]:
    """Run ``tasks`` on ``jobs`` spawned worker processes; yield outcomes as they finish.

    A worker that dies (out of memory, a crash in a native library) breaks the pool and
    every study still in it. Those studies are then run one at a time, each in a pool of
    its own, so that only the study whose worker dies again is recorded as failed.
    ``job`` is the per-study function (module-level: workers import it by name).
    """
    lost = yield from _run_pool(tasks, jobs, tick, job)
    for task in lost:
        if (yield from _run_pool([task], 1, tick, job)):
            yield _crashed(task, "the worker process analysing it died twice "
                           "(out of memory?)")


def connect(address: str, timeout_s: float = 20.0) -> Any:
    """A Dask ``Client`` for the scheduler at ``address`` (imported only when asked).

    Raises
    ------
    ConfigError
        Dask is not installed, or no scheduler answers at ``address`` in ``timeout_s``.
    """
    try:
        from dask.distributed import Client
    except ImportError:
        raise ConfigError(address, "--scheduler needs Dask: pip install 'hsat[cluster]'"
                          ) from None
    try:
        return Client(address, timeout=timeout_s, set_as_default=False)
    except (OSError, TimeoutError) as exc:
        raise ConfigError(address, f"cannot reach the Dask scheduler ({exc})") from None


def run_dask(tasks: list[StudyTask], client: Any, tick: Tick) -> Iterator[StudyOutcome]:
    """Run ``tasks`` through a Dask ``client``; yield outcomes as they finish.

    The workers must see the inbox and the output folder at the same paths (a shared
    file system). A study whose workers keep dying is recorded as failed.
    """
    pending = {
        client.submit(process_study, task, pure=False,
                      key=f"hsat-study-{task.sha256[:16]}-{os.getpid()}-{n}"): task
        for n, task in enumerate(tasks)}
    while pending:
        finished = [f for f in pending if f.done()]
        if not finished:
            tick([pending[f] for f in pending if f.status == "pending"])
            time.sleep(POLL_S)
            continue
        for future in finished:
            task = pending.pop(future)
            try:
                yield future.result()
            except Exception as exc:  # KilledWorker, a lost worker, a cancelled task
                yield _crashed(task, f"the cluster could not run it ({type(exc).__name__}:"
                               f" {exc})")
            future.release()
