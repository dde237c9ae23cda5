"""One task per run: serially, on local Dask worker processes, or on a Dask cluster.

An archive job is a map over runs: each task reads one run folder and returns a small
plain value. `plan_execution` decides where the tasks run:

* by default on this machine's cores, one Dask worker process per core (a
  ``dask.distributed.LocalCluster`` started for the job and stopped after it);
* on an existing Dask cluster with ``--scheduler ADDRESS`` (the run folders must then
  sit on storage the workers see at the same paths, and forcelens must be installed on
  the workers);
* serially in this process with ``--workers 1``, for a single run, or when Dask is not
  installed (the job says so).

`run_tasks` returns one `TaskOutcome` per item, in the order of the items, whatever the
number of workers or the order in which they finish: each task depends on its run
alone, so the results equal those of a serial loop. Each outcome carries the digest of
the code that computed it (``ui.archive.fingerprint``); one from a worker running other
forcelens sources or numeric libraries is refused for its run. A task that raises ValueError or
OSError (a run that cannot be read) gives an outcome with its one-line problem; any
other exception (a fault of forcelens, a lost worker) gives an outcome with the
exception, and the job goes on with the other runs.
"""

from __future__ import annotations

import argparse
import functools
import importlib.util
import logging
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

__all__ = [
    "Plan",
    "TaskOutcome",
    "add_parallel_options",
    "dask_available",
    "local_cluster",
    "map_on_client",
    "plan_execution",
    "run_tasks",
]

#: How long to wait for a cluster's scheduler to answer, s.
CONNECT_TIMEOUT_S = 10.0
#: How long to wait for the first worker of a cluster to join, s.
WORKER_WAIT_S = 30.0
_INSTALL = 'pip install "forcelens[archive]"'


def add_parallel_options(parser: argparse.ArgumentParser) -> None:
    """``--workers N`` and ``--scheduler ADDRESS``, worded the same in every archive job."""
    group = parser.add_mutually_exclusive_group()
    group.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help="number of local Dask worker processes (default: one per core; 1 runs "
        "serially in this process)",
    )
    group.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="run on an existing Dask cluster, e.g. tcp://HOST:8786 (its workers must see "
        "the run folders at the same paths and have forcelens installed); default: local "
        "workers",
    )


def dask_available() -> bool:
    """True when ``dask.distributed`` can be imported (the ``archive`` extra)."""
    return importlib.util.find_spec("distributed") is not None


def _cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        return os.cpu_count() or 1


@dataclass(frozen=True)
class Plan:
    """Where the tasks of a job run.

    Attributes:
        kind: ``"serial"`` (this process), ``"local"`` (a LocalCluster of worker
            processes started for the job) or ``"cluster"`` (an existing scheduler).
        workers: local worker processes (1 for serial; 0 for a cluster: it decides).
        address: the scheduler address of a cluster, else None.
        reason: why the job runs serially, when it does.
    """

    kind: str
    workers: int
    address: str | None = None
    reason: str = ""

    def describe(self) -> str:
        """One line saying where the job runs."""
        if self.kind == "cluster":
            return f"running on the Dask cluster at {self.address}"
        if self.kind == "local":
            return f"running on {self.workers} local Dask worker processes"
        return f"running serially in this process: {self.reason}"


def plan_execution(workers: int | None, scheduler: str | None, tasks: int) -> Plan:
    """The plan for ``tasks`` tasks given ``--workers`` and ``--scheduler``.

    Raises ValueError for ``--workers`` below 1, or ``--scheduler`` without Dask.
    """
    if workers is not None and workers < 1:
        raise ValueError(f"--workers {workers}: give at least 1 (1 runs serially)")
    if scheduler is not None:
        if not scheduler.strip():
            raise ValueError("--scheduler: give the scheduler address, e.g. tcp://host:8786")
        if not dask_available():
            raise ValueError(f"--scheduler needs Dask, which is not installed: {_INSTALL}")
        return Plan("cluster", 0, scheduler.strip())
    if workers == 1:
        return Plan("serial", 1, reason="--workers 1")
    if not dask_available():
        return Plan("serial", 1, reason=f"Dask is not installed ({_INSTALL} to use every core)")
    if tasks <= 1:
        return Plan("serial", 1, reason=f"{tasks} run(s) to do")
    n = min(workers or _cores(), tasks)
    if n <= 1:
        return Plan("serial", 1, reason="this machine has one core")
    return Plan("local", n)


@dataclass(frozen=True)
class TaskOutcome:
    """What one task gave.

    Attributes:
        value: the task's result, or None when it failed.
        problem: the one-line message of a ValueError or OSError the task raised (a run
            that cannot be read), else None.
        fault: any other exception (a fault of forcelens, a lost worker), else None.
        code: the forcelens modules that ran the task and their digest
            (``ui.archive.fingerprint.task_code``), or None.
    """

    value: Any = None
    problem: str | None = None
    fault: BaseException | None = None
    code: tuple[tuple[str, ...], str] | None = None

    @property
    def ok(self) -> bool:
        """True when the task returned a value."""
        return self.problem is None and self.fault is None


