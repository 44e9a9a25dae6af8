"""`outrigger ingest` and `show` print the plausibility warnings of the ingest report."""

from __future__ import annotations

import json
from pathlib import Path

from server.cli import main as cli

DATA = Path(__file__).resolve().parents[2] / "data" / "ingest"
MAP = DATA / "marram2_map.toml"
PROFILE = DATA / "marram2_profile.toml"
START_US = 1_795_858_260_000_000  # 2026-11-28T09:31:00Z


def _state(tmp_path: Path, acc_z_g: float) -> Path:
    head = "stamp_us,roll_deg,pitch_deg,gyro_x_dps,acc_z_g,speed,leg_l_mm,whl_l_rpm"
    rows = [f"{START_US + 2500 * i},{i * 0.01},1,2,{acc_z_g},1.5,250,60" for i in range(200)]
    path = tmp_path / "lap1_state.csv"
    path.write_text("\n".join([head, *rows]) + "\n")
    return path


def _ingest(tmp_path: Path, acc_z_g: float, *extra: str) -> int:
    return cli.main(["ingest", str(_state(tmp_path, acc_z_g)), "--map", str(MAP), "--profile",
                     str(PROFILE), "--data", str(tmp_path / "d"), "--no-analyse", *extra])  # fmt: skip


def test_ingest_prints_a_warning_and_stores_the_run(tmp_path, capsys):
    # accelerometer z logged upside down: -1 g where +1 g is expected at rest and level
    assert _ingest(tmp_path, -1.0) == 0
    out = capsys.readouterr().out
    assert "warning: accel_z" in out and "scale = -1" in out
    run_id = out.splitlines()[0].strip()
    assert cli.main(["show", run_id, "--data", str(tmp_path / "d")]) == 0
    assert "warning: accel_z" in capsys.readouterr().out


def test_right_sign_gives_no_warning(tmp_path, capsys):
    assert _ingest(tmp_path, 1.0, "--json") == 0
    report = json.loads(capsys.readouterr().out)["report"]
    assert report["state"]["warnings"] == []
