"""Archive commands driven through ``server.cli.main.main`` (ingest, runs, show, map-template)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from server.cli import main as cli

DATA = Path(__file__).resolve().parents[2] / "data" / "ingest"
MAP = DATA / "marram2_map.toml"
PROFILE = DATA / "marram2_profile.toml"
START_US = 1_795_858_260_000_000  # 2026-11-28T09:31:00Z


@pytest.fixture(autouse=True)
def data_dir_from_env(monkeypatch, tmp_path):
    monkeypatch.setenv(cli.DATA_ENV, str(tmp_path / "env-data"))


def _state(tmp_path, name="lap1_state.csv", n=200, garble=None):
    head = "stamp_us,roll_deg,pitch_deg,gyro_x_dps,acc_z_g,speed,leg_l_mm,whl_l_rpm"
    rows = [f"{START_US + 2500 * i},{i * 0.01},1,2,1,1.5,250,60" for i in range(n)]
    if garble is not None:
        rows[garble] = "oops"
    path = tmp_path / name
    path.write_text("\n".join([head, *rows]) + "\n")
    return path


def _ingest(tmp_path, *extra):
    return cli.main(["ingest", str(_state(tmp_path)), "--map", str(MAP), "--profile", str(PROFILE),
                     "--data", str(tmp_path / "d"), "--no-analyse", *extra])  # fmt: skip


def test_ingest_prints_run_id_and_report(tmp_path, capsys):
    assert _ingest(tmp_path, "--course", "gullhaven-loop", "--tag", "a", "--tag", "b") == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("20261128-0931-")
    assert "200 rows, 400.0 Hz" in out[1]


def test_ingest_json_and_duplicate(tmp_path, capsys):
    assert _ingest(tmp_path, "--json") == 0
    first = json.loads(capsys.readouterr().out)
    assert first["duplicate_of"] is None and first["report"]["state"]["rows"] == 200
    assert _ingest(tmp_path, "--json") == 0
    again = json.loads(capsys.readouterr().out)
    assert again["duplicate_of"] == first["run_id"]


def test_runs_and_show(tmp_path, capsys):
    _ingest(tmp_path, "--quiet", "--course", "gullhaven-loop", "--controller", "v3", "--tag", "wet")
    run_id = capsys.readouterr().out.strip()
    data = ["--data", str(tmp_path / "d")]
    assert cli.main(["runs", "--json", "--tag", "wet", *data]) == 0
    runs = json.loads(capsys.readouterr().out)
    assert [r["run_id"] for r in runs] == [run_id]
    assert cli.main(["runs", "--json", "--course", "elsewhere", *data]) == 0
    assert json.loads(capsys.readouterr().out) == []
    assert cli.main(["runs", *data]) == 0
    assert run_id in capsys.readouterr().out
    assert cli.main(["show", run_id, *data]) == 0
    text = capsys.readouterr().out
    assert "gullhaven-loop" in text and "ingest report:" in text and "sha256" in text
    assert cli.main(["show", run_id, "--json", *data]) == 0
    assert json.loads(capsys.readouterr().out)["controller"] == "v3"


def test_data_dir_from_environment(tmp_path, capsys):
    path = _state(tmp_path)
    assert (
        cli.main(
            [
                "ingest",
                str(path),
                "--map",
                str(MAP),
                "--profile",
                str(PROFILE),
                "--no-analyse",
                "--quiet",
            ]
        )
        == 0
    )
    run_id = capsys.readouterr().out.strip()
    assert (tmp_path / "env-data" / "runs" / run_id / "meta.json").is_file()


def test_errors_exit_2_with_message(tmp_path, capsys):
    bad_map = tmp_path / "bad.toml"
    bad_map.write_text(MAP.read_text().replace('unit = "rpm"', 'unit = "N*m"'))
    path = _state(tmp_path)
    code = cli.main(
        [
            "ingest",
            str(path),
            "--map",
            str(bad_map),
            "--profile",
            str(PROFILE),
            "--data",
            str(tmp_path / "d"),
        ]
    )
    assert code == 2
    err = capsys.readouterr().err
    assert "wrong dimension for 'wheel_l.vel', which expects 'rad/s'" in err
    assert not list((tmp_path / "d" / "runs").iterdir())
    assert cli.main(["show", "nope", "--data", str(tmp_path / "d")]) == 2
    assert "No run 'nope'" in capsys.readouterr().err
    garbled = _state(tmp_path, "lap2_state.csv", n=50, garble=10)
    code = cli.main(
        [
            "ingest",
            str(garbled),
            "--map",
            str(MAP),
            "--profile",
            str(PROFILE),
            "--data",
            str(tmp_path / "d"),
        ]
    )
    assert code == 2
    assert "line 12: expected 8 fields, found 1" in capsys.readouterr().err


def test_map_template_writes_marked_guesses(tmp_path, capsys):
    path = _state(tmp_path)
    out = tmp_path / "starter.toml"
    assert cli.main(["map-template", str(path), "--out", str(out)]) == 0
    text = out.read_text()
    assert 'time_column = "stamp_us"   # GUESS: confirm' in text
    assert 'time_unit = "us"   # GUESS: confirm' in text
    assert 'roll_deg = { signal = "roll", unit = "deg" }   # GUESS: confirm' in text
    assert 'whl_l_rpm = { signal = "wheel_l.vel", unit = "rpm" }   # GUESS: confirm' in text
    assert cli.main(["map-template", str(path), "--out", str(out)]) == 2  # never overwrites
