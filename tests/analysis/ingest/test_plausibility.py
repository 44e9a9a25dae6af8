"""Plausibility warnings at ingest: each fires on a wrong channel map and not on the right one.

The logs are the first 25 s of a demo run (invented robot Marram-2) in the demo's
own layout; each "wrong" case changes one thing in the map or the data, the way a
person writing a map gets it wrong.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from analysis.archive.store import Archive
from analysis.demo.bundle import DEMO_RUNS
from analysis.demo.logs import channel_map_toml, foreign_tables, profile_toml, simulate_run
from analysis.ingest.stream import ingest_files

MAP = channel_map_toml()


@pytest.fixture(scope="module")
def tables():
    run = simulate_run("lean-ctl 2.0", seed=11, duration_s=25.0)
    return {("state" if "_state" in k else "torque"): v for k, v in foreign_tables(run).items()}


def _ingest(tmp_path: Path, tables, map_text: str = MAP, change=None) -> list[dict]:
    """Write the logs (after ``change(state_table)``), ingest, return every warning."""
    tmp_path.mkdir(parents=True, exist_ok=True)
    state = tables["state"].copy()
    if change is not None:
        change(state)
    paths = [tmp_path / "p_state.csv", tmp_path / "p_torque.csv"]
    state.to_csv(paths[0], index=False)
    tables["torque"].to_csv(paths[1], index=False)
    (tmp_path / "map.toml").write_text(map_text, encoding="utf-8")
    (tmp_path / "profile.toml").write_text(profile_toml(), encoding="utf-8")
    out = ingest_files(
        Archive(tmp_path / "archive"), paths, tmp_path / "map.toml", tmp_path / "profile.toml"
    )
    return [w for stream in out.report.values() for w in stream["warnings"]]


def _checks(warnings: list[dict]) -> list[tuple[str, str | None]]:
    return [(w["check"], w["signal"]) for w in warnings]


def test_demo_map_gives_no_warning(tmp_path, tables):
    assert _ingest(tmp_path, tables) == []


def test_bundled_demo_runs_give_no_warning(tmp_path):
    root = Path(__file__).resolve().parents[3] / "demo_logs"
    spec = DEMO_RUNS[0]
    out = ingest_files(
        Archive(tmp_path / "archive"),
        [root / f for f in spec.files()],
        root / "channel-map.toml",
        root / "marram-2.toml",
    )
    assert [w for s in out.report.values() for w in s["warnings"]] == []


def _boot_time(state):
    state["stamp_us"] = state["stamp_us"] - state["stamp_us"].iloc[0]


def _boot_map(unit: str) -> str:
    text = MAP.replace(
        'time_unit = "us"\ntime_origin = "epoch"', f'time_unit = "{unit}"\ntime_origin = "boot"', 1
    )
    # both sources share one clock: the torque log goes to boot time as well
    return text.replace(
        'time_unit = "us"\ntime_origin = "epoch"', 'time_unit = "us"\ntime_origin = "boot"'
    )


def test_time_unit_wrong_and_right(tmp_path, tables):
    def change(state):
        _boot_time(state)

    def torque_boot(t):
        t["t_us"] = t["t_us"] - t["t_us"].iloc[0] + 1000

    boot_tables = {"state": tables["state"], "torque": tables["torque"].copy()}
    torque_boot(boot_tables["torque"])
    right = _ingest(tmp_path / "right", boot_tables, _boot_map("us"), change)
    assert right == []
    wrong = _ingest(tmp_path / "wrong", boot_tables, _boot_map("s"), change)
    assert _checks(wrong) == [("time_unit", "stamp_us")]
    # microseconds read as seconds: one 5,000 us step is 5,000 s, 0.0002 Hz; the message
    # names the unit that gives the demo's 200 Hz
    assert "2e-04 Hz" in wrong[0]["message"] or "0.0002 Hz" in wrong[0]["message"]
    assert 'time_unit = "us" would give 200 Hz' in wrong[0]["message"]


def test_roll_in_radians_mapped_as_degrees(tmp_path, tables):
    def to_rad(state):
        state["imu_roll_deg"] = np.deg2rad(state["imu_roll_deg"])

    right = MAP.replace(
        'imu_roll_deg = { signal = "roll", unit = "deg" }',
        'imu_roll_deg = { signal = "roll", unit = "rad" }',
    )
    assert _ingest(tmp_path / "right", tables, right, to_rad) == []
    wrong = _ingest(tmp_path / "wrong", tables, MAP, to_rad)
    assert _checks(wrong) == [("angle_unit", "roll")]
    assert 'set unit = "rad"' in wrong[0]["message"]


def test_hip_angle_in_degrees_mapped_as_radians(tmp_path, tables):
    # hip angles of the knee linkage are about 50 deg: read as rad that is over 7
    wrong_map = MAP.replace(
        'hip_l_deg = { signal = "hip_l.pos", unit = "deg" }',
        'hip_l_deg = { signal = "hip_l.pos", unit = "rad" }',
    )
    wrong = _ingest(tmp_path, tables, wrong_map)
    assert _checks(wrong) == [("angle_unit", "hip_l.pos")]
    assert 'set unit = "deg"' in wrong[0]["message"]


def test_wheel_speed_in_deg_per_s_mapped_as_rad_per_s(tmp_path, tables):
    def to_dps(state):
        state["whl_l_rpm"] = state["whl_l_rpm"] * 6.0  # 1 rpm = 6 deg/s

    right = MAP.replace(
        'whl_l_rpm = { signal = "wheel_l.vel", unit = "rpm" }',
        'whl_l_rpm = { signal = "wheel_l.vel", unit = "deg/s" }',
    )
    assert _ingest(tmp_path / "right", tables, right, to_dps) == []
    wrong_map = MAP.replace(
        'whl_l_rpm = { signal = "wheel_l.vel", unit = "rpm" }',
        'whl_l_rpm = { signal = "wheel_l.vel", unit = "rad/s" }',
    )
    wrong = _ingest(tmp_path / "wrong", tables, wrong_map, to_dps)
    assert _checks(wrong) == [("wheel_speed", "wheel_l.vel")]


def test_accel_z_with_the_sign_flipped(tmp_path, tables):
    wrong_map = MAP.replace(
        'acc_z_g = { signal = "accel_z", unit = "g0" }',
        'acc_z_g = { signal = "accel_z", unit = "g0", scale = -1 }',
    )
    wrong = _ingest(tmp_path, tables, wrong_map)
    assert _checks(wrong) == [("accel_z", "accel_z")]
    assert "scale = -1" in wrong[0]["message"]


def test_accel_z_in_g_mapped_as_m_per_s2(tmp_path, tables):
    wrong_map = MAP.replace(
        'acc_z_g = { signal = "accel_z", unit = "g0" }',
        'acc_z_g = { signal = "accel_z", unit = "m/s^2" }',
    )
    wrong = _ingest(tmp_path, tables, wrong_map)
    assert _checks(wrong) == [("accel_z", "accel_z")]
    assert 'unit = "g0"' in wrong[0]["message"]


def test_yaw_rate_with_the_sign_flipped(tmp_path, tables):
    wrong_map = MAP.replace(
        'gyro_z_dps = { signal = "yaw_rate", unit = "deg/s" }',
        'gyro_z_dps = { signal = "yaw_rate", unit = "deg/s", scale = -1 }',
    )
    wrong = _ingest(tmp_path, tables, wrong_map)
    assert _checks(wrong) == [("yaw_sign", "yaw_rate")]
