"""Tests of ``outrigger compare`` (server.cli.compare): output, gate exit codes, report file."""

from __future__ import annotations

import json
import os
import stat
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

from analysis.compare.course_kpis import RunData
from analysis.errors import RunNotFoundError
from analysis.events import events_frame
from server.cli import compare as cli_compare
from server.cli.main import main
from tests.analysis.compare_synth import hill_curvature, make_run


class MemoryArchive:
    """The part of the Archive interface the compare command reads, over in-memory runs."""

    def __init__(self, runs: dict[str, RunData], root: Path) -> None:
        self.runs = runs
        self.root = root  # holds no stored course marks: segments come from the curvature

    def _run(self, run_id: str) -> RunData:
        if run_id not in self.runs:
            raise RunNotFoundError(f"No run {run_id!r} in the archive.")
        return self.runs[run_id]

    def get_meta(self, run_id: str) -> dict[str, Any]:
        return dict(self._run(run_id).meta, run_id=run_id)

    def load_frame(self, run_id: str, columns: list[str] | None = None) -> pd.DataFrame:
        return self._run(run_id).frame.copy()

    def load_profile(self, run_id: str):
        return self._run(run_id).profile

    def read_results(self, run_id: str):
        return events_frame(self._run(run_id).events), {}

    def read_result_series(self, run_id: str, columns: list[str] | None = None) -> pd.DataFrame:
        return self._run(run_id).series.copy()


@pytest.fixture(scope="module")
def runs() -> dict[str, RunData]:
    return {
        "a1": make_run("a1", seed=1),
        "a2": make_run("a2", seed=2),
        "b1": make_run("b1", seed=3, extra_roll_error=0.008, controller="lean-ctl 2.0"),
        "b2": make_run("b2", seed=4, extra_roll_error=0.008, controller="lean-ctl 2.0"),
        "hill": make_run("hill", seed=5, curvature=hill_curvature, course="gullhaven-hill"),
    }


@pytest.fixture()
def archive(runs, monkeypatch, tmp_path) -> MemoryArchive:
    mem = MemoryArchive(runs, tmp_path)
    monkeypatch.setattr(cli_compare, "open_archive", lambda root: mem)
    return mem


def _gate(tmp_path: Path, text: str) -> str:
    path = tmp_path / "gate.toml"
    path.write_text(text, encoding="utf-8")
    return str(path)


def test_compare_prints_kpis(archive, capsys) -> None:
    code = main(["compare", "a1", "b1", "--n-boot", "300"])
    out = capsys.readouterr().out
    assert code == 0
    assert "Verdicts rest on: 1 run per version: within-run spread only" in out
    assert "adj. p" in out and "no verdict (indicative)" in out
    # One display convention in text: angles in deg, shares in % (issue 13, item 1).
    assert "roll_error_rms [deg]" in out and "worse" in out
    assert "roll_error_iae [deg*s]" in out
    assert "saturation_share [%]" in out
    assert "[rad" not in out
    assert "Segment S1" in out


def test_compare_text_rounds_for_people_and_json_to_6_digits(archive, capsys) -> None:
    assert main(["compare", "a1", "b1", "--n-boot", "300"]) == 0
    out = capsys.readouterr().out
    table = [line for line in out.splitlines() if line.startswith("roll_error_rms ")][0]
    numbers = table.split()[2:5]  # A, B, B - A
    for text in numbers:
        digits = text.lstrip("-").replace(".", "").lstrip("0")
        assert len(digits) <= 3, table  # 3 significant digits at most
    assert main(["compare", "a1", "b1", "--json", "--n-boot", "300"]) == 0
    data = json.loads(capsys.readouterr().out)
    row = {r["key"]: r for r in data["kpis"]}["roll_error_rms"]
    assert row["unit"] == "rad"  # --json stays SI
    for key in ("a", "b", "diff", "low", "high"):
        assert float(f"{row[key]:.6g}") == row[key]  # rounded to 6 significant digits


