"""Channel map: unit factors against pint and definitions, whole-map checks, header checks."""

from __future__ import annotations

import math

import pint
import pytest

from analysis.errors import ChannelMapError
from analysis.ingest.channel_map import (
    _unit_problem,
    check_headers,
    load_channel_map,
    parse_channel_map,
)
from analysis.ingest.map_template import FileHeader, guess_signal, guess_time, guess_unit, template
from analysis.profile import load_profile, unit_registry
from tests.analysis.ingest_kit import MAP, PROFILE

UREG = pint.UnitRegistry()  # an independent registry as the reference library


def _one(signal: str, unit: str, scale: float = 1.0) -> str:
    return f"""
[[source]]
name = "s"
files = "*.csv"
time_column = "t"
time_unit = "ms"
time_origin = "boot"
[source.columns]
c = {{ signal = "{signal}", unit = "{unit}", scale = {scale} }}
"""


@pytest.mark.parametrize(
    ("signal", "unit", "si", "definition"),
    [
        # 180 deg = pi rad (common practice, no source)
        ("roll", "deg", "rad", math.pi / 180),
        # 1 rpm = 2 pi rad / 60 s (common practice, no source)
        ("wheel_l.vel", "rpm", "rad/s", 2 * math.pi / 60),
        ("leg_l.length", "mm", "m", 1e-3),
        # standard gravity g0 = 9.80665 m/s² (ISO 80000-3)
        ("accel_z", "g0", "m/s**2", 9.80665),
        ("yaw_rate", "deg/s", "rad/s", math.pi / 180),
        ("wheel_l.torque_cmd", "mN*m", "N*m", 1e-3),
    ],
)
def test_unit_factors_match_pint_and_definitions(signal, unit, si, definition):
    spec = parse_channel_map(_one(signal, unit, -2)).sources[0].columns[0]
    # pint as the reference library; 1e-15 relative is float64 rounding
    assert spec.factor == pytest.approx(UREG.Quantity(1.0, unit).to(si).magnitude, rel=1e-15)
    assert spec.factor == pytest.approx(definition, rel=1e-15)
    assert spec.multiplier == pytest.approx(-2 * definition, rel=1e-15)


def test_time_factor_from_pint():
    cmap = parse_channel_map(_one("roll", "deg"))
    # 1 ms = 1e-3 s (SI prefix)
    assert cmap.sources[0].time_factor == pytest.approx(1e-3, rel=1e-15)


@pytest.mark.parametrize(
    ("signal", "unit", "match"),
    [
        (
            "wheel_l.torque",
            "deg",
            r"'deg' has the wrong dimension for 'wheel_l.torque', which expects 'N\*m'",
        ),
        ("roll", "rpm", r"wrong dimension for 'roll', which expects 'rad'"),
        ("yaw_rate", "Hz", r"'Hz' carries no angle but 'yaw_rate' expects 'rad/s'"),
        ("roll", "1", r"'1' carries no angle but 'roll' expects 'rad'"),
        ("roll", "percent", r"'percent' carries no angle but 'roll' expects 'rad'"),
        ("roll", "bananas", r"'bananas' is unknown to the units library"),
        ("wheel_x.vel", "rpm", r"unknown signal 'wheel_x.vel'. Valid signals: roll, pitch, yaw"),
        ("t", "s", r"unknown signal 't'"),
    ],
)
def test_bad_units_and_signals_refused(signal, unit, match):
    with pytest.raises(ChannelMapError, match=match):
        parse_channel_map(_one(signal, unit), load_profile(PROFILE))


def test_dimensionless_units_accepted():
    ureg = unit_registry()
    for unit, factor in (("", 1.0), ("1", 1.0), ("percent", 0.01)):
        problem, got = _unit_problem(unit, "ratio", "", "here", ureg)
        assert problem is None
        # 1 percent = 0.01 (ISO 80000-1)
        assert got == pytest.approx(factor)
    problem, _ = _unit_problem("m", "ratio", "", "here", ureg)
    assert problem and "dimensionless" in problem


