"""One run per log, and no results lost to a crash (issue 11, items 2 and 5)."""

from __future__ import annotations

import multiprocessing
import os
import signal
import sqlite3
from pathlib import Path

import pandas as pd
import pytest

from analysis.archive.store import Archive
from analysis.ingest.stream import ingest_files
from tests.analysis.ingest_kit import MAP, PROFILE, state_lines, torque_lines, write


def _logs(tmp_path: Path) -> list[Path]:
    return [
        write(tmp_path / "race_state.csv", state_lines(1000)),
        write(tmp_path / "race_torque.csv", torque_lines(250)),
    ]


def test_two_ingests_that_both_miss_the_early_check_store_one_run(tmp_path, monkeypatch):
    # Both ingests hash the files before either stores: the early look-up finds nothing
    # for either (simulated by hiding it), so only the commit can tell them apart.
    archive = Archive(tmp_path / "data")
    logs = _logs(tmp_path)
    monkeypatch.setattr(Archive, "find_by_hash", lambda self, h: None)
    first = ingest_files(archive, logs, MAP, PROFILE)
    second = ingest_files(archive, logs, MAP, PROFILE)
    monkeypatch.undo()
    assert first.duplicate_of is None
    assert second.duplicate_of == first.run_id and second.run_id == first.run_id
    assert [r["run_id"] for r in archive.list_runs()] == [first.run_id]
    assert len(list((archive.root / "runs").iterdir())) == 1
    assert not any((archive.root / "staging").iterdir())


def test_catalog_refuses_a_second_row_with_the_same_source_hash(tmp_path):
    archive = Archive(tmp_path / "data")
    out = ingest_files(archive, _logs(tmp_path), MAP, PROFILE)
    meta = archive.get_meta(out.run_id)
    with (
        sqlite3.connect(archive.root / "catalog.sqlite") as con,
        pytest.raises(sqlite3.IntegrityError, match="UNIQUE"),
    ):
        con.execute(
            "INSERT INTO runs (run_id, source_hash) VALUES (?, ?)", ("other", meta["source_hash"])
        )


def _ingest_in_child(data: str, logs: list[str], go, out) -> None:
    archive = Archive(data)
    go.wait()
    result = ingest_files(archive, logs, MAP, PROFILE)
    out.put((result.run_id, result.duplicate_of))


def test_concurrent_ingests_of_the_same_files_store_one_run(tmp_path):
    # Issue 11: two ingests started together stored the run twice in 4 of 5 tries.
    # "spawn", not "fork": a fork copies a process whose other threads (pyarrow's pools,
    # earlier tests' workers) may hold locks, and the child then crashed now and then.
    ctx = multiprocessing.get_context("spawn")
    logs = [str(p) for p in _logs(tmp_path)]
    for attempt in range(3):
        data = str(tmp_path / f"data{attempt}")
        Archive(data)
        go, out = ctx.Event(), ctx.Queue()
        procs = [ctx.Process(target=_ingest_in_child, args=(data, logs, go, out)) for _ in range(2)]
        for p in procs:
            p.start()
        go.set()
        for p in procs:
            p.join(60)
            assert p.exitcode == 0
        results = [out.get(timeout=5) for _ in procs]
        ids = {r[0] for r in results}
        assert len(ids) == 1, results  # the loser reports the winner's run id
        assert sorted(r[1] is None for r in results) == [False, True]
        assert len(Archive(data).list_runs()) == 1
        assert len(list((Path(data) / "runs").iterdir())) == 1


def _kill_between_renames(data: str, run_id: str) -> None:
    archive = Archive(data)
    real_rename = os.rename
    calls = []

    def rename(src, dst):
        calls.append((src, dst))
        real_rename(src, dst)
        if len(calls) == 1:  # the old results are aside, the new ones not yet in place
            os.kill(os.getpid(), signal.SIGKILL)

    os.rename = rename  # type: ignore[assignment]
    events = pd.DataFrame({"kind": ["new"]})
    archive.write_results(run_id, events, pd.DataFrame({"t": [0.0]}), {"version": "new"})


def test_a_kill_between_the_two_renames_keeps_the_previous_results(tmp_path):
    # Issue 11, item 5: a kill after results/ was moved aside left no results, and the
    # next start deleted the aside copy.
    archive = Archive(tmp_path / "data")
    run_id = ingest_files(archive, _logs(tmp_path), MAP, PROFILE).run_id
    archive.write_results(
        run_id, pd.DataFrame({"kind": ["old"]}), pd.DataFrame({"t": [0.0]}), {"version": "old"}
    )
    # "spawn", not "fork": a fork copies a process whose other threads (pyarrow's pools,
    # earlier tests' workers) may hold locks, and the child then crashed now and then.
    ctx = multiprocessing.get_context("spawn")
    child = ctx.Process(target=_kill_between_renames, args=(str(archive.root), run_id))
    child.start()
    child.join(60)
    assert child.exitcode == -signal.SIGKILL
    assert not (archive.root / "runs" / run_id / "results").exists()  # the crash window
    reopened = Archive(archive.root)
    got = reopened.read_results(run_id)
    assert got is not None and got[1] == {"version": "old"}
    assert list(got[0]["kind"]) == ["old"]
    assert reopened.list_runs()[0]["analysed"] is True
    assert sorted(p.name for p in (archive.root / "runs" / run_id).iterdir()) == [
        "meta.json", "results", "streams",
    ]  # fmt: skip