def test_compare_json_of_sets(archive, capsys) -> None:
    code = main(["compare", "a1,a2", "b1,b2", "--json", "--n-boot", "300"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    assert [r["run"] for r in data["runs_a"]] == ["a1", "a2"]
    assert data["same_course"] is True
    rows = {r["key"]: r for r in data["kpis"]}
    assert rows["roll_error_iae"]["verdict"] == "worse"
    assert rows["roll_error_iae"]["basis"].startswith("2 runs per version")
    assert data["settings"]["resampling"].startswith("runs as units")


def test_gate_exits_1_naming_each_broken_rule(archive, tmp_path, capsys) -> None:
    gate = _gate(
        tmp_path,
        "roll_error_rms_increase_max_pct = 10\nnew_falls_allowed = false\n"
        'no_worse = ["roll_error_iae"]\n',
    )
    code = main(["compare", "a1", "b1", "--gate", gate, "--n-boot", "300"])
    captured = capsys.readouterr()
    assert code == 1
    assert "roll_error_rms_increase_max_pct" in captured.err
    assert "no_worse" in captured.err
    assert "new_falls_allowed" not in captured.err  # that rule holds
    assert "BROKEN" in captured.out


def test_gate_exits_0_when_every_rule_holds(archive, tmp_path, capsys) -> None:
    gate = _gate(tmp_path, "[gate]\nmin_tip_margin_drop_max = 0.05\nnew_falls_allowed = false\n")
    code = main(["compare", "a1", "a2", "--gate", gate, "--json", "--n-boot", "300"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    assert data["gate"]["passed"] is True
    assert len(data["gate"]["checks"]) == 2


def test_bad_gate_file_exits_2(archive, tmp_path, capsys) -> None:
    gate = _gate(tmp_path, "roll_error_rms_increase_max_pct = 'ten'\n")
    assert main(["compare", "a1", "b1", "--gate", gate]) == 2
    assert "must be a finite number" in capsys.readouterr().err
    assert main(["compare", "a1", "b1", "--gate", str(tmp_path / "none.toml")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_unknown_run_exits_2(archive, capsys) -> None:
    assert main(["compare", "a1", "zz"]) == 2
    assert "No run 'zz'" in capsys.readouterr().err


def test_different_courses_refused_in_text(archive, capsys) -> None:
    code = main(["compare", "a1", "hill", "--n-boot", "300"])
    out = capsys.readouterr().out
    assert code == 0
    assert "Per-segment comparison refused" in out
    assert "Segment S1" not in out


def test_report_is_written_self_contained(archive, tmp_path, capsys) -> None:
    out = tmp_path / "report.html"
    code = main(["compare", "a1", "b1", "--report", str(out), "--n-boot", "300"])
    assert code == 0
    text = out.read_text(encoding="utf-8")
    assert "<script src=" not in text  # plotly.js inline, nothing fetched
    assert "Plotly" in text and "chart-0" in text
    assert "Verdicts rest on: <strong>1 run per version: within-run spread only</strong>" in text
    assert "no verdict (indicative)" in text and "adj. p" in text
    assert not list(tmp_path.glob(".report-*"))  # no temporary left behind


def test_report_gets_normal_file_permissions(archive, tmp_path) -> None:
    out = tmp_path / "report.html"
    old = os.umask(0o022)
    try:
        assert main(["compare", "a1", "b1", "--report", str(out), "--n-boot", "300"]) == 0
    finally:
        os.umask(old)
    # Under umask 022 a new file is 0644 (POSIX open(2) with mode 0666; common practice).
    assert stat.S_IMODE(out.stat().st_mode) == 0o644


def test_report_escapes_user_text(archive, runs, tmp_path) -> None:
    runs["a1"].meta["name"] = "<img src=x onerror=alert(1)>"
    try:
        out = tmp_path / "r.html"
        assert main(["compare", "a1", "b1", "--report", str(out), "--n-boot", "300"]) == 0
        text = out.read_text(encoding="utf-8")
        assert "<img src=x" not in text
        assert "&lt;img src=x onerror=alert(1)&gt;" in text
    finally:
        runs["a1"].meta["name"] = "a1"
