"""`outrigger map-template` on logs in other layouts (issue 13, item 8).

Naming habits are common practice, no source.
"""

from __future__ import annotations

import json
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from analysis.ingest.map_template import file_glob, guess_signal
from server.cli import main as cli
from tests.server.cli.test_archive import PROFILE


@pytest.mark.parametrize(
    ("name", "glob"),
    [
        ("run7_imu.csv.gz", "*_imu.csv*"),
        ("loop-lean14-a_state.csv.gz", "*_state.csv*"),
        ("imu.csv", "*imu.csv*"),
    ],
)
def test_the_template_writes_a_glob(name: str, glob: str) -> None:
    assert file_glob(name) == glob


@pytest.mark.parametrize(
    ("column", "signal"),
    [
        ("leg_l_mm", "leg_l.length"),
        ("leg_r_mm", "leg_r.length"),
        ("tq_l_cmd", "wheel_l.torque_cmd"),
        ("tq_r_cmd", "wheel_r.torque_cmd"),
        ("torque_right", "wheel_r.torque"),
        ("lat_vel", "vel_y"),
        ("speed_lat", "vel_y"),
        ("vel_y", "vel_y"),
        ("speed", "vel_x"),
    ],
)
def test_both_sides_and_lateral_velocity(column: str, signal: str) -> None:
    assert guess_signal(column) == signal


def test_both_legs_wheels_and_lateral_velocity_are_mapped(tmp_path: Path, capsys) -> None:
    log = tmp_path / "t1_state.csv"
    log.write_text(
        "stamp_us,leg_l_mm,leg_r_mm,whl_l_rpm,whl_r_rpm,speed,lat_vel\n"
        "1795858260000000,250,251,60,61,1.5,0.1\n"
    )
    assert cli.main(["map-template", str(log)]) == 0
    text = capsys.readouterr().out
    for column, signal in (("leg_l_mm", "leg_l.length"), ("leg_r_mm", "leg_r.length"),
                           ("whl_l_rpm", "wheel_l.vel"), ("whl_r_rpm", "wheel_r.vel"),
                           ("lat_vel", "vel_y")):  # fmt: skip
        assert f'{column} = {{ signal = "{signal}"' in text


@pytest.mark.parametrize("fmt", ["jsonl", "parquet"])
def test_a_torque_log_in_json_lines_or_parquet_is_a_torque_source(
    tmp_path: Path, capsys, fmt: str
) -> None:
    rows = [{"t_ms": 1795858260000 + i, "tq_l_cmd": 1.0, "tq_r_cmd": 1.1} for i in range(3)]
    path = tmp_path / f"drive.{fmt}"
    if fmt == "jsonl":
        path.write_text("\n".join(json.dumps(r) for r in rows) + "\n")
    else:
        pq.write_table(pa.Table.from_pylist(rows), path)
    assert cli.main(["map-template", str(path)]) == 0
    text = capsys.readouterr().out
    assert 'kind = "torque"' in text
    assert 'tq_r_cmd = { signal = "wheel_r.torque_cmd"' in text


def test_a_decimal_comma_is_recognised(tmp_path: Path, capsys) -> None:
    log = tmp_path / "t1_state.csv"
    log.write_text("stamp_s;roll_deg\n0,125;1,5\n0,130;1,6\n")
    assert cli.main(["map-template", str(log)]) == 0
    text = capsys.readouterr().out
    assert "decimal comma" in text and "'0,125'" in text
    # Ingesting it says the same, not advice about ISO 8601 time.
    map_path = tmp_path / "map.toml"
    map_path.write_text(
        '[[source]]\nname = "state"\nfiles = "*_state.*"\nkind = "state"\n'
        'time_column = "stamp_s"\ntime_unit = "s"\ntime_origin = "boot"\ndelimiter = ";"\n\n'
        '[source.columns]\nroll_deg = { signal = "roll", unit = "deg" }\n'
    )
    code = cli.main(["ingest", str(log), "--map", str(map_path), "--profile", str(PROFILE),
                     "--data", str(tmp_path / "d"), "--no-analyse"])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2
    assert "decimal comma" in err and "iso8601" not in err