def _guarded(task: Callable[[Any], Any], item: Any) -> TaskOutcome:
    """Run one task; a run that cannot be read becomes an outcome, not an error."""
    from ui.archive.fingerprint import task_code

    try:
        return TaskOutcome(value=task(item), code=task_code())
    except (ValueError, OSError) as exc:
        return TaskOutcome(problem=str(exc) or type(exc).__name__, code=task_code())


def run_tasks(
    task: Callable[[Any], Any],
    items: Sequence[Any],
    plan: Plan,
    *,
    advance: Callable[[], None] = lambda: None,
) -> list[TaskOutcome]:
    """``task(item)`` for every item, where ``plan`` says; outcomes in the items' order.

    ``task`` must be a module-level function (workers import it by name) and ``items``
    and its results plain picklable values. ``advance`` is called once per finished
    task (the progress bar).

    Raises OSError when a cluster cannot be reached or never gets a worker.
    """
    return [_same_code(o) for o in _placed(task, items, plan, advance)]


def _same_code(outcome: TaskOutcome) -> TaskOutcome:
    """An outcome computed by other code than this process's becomes a problem of its run."""
    from ui.archive.fingerprint import digest_of

    if outcome.fault is not None or outcome.code is None:
        return outcome
    names, digest = outcome.code
    here = digest_of(names)
    if digest == here:
        return outcome
    return TaskOutcome(
        problem=f"computed by a worker running other forcelens sources or numeric libraries "
        f"(code {digest}, here {here}); install the same on every worker",
        code=outcome.code,
    )


def _placed(
    task: Callable[[Any], Any], items: Sequence[Any], plan: Plan, advance: Callable[[], None]
) -> list[TaskOutcome]:
    if plan.kind == "serial":
        return [_serial(task, item, advance) for item in items]
    from dask.distributed import Client

    if plan.kind == "local":
        with (
            local_cluster(plan.workers) as cluster,
            Client(cluster, set_as_default=False) as client,
        ):
            return map_on_client(client, task, items, advance)
    try:
        client = Client(plan.address, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
    except (OSError, ValueError, TypeError) as exc:
        raise OSError(
            f"--scheduler {plan.address}: no Dask scheduler answers there ({exc}); start "
            "one (dask scheduler, dask worker ADDRESS) or leave out --scheduler to use "
            "this machine's cores"
        ) from None
    with client:
        try:
            client.wait_for_workers(1, timeout=WORKER_WAIT_S)
        except TimeoutError:
            raise OSError(
                f"--scheduler {plan.address}: no worker joined the cluster within "
                f"{WORKER_WAIT_S:g} s; start workers with dask worker {plan.address}"
            ) from None
        return map_on_client(client, task, items, advance)


def local_cluster(workers: int) -> Any:
    """A ``LocalCluster`` of ``workers`` single-threaded worker processes for a job.

    Its HTTP server takes any free port (8787 may be taken). Dask starts worker processes
    with ``MALLOC_TRIM_THRESHOLD_=65536`` (memory back to the system early); that also
    stops glibc from raising its mmap threshold, so every array of a replay above 128 KiB
    is a fresh mapping and a replay runs about 30 % slower (measured: 6.5 against
    4.4 runs/s serially): the job's workers start without it, and live only for the job.
    """
    import dask
    from dask.distributed import LocalCluster

    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}):
        return LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=":0",
            silence_logs=logging.ERROR,
        )


def _serial(task: Callable[[Any], Any], item: Any, advance: Callable[[], None]) -> TaskOutcome:
    try:
        outcome = _guarded(task, item)
    except Exception as exc:  # a fault: recorded, the job goes on
        outcome = TaskOutcome(fault=exc)
    advance()
    return outcome


def map_on_client(
    client: Any, task: Callable[[Any], Any], items: Sequence[Any], advance: Callable[[], None]
) -> list[TaskOutcome]:
    """`run_tasks` on an open ``dask.distributed.Client`` (the benchmark reuses one)."""
    from dask.distributed import as_completed

    futures = client.map(functools.partial(_guarded, task), list(items), pure=False)
    position = {future.key: i for i, future in enumerate(futures)}
    outcomes: list[TaskOutcome | None] = [None] * len(futures)
    for future in as_completed(futures, loop=client.loop):
        i = position[future.key]
        try:
            outcomes[i] = future.result()
        except Exception as exc:  # a fault in the task or a lost worker
            outcomes[i] = TaskOutcome(fault=exc)
        future.release()
        advance()
    return [o if o is not None else TaskOutcome(fault=RuntimeError("no result")) for o in outcomes]
