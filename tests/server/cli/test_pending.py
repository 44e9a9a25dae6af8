"""Runs left unanalysed by an interrupted ingest get analysed (issue 11, item 6)."""

from __future__ import annotations

from pathlib import Path

from analysis.archive.store import Archive
from analysis.ingest.stream import ingest_files
from server.cli.main import main
from tests.analysis.ingest_kit import MAP, PROFILE, state_lines, torque_lines, write
from tests.server.dashboard_fixtures import RunInputs, fresh_app, upload_form, wait_job


def _stored_not_analysed(
    tmp_path: Path, stem: str = "p1", rows: int = 1000
) -> tuple[Archive, str, list[Path]]:
    """What an ingest killed between storing and analysing leaves: a run without results."""
    archive = Archive(tmp_path / "data")
    logs = [
        write(tmp_path / f"{stem}_state.csv", state_lines(rows)),
        write(tmp_path / f"{stem}_torque.csv", torque_lines(250)),
    ]
    run_id = ingest_files(archive, logs, MAP, PROFILE).run_id
    assert not archive.is_analysed(run_id)
    return archive, run_id, logs


def _ingest_args(archive: Archive, logs: list[Path]) -> list[str]:
    files = [str(p) for p in logs]
    return ["ingest", *files, "--map", str(MAP), "--profile", str(PROFILE),
            "--data", str(archive.root)]  # fmt: skip


def test_reingest_of_an_unanalysed_run_analyses_it(tmp_path, capsys):
    archive, run_id, logs = _stored_not_analysed(tmp_path)
    assert main(_ingest_args(archive, logs)) == 0
    out = capsys.readouterr().out
    assert "analysed now" in out
    assert Archive(archive.root).is_analysed(run_id)
    assert len(archive.list_runs()) == 1
    # and a second re-ingest has nothing left to do
    assert main(_ingest_args(archive, logs)) == 0
    assert "analysed now" not in capsys.readouterr().out


def test_analyse_all_pending_takes_only_runs_without_results(tmp_path, capsys):
    archive, first, _ = _stored_not_analysed(tmp_path, "p1")
    _, second, _ = _stored_not_analysed(tmp_path, "p2", rows=1200)
    assert main(["analyse", first, "--data", str(archive.root)]) == 0
    capsys.readouterr()
    assert main(["analyse-all", "--pending", "--data", str(archive.root)]) == 0
    out = capsys.readouterr().out
    assert second in out and first not in out
    assert all(r["analysed"] for r in archive.list_runs())
    assert main(["analyse-all", "--pending", "--data", str(archive.root)]) == 0
    assert "no stored run is waiting" in capsys.readouterr().out


def test_runs_table_says_not_analysed_and_serve_picks_the_run_up(tmp_path):
    archive, run_id, _ = _stored_not_analysed(tmp_path)
    with fresh_app(archive.root) as c:
        row = c.get("/api/runs").json()["runs"][0]
        assert row["analysed"] is False and row["kpis"] is None  # the page says "not analysed"
    with fresh_app(archive.root, analyse_pending=True) as c:
        jobs = c.get("/api/jobs").json()["jobs"]
        assert [j["kind"] for j in jobs] == ["analyse-pending"]
        assert wait_job(c, jobs[0]["id"])["state"] == "done"
        row = c.get("/api/runs").json()["runs"][0]
        assert row["analysed"] is True and row["kpis"] is not None


def test_upload_of_an_unanalysed_runs_files_analyses_it(tmp_path, planted_inputs: RunInputs):
    archive = Archive(tmp_path / "data")
    run_id = ingest_files(
        archive, planted_inputs.logs, planted_inputs.map_path, planted_inputs.profile_path
    ).run_id
    with fresh_app(archive.root) as c:
        parts, fields = upload_form(planted_inputs)
        job = wait_job(c, c.post("/api/upload", files=parts, data=fields).json()["job"]["id"])
        assert job["state"] == "done" and job["run_id"] == run_id
    assert archive.is_analysed(run_id)