def test_whole_map_problems_listed_together():
    text = (
        _one("roll", "furlongs")
        + """
[[source]]
name = "s"
files = "*.log"
kind = "fast"
time_column = "t"
time_unit = "minutes"
time_origin = "epoch"
[source.columns]
d = { signal = "roll", unit = "deg" }
"""
    )
    with pytest.raises(ChannelMapError) as info:
        parse_channel_map(text)
    msg = str(info.value)
    for part in (
        "furlongs",
        "used twice",
        "kind must be one of",
        "time_unit must be one of",
        "mix time_origin",
    ):
        assert part in msg


def test_profile_actuators_decide_valid_signals():
    text = _one("hip_l.pos", "deg")
    assert parse_channel_map(text).sources[0].columns[0].signal == "hip_l.pos"  # no profile
    with pytest.raises(ChannelMapError, match="unknown signal 'hip_l.pos'"):
        parse_channel_map(text, load_profile(PROFILE))  # profile has wheels only


def test_check_headers():
    cmap = load_channel_map(MAP)
    state_cols = [
        "stamp_us",
        "roll_deg",
        "pitch_deg",
        "gyro_x_dps",
        "acc_z_g",
        "speed",
        "leg_l_mm",
        "whl_l_rpm",
    ]
    check_headers(cmap, {"a_state.csv": state_cols})
    with pytest.raises(
        ChannelMapError, match=r"'speed' absent from the file \(columns found: stamp_us, roll_deg"
    ):
        check_headers(cmap, {"a_state.csv": [c for c in state_cols if c != "speed"]})
    with pytest.raises(ChannelMapError, match=r"time column 't_ms' of source 'torque' is missing"):
        check_headers(cmap, {"a_torque.csv": ["time", "tq_l_cmd", "tq_l_req"]})
    with pytest.raises(ChannelMapError, match="matches no source"):
        check_headers(cmap, {"a.txt": state_cols})


def test_not_toml_refused():
    with pytest.raises(ChannelMapError, match="not valid TOML"):
        parse_channel_map("[[source]\nname=")


# --- map template guesses (common practice, no source: usual log naming habits) ---------


@pytest.mark.parametrize(
    ("column", "signal", "unit"),
    [
        ("imu_roll_deg", "roll", "deg"),
        ("pitchRate_dps", "pitch_rate", "deg/s"),
        ("yaw_rate", "yaw_rate", None),
        ("gyro_z", "yaw_rate", None),
        ("acc_y_g", "accel_y", "g0"),
        ("whl_r_rpm", "wheel_r.vel", "rpm"),
        ("wheel_l_torque_cmd", "wheel_l.torque_cmd", None),
        ("wheel_l_tau_req_nm", "wheel_l.torque_req", "N*m"),
        ("hip_r_angle_rad", "hip_r.pos", "rad"),
        ("leg_l_len_mm", "leg_l.length", "mm"),
        ("roll_ref_deg", "roll_ref", "deg"),
        ("battery_v", None, None),
        ("v_x", "vel_x", None),
    ],
)
def test_template_guesses(column, signal, unit):
    assert guess_signal(column) == signal
    assert guess_unit(column) == unit


def test_template_time_guess_and_marks(tmp_path):
    assert guess_time(["stamp_us", "x"], {"stamp_us": 1_795_858_260_000_000}) == (
        "stamp_us",
        "us",
        "epoch",
    )
    assert guess_time(["time"], {"time": 12.5}) == ("time", "s", "boot")
    assert guess_time(["ts"], {"ts": "2026-11-28T09:31:00Z"}) == ("ts", "iso8601", "epoch")
    text = template(
        [
            FileHeader(
                tmp_path / "lap3_state.csv",
                ["stamp_us", "imu_roll_deg", "battery_v"],
                {"stamp_us": 1.7e15},
            )
        ]
    )
    assert 'imu_roll_deg = { signal = "roll", unit = "deg" }   # GUESS: confirm' in text
    assert '# battery_v = { signal = "?"' in text
    assert 'files = "*_state.csv*"' in text  # a glob for every run's state log (item 8)
    cmap = parse_channel_map(text)
    assert [c.signal for c in cmap.sources[0].columns] == ["roll"]


def test_template_guesses_a_torque_stream_from_its_file_name(tmp_path):
    text = template(
        [FileHeader(tmp_path / "lap3_torque.csv", ["t_us", "wl_tq_req"], {"t_us": 1.7e15})]
    )
    assert 'kind = "torque"' in text
