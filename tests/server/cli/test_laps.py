"""Laps on the command line: ``show`` lists them, ``compare`` goes lap by lap and gates drift."""

from __future__ import annotations

import json

import pytest

from server.cli.main import main
from tests.server.lap_archive import LapArchive, stock_laps


@pytest.fixture(scope="module")
def laps_archive(tmp_path_factory) -> LapArchive:
    return stock_laps(tmp_path_factory.mktemp("laps"))


def test_show_lists_laps_and_drift(laps_archive, capsys) -> None:
    assert main(["show", laps_archive.b, "--data", str(laps_archive.root)]) == 0
    out = capsys.readouterr().out
    assert "laps: 8 complete laps of about 104" in out
    assert "roll RMS deg" in out
    # Truth: the generator slows the candidate's target speeds 1.5 % a lap
    assert "Lap time: worse" in out
    assert "Roll error RMS: no drift" in out


def test_show_json_carries_the_laps(laps_archive, capsys) -> None:
    assert main(["show", laps_archive.a, "--json", "--data", str(laps_archive.root)]) == 0
    data = json.loads(capsys.readouterr().out)
    assert len(data["laps"]["laps"]) == 8
    assert data["laps"]["drift"]["lap_time"]["verdict"] == "no drift"
    assert data["laps"]["kpis"][0]["roll_error_rms"] < 0.05  # SI, rad


def test_compare_goes_lap_by_lap(laps_archive, capsys) -> None:
    args = ["compare", laps_archive.a, laps_archive.b, "--n-boot", "300",
            "--data", str(laps_archive.root)]  # fmt: skip
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "Laps of one loop" in out and "Lap by lap" in out
    assert "Segment S1" in out
    assert main([*args, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["settings"]["resampling"] == "whole laps, each version's laps pooled"
    assert len(data["laps"]["by_lap"]) == 8


def test_compare_whole_runs_refuses_per_segment(laps_archive, capsys) -> None:
    args = ["compare", laps_archive.a, laps_archive.b, "--n-boot", "300", "--whole-runs",
            "--json", "--data", str(laps_archive.root)]  # fmt: skip
    assert main(args) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["laps"] is None


def test_drift_gate_exit_code(laps_archive, tmp_path, capsys) -> None:
    gate = tmp_path / "gate.toml"
    gate.write_text("lap_time_drift_max = 1.0\n", encoding="utf-8")
    args = ["compare", laps_archive.a, laps_archive.b, "--n-boot", "300", "--gate", str(gate),
            "--data", str(laps_archive.root)]  # fmt: skip
    # Truth: 1.5 % slower a lap over 8 laps is about 6 s, beyond the 1 s allowed
    assert main(args) == 1
    assert "lap_time_drift_max" in capsys.readouterr().err


def test_stored_start_line_places_the_laps(laps_archive, capsys) -> None:
    data = ["--data", str(laps_archive.root)]
    assert main(["start-line", "gullhaven-ring", *data]) == 0
    assert "no start line stored" in capsys.readouterr().out
    assert main(["start-line", "gullhaven-ring", "-5", *data]) == 2
    assert "finite distance >= 0 m" in capsys.readouterr().err
    try:
        assert main(["start-line", "gullhaven-ring", "30", *data]) == 0
        assert main(["analyse", laps_archive.a, *data]) == 0
        capsys.readouterr()
        assert main(["show", laps_archive.a, "--json", *data]) == 0
        laps = json.loads(capsys.readouterr().out)["laps"]
        assert laps["method"] == "start line"
        first = laps["laps"][0]
        # The 30 m before the stored line are a partial first lap
        assert first["partial"] and first["end_m"] == pytest.approx(30.0, abs=0.05)
        assert sum(not lap["partial"] for lap in laps["laps"]) == 7
    finally:
        assert main(["start-line", "gullhaven-ring", "--clear", *data]) == 0
        assert main(["analyse", laps_archive.a, *data]) == 0
