"""Archive jobs give the same table serially, on local Dask processes and on a cluster.

The archive is INVENTED (``invented_archive.py``): three short runs of the simulated demo
cell, one of them altered after closing (a flipped bit in a displacement) and one folder
whose ``run.json`` is not JSON. The cluster is a real ``dask.distributed.LocalCluster``
of two worker processes started here, reached by its scheduler address like a remote one.
"""

from __future__ import annotations

import dataclasses
import io
from pathlib import Path

import pytest

from estimator.profile import save_profile
from tests.ui.invented_archive import PROFILE, record_run
from ui.archive import parallel
from ui.archive.parallel import Plan, plan_execution, run_tasks
from ui.archive.progress import RunProgress
from ui.cli import main

SAMPLE_BYTES = 44  # one record of samples.bin (docs/run-format.md)
DISPLACEMENT_AT = 36  # offset of displacement_m in the record


@pytest.fixture(scope="module")
def archive(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    base = tmp_path_factory.mktemp("parallel")
    root = base / "runs"
    short = "hold 0.4 0; hold 0.5 50; hold 0.5 0"
    folders = [record_run(root, seed=s, programme=short) for s in (21, 22, 23)]
    data = bytearray((folders[1] / "samples.bin").read_bytes())
    data[SAMPLE_BYTES * 300 + DISPLACEMENT_AT] ^= 0x10  # tampering: one altered sample
    (folders[1] / "samples.bin").write_bytes(bytes(data))
    broken = root / "broken-run"
    broken.mkdir()
    (broken / "run.json").write_text("{not json", encoding="utf-8")
    corrected = PROFILE.with_updates(
        plant=dataclasses.replace(PROFILE.plant, damping_ratio=PROFILE.plant.damping_ratio * 1.1)
    )
    save_profile(corrected, base / "corrected.toml")
    return {"base": base, "root": root, "tampered": folders[1]}


def _table(path: Path) -> str:
    """The table without its '#' lines (they hold the command, which differs by design)."""
    return "".join(line for line in path.open() if not line.startswith("#"))


def _impact(archive: dict[str, Path], name: str, where: list[str]) -> str:
    """The impact table made with the placement options ``where``."""
    base, root = archive["base"], archive["root"]
    profile = str(base / "corrected.toml")
    out = base / name
    argv = ["impact", "--profile", profile, "--root", str(root), "--out", str(out), *where]
    assert main(argv) == 1  # the tampered and the broken run cannot be examined
    return _table(out / "impact.csv")


def _audit(archive: dict[str, Path], name: str, where: list[str]) -> str:
    """The audit --all table made with the placement options ``where``."""
    base = archive["base"]
    argv = ["audit", "--all", "--root", str(archive["root"]), "--out", str(base / name), *where]
    assert main(argv) == 1  # one run differs, one is unreadable
    return _table(base / name)


def test_serial_local_dask_and_a_two_worker_cluster_give_the_same_tables(
    archive: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    from dask.distributed import LocalCluster

    serial = _impact(archive, "serial", ["--workers", "1"])
    serial_audit = _audit(archive, "serial.csv", ["--workers", "1"])
    out = capsys.readouterr().out
    assert "running serially in this process: --workers 1" in out
    # the tampered run is named in the audit table, and the job went on to the others
    assert f"{archive['tampered'].name}  " in out and "differs: altered sample" in out
    assert "4 run(s): 2 identical, 1 differ, 1 unreadable" in out

    local = _impact(archive, "local", ["--workers", "2"])
    assert "running on 2 local Dask worker processes" in capsys.readouterr().out

    with LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
    ) as cluster:
        address = cluster.scheduler_address
        remote = _impact(archive, "cluster", ["--scheduler", address])
        remote_audit = _audit(archive, "cluster.csv", ["--scheduler", address])
    out = capsys.readouterr().out
    assert f"running on the Dask cluster at {address}" in out
    assert "differs: altered sample" in out
    assert serial == local == remote and "reading" in serial
    assert serial_audit == remote_audit and "altered sample" in serial_audit


def test_without_dask_the_jobs_run_serially_and_say_so(
    archive: dict[str, Path], capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(parallel, "dask_available", lambda: False)
    assert main(["audit", "--all", "--root", str(archive["root"])]) == 1
    out = capsys.readouterr().out
    assert "running serially in this process: Dask is not installed" in out
    assert 'pip install "forcelens[archive]"' in out
    assert main(["audit", "--all", "--root", str(archive["root"]), "--scheduler", "x:1"]) == 1
    assert "--scheduler needs Dask" in capsys.readouterr().err


def test_an_unreachable_scheduler_is_one_line(
    archive: dict[str, Path], capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(parallel, "CONNECT_TIMEOUT_S", 1.0)
    # port 9 on the loopback (discard): nothing of ours listens there
    argv = ["audit", "--all", "--root", str(archive["root"]), "--scheduler", "tcp://127.0.0.1:9"]
    assert main(argv) == 1
    err = capsys.readouterr().err
    assert "no Dask scheduler answers there" in err and len(err.strip().splitlines()) == 1


def _task(item: int) -> int:
    if item == 2:
        raise ValueError("run 2: cannot be read")
    if item == 3:
        raise RuntimeError("a fault")
    return item * item


def test_a_failing_task_is_an_outcome_and_order_is_kept() -> None:
    ticks = []
    outcomes = run_tasks(_task, [1, 2, 3, 4], Plan("serial", 1), advance=lambda: ticks.append(1))
    assert [o.value for o in outcomes] == [1, None, None, 16]
    assert outcomes[1].problem == "run 2: cannot be read" and outcomes[1].fault is None
    assert isinstance(outcomes[2].fault, RuntimeError) and outcomes[2].problem is None
    assert len(ticks) == 4


def test_an_outcome_computed_by_other_code_is_refused_for_its_run() -> None:
    from ui.archive.fingerprint import task_code

    names, digest = task_code()
    assert "ui.archive.fingerprint" in names
    here = parallel.TaskOutcome(value=1, code=(names, digest))
    there = parallel.TaskOutcome(value=1, code=(names, "0123456789abcdef"))
    assert parallel._same_code(here) == here
    refused = parallel._same_code(there)
    assert refused.value is None and "other forcelens sources" in (refused.problem or "")


def test_plan_follows_the_options() -> None:
    assert plan_execution(1, None, 10).kind == "serial"
    assert plan_execution(None, None, 1).kind == "serial"  # one run: no cluster for it
    assert plan_execution(8, None, 3) == Plan("local", 3)  # never more workers than runs
    assert plan_execution(None, "tcp://h:8786", 10) == Plan("cluster", 0, "tcp://h:8786")
    with pytest.raises(ValueError, match="--workers 0"):
        plan_execution(0, None, 10)


def test_progress_bar_counts_runs() -> None:
    stream = io.StringIO()
    bar = RunProgress(4, "audit", stream=stream, enabled=True)
    for _ in range(4):
        bar.advance()
    bar.close()
    text = stream.getvalue()
    assert "4/4 runs" in text and "[" + "#" * 30 + "]" in text and text.endswith("\n")
    quiet = io.StringIO()
    RunProgress(4, "audit", stream=quiet).close()  # not a terminal: nothing drawn
    assert quiet.getvalue() == ""
