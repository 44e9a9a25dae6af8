"""A skipped detector reads "not run" in the API that the Runs and Run pages draw, never 0."""

from __future__ import annotations

import pytest

from analysis.archive.store import Archive
from analysis.detect.limits import not_run
from tests.server.dashboard_fixtures import (
    RunInputs,
    fresh_app,
    ingest_and_analyse,
    write_demo_inputs,
)


def test_not_run_names_kpis_and_event_kinds_of_skipped_detectors() -> None:
    summary = {"skipped": [{"detector": "roll", "reason": "no roll_ref"}]}
    assert not_run(summary) == {
        "detectors": {"roll": "no roll_ref"},
        "kpis": {"roll_error_rms": "no roll_ref"},
        "event_kinds": {"roll_error": "no roll_ref"},
    }
    assert not_run({"skipped": []}) == {"detectors": {}, "kpis": {}, "event_kinds": {}}


@pytest.fixture(scope="module")
def no_roll_ref(tmp_path_factory) -> tuple[object, str]:
    folder = tmp_path_factory.mktemp("no-roll-ref")
    inputs = write_demo_inputs(folder / "in", duration_s=8.0)
    text = inputs.map_path.read_text(encoding="utf-8")
    # the lean reference is left unmapped (kept as extra.lean_cmd_deg): roll tracking cannot run
    text = "\n".join(line for line in text.splitlines() if not line.startswith("lean_cmd_deg"))
    inputs.map_path.write_text(text + "\n", encoding="utf-8")
    root = folder / "archive"
    run_id = ingest_and_analyse(
        Archive(root), RunInputs(inputs.logs, inputs.map_path, inputs.profile_path)
    )
    return root, run_id


def test_runs_table_and_run_page_data_say_not_run(no_roll_ref) -> None:
    root, run_id = no_roll_ref
    with fresh_app(root) as c:
        row = c.get("/api/runs").json()["runs"][0]
        assert row["run_id"] == run_id
        assert set(row["kpis_not_run"]) == {"roll_error_rms"}
        assert "roll_ref" in row["kpis_not_run"]["roll_error_rms"]
        assert row["kpis"]["roll_error_rms"] is None  # no number that could read as clean
        body = c.get(f"/api/runs/{run_id}").json()
        assert set(body["not_run"]["event_kinds"]) == {"roll_error"}
        assert set(body["not_run"]["kpis"]) == {"roll_error_rms"}
        # the detectors that ran are not flagged
        assert "slip_events" not in body["not_run"]["kpis"]
