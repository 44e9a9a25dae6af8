"""Tests of the demo-run generator (analysis/demo/) and the bundled demo_logs/.

The generated frame is checked against the physics of DESIGN.md, reconstructed
here independently from the logged signals, and against outside values (standard
gravity, the steady-turn lean relation, pint as the unit reference). The physics
checks use ideal sensors (the log carries the true states, rounded); the sensor
model itself is tested in test_sensors.py.
"""

from __future__ import annotations

import gzip
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pint
import pytest

from analysis import catalogue as cat
from analysis.demo.bundle import DEMO_RUNS, demo_run, readme_text, runs_toml
from analysis.demo.logs import (
    SensorModel,
    channel_map_toml,
    demo_profile,
    foreign_tables,
    profile_toml,
    simulate_run,
)
from analysis.errors import OutriggerError
from analysis.profile import profile_from_dict

DEMO_DIR = Path(__file__).resolve().parents[3] / "demo_logs"
G0 = 9.80665  # m/s², ISO 80000-3 (standard acceleration of free fall)
R_WHEEL = 0.10  # m, Marram-2 wheel radius as written in demo_logs/marram-2.toml
TRACK = 0.44  # m, Marram-2 track width as written in demo_logs/marram-2.toml


@pytest.fixture(scope="module")
def run14():
    return simulate_run("lean-ctl 1.4", seed=7, sensors=SensorModel.ideal())


@pytest.fixture(scope="module")
def run20():
    return simulate_run("lean-ctl 2.0", seed=7, sensors=SensorModel.ideal())


def _kinds(run):
    return {(e.kind, e.channel) for e in run.truth}


def _steady(run, segment: int, trim_m: float = 4.0) -> np.ndarray:
    """Mask of the state samples in the middle of a course segment (transitions trimmed)."""
    ts = run.true_series
    seg = ts["segment"].to_numpy() == segment
    d = ts["distance"].to_numpy()
    lo, hi = d[seg].min() + trim_m, d[seg].max() - trim_m
    return seg & (d > lo) & (d < hi)


def _contact_residual(frame: pd.DataFrame, side: str) -> np.ndarray:
    """Rim speed minus contact speed, reconstructed from the logged signals (DESIGN.md)."""
    t = frame[cat.T].to_numpy()
    L = 0.5 * (frame[cat.LEG_L_LENGTH] + frame[cat.LEG_R_LENGTH]).to_numpy()
    pitch, roll = frame[cat.PITCH].to_numpy(), frame[cat.ROLL].to_numpy()
    yaw_rate = frame[cat.YAW_RATE].to_numpy()
    v_mid = (
        frame[cat.VEL_X].to_numpy()
        - np.gradient(L * np.sin(pitch), t)
        - yaw_rate * (R_WHEEL + L) * np.sin(roll)
    )
    sign = -1.0 if side == "l" else 1.0
    v_contact = v_mid + sign * yaw_rate * TRACK / 2.0
    v_rim = R_WHEEL * (frame[f"wheel_{side}.vel"].to_numpy() + frame[cat.PITCH_RATE].to_numpy())
    return v_rim - v_contact


def test_rim_speed_equals_contact_speed_outside_slip(run14):
    for side in ("l", "r"):
        res = _contact_residual(run14.frame, side)
        slipping = np.abs(run14.true_series[f"wheel_{side}.slip_speed"].to_numpy()) > 0.0
        # stay 0.25 s clear of true slip (the numerical derivative spreads it)
        near = np.convolve(slipping, np.ones(101), mode="same") > 0
        calm = ~near
        # Identity of DESIGN.md (differential drive, Siegwart et al. 2011). Ideal sensors:
        # what is left is the files' rounding (0.001 m/s, 0.001 deg, 0.01 rpm) through the
        # numerical derivative; 0.02 m/s RMS leaves room, 0.1 is the slip-speed floor.
        assert np.sqrt(np.mean(res[calm] ** 2)) < 0.02
        assert np.max(np.abs(res[calm])) < 0.1


def test_right_wheel_spins_on_the_wet_plate(run14):
    slips = [e for e in run14.truth if e.kind == cat.SLIP]
    assert [e.channel for e in slips] == ["wheel_r"]
    t = run14.frame[cat.T].to_numpy()
    inside = (t >= slips[0].start_s) & (t <= slips[0].end_s)
    res = _contact_residual(run14.frame, "r")
    # Spin: rim ahead of the ground (DESIGN.md); the planted spin is well above 0.1 m/s.
    assert np.median(res[inside]) > 0.3
    # Yaw rate from the wheels, r (w_R - w_L) / b, departs from the gyro by far more than
    # the 15 deg/s default threshold while the right wheel spins.
    f = run14.frame
    wheel_yaw = R_WHEEL * (f["wheel_r.vel"] - f["wheel_l.vel"]).to_numpy() / TRACK
    diff = np.abs(wheel_yaw - f[cat.YAW_RATE].to_numpy())
    assert np.rad2deg(np.median(diff[inside])) > 30.0
    assert any(e.kind == cat.YAW_SLIP for e in run14.truth)


@pytest.mark.parametrize(("segment", "radius"), [(1, 5.0), (3, -6.0)])
def test_steady_turn_lean_and_lateral_acceleration(run20, segment, radius):
    # gullhaven-loop: segment 1 "north bend" R = 5 m left, segment 3 "dune curve" R = 6 m right.
    m = _steady(run20, segment)
    f = run20.frame
    v = f[cat.VEL_X].to_numpy()[m]
    roll = f[cat.ROLL].to_numpy()[m]
    pitch = f[cat.PITCH].to_numpy()[m]
    lean = -np.mean(roll)  # leaning into a left turn is left side down: negative roll
    expected = np.arctan(np.mean(v**2) / (G0 * radius))
    # Steady-turn lean tan(phi) = v^2 / (g R) (Cossalter, Motorcycle Dynamics, Sec. 1.3);
    # 0.3 deg covers the small roll disturbance the simulator adds.
    assert np.rad2deg(abs(lean - expected)) < 0.3
    # Rotate the body-frame specific force back to the heading frame (ISO 8855 signs):
    # f_y = cos(roll) a_y - sin(roll) (sin(pitch) a_x + cos(pitch) a_z); must equal v^2/R.
    ax, ay, az = (f[c].to_numpy()[m] for c in (cat.ACCEL_X, cat.ACCEL_Y, cat.ACCEL_Z))
    f_y = np.cos(roll) * ay - np.sin(roll) * (np.sin(pitch) * ax + np.cos(pitch) * az)
    # Centripetal acceleration v^2/R (textbook kinematics); 0.05 m/s^2 is ~1 % of g and
    # covers the roll disturbance's own lateral accelerations.
    assert np.mean(f_y) == pytest.approx(np.mean(v**2) / radius, abs=0.05)


def test_accel_z_reads_standard_gravity_at_rest(run14):
    f = run14.frame
    rest = f[cat.T].to_numpy() < 1.4  # the robot stands balancing for 1.5 s before driving
    # At rest and level the accelerometer reads +g0 on z: g0 = 9.80665 m/s² (ISO 80000-3).
    # 0.01 m/s² covers rounding (1e-4 g0) and the pitch wobble (g (1 - cos 0.5 deg)).
    assert f[cat.ACCEL_Z][rest].mean() == pytest.approx(G0, abs=0.01)
    assert abs(f[cat.ACCEL_X][rest].mean()) < 0.1
    assert abs(f[cat.ACCEL_Y][rest].mean()) < 0.02


def test_torques_clipped_at_profile_peak(run14):
    profile = demo_profile()
    f = run14.frame
    for act in profile.actuators:
        req = f[f"{act.name}.torque_req"].to_numpy()
        cmd = f[f"{act.name}.torque_cmd"].to_numpy()
        ok = ~np.isnan(cmd)
        # cmd = clip(req, +-peak); the files carry 0.001 N*m rounding.
        assert np.max(np.abs(cmd[ok])) <= act.peak_torque + 5e-4
        assert np.allclose(cmd[ok], np.clip(req[ok], -act.peak_torque, act.peak_torque), atol=1e-3)
    sat_channels = {e.channel for e in run14.truth if e.kind == cat.SATURATION}
    assert sat_channels == {"wheel_l", "wheel_r", "hip_l"}
    for e in run14.truth:
        if e.kind == cat.SATURATION:
            t = f[cat.T].to_numpy()
            inside = (t > e.start_s + 0.02) & (t < e.end_s)
            excess = np.abs(f[f"{e.channel}.torque_req"]) - np.abs(f[f"{e.channel}.torque_cmd"])
            assert (excess[inside] > 0.05).all()


def test_truth_holds_every_planted_kind(run14, run20):
    assert {k for k, _ in _kinds(run14)} == {
        cat.SATURATION,
        cat.SLIP,
        cat.YAW_SLIP,
        cat.LOW_TIP_MARGIN,
        cat.ROLL_ERROR,
    }
    # 2.0 leans enough in the harbour bend and rejects the shove better: no low margin.
    assert {k for k, _ in _kinds(run20)} == {cat.SATURATION, cat.SLIP, cat.YAW_SLIP, cat.ROLL_ERROR}
    for run in (run14, run20):
        for e in run.truth:
            assert e.kind in cat.EVENT_KINDS
            assert e.end_s - e.start_s > 0.2  # planted events are clear, not marginal
        assert not any(e.kind in (cat.FALL, cat.PITCH_EXCURSION) for e in run.truth)


def test_events_of_the_truth_match_the_true_series(run14):
    ts = run14.true_series
    t = ts[cat.T].to_numpy()
    for e in run14.truth:
        inside = (t >= e.start_s) & (t <= e.end_s)
        if e.kind == cat.LOW_TIP_MARGIN:
            assert ts[cat.TIP_MARGIN][inside].min() < 0.3
        if e.kind == cat.ROLL_ERROR:
            assert np.rad2deg(np.abs(ts[cat.ROLL_ERROR][inside]).max()) > 3.0
    outside = np.ones(t.size, dtype=bool)
    for e in run14.truth:
        if e.kind in (cat.LOW_TIP_MARGIN, cat.ROLL_ERROR):
            outside &= ~((t >= e.start_s - 0.3) & (t <= e.end_s + 0.3))
    # away from planted events the run stays clear of the thresholds
    assert ts[cat.TIP_MARGIN][outside].min() > 0.4
    assert np.rad2deg(np.abs(ts[cat.ROLL_ERROR][outside]).max()) < 2.5


def test_controller_versions_differ_as_their_parameters_say(run14, run20):
    def rms_roll_error(run):
        return float(np.sqrt(np.mean(run.true_series[cat.ROLL_ERROR] ** 2)))

    assert rms_roll_error(run20) < 0.8 * rms_roll_error(run14)

    def harbour_margin(run):
        ts = run.true_series
        return ts[cat.TIP_MARGIN][ts["segment"] == 9].min()  # segment 9: harbour bend

    assert harbour_margin(run20) > harbour_margin(run14) + 0.2

    def saturated_time(run):
        return sum(e.end_s - e.start_s for e in run.truth if e.kind == cat.SATURATION)

    assert saturated_time(run14) > 2 * saturated_time(run20)


def test_fall_variant_plants_a_fall():
    run = simulate_run("lean-ctl 2.0", seed=1, duration_s=10.0, fall=True)
    kinds = {e.kind for e in run.truth}
    assert {cat.FALL, cat.PITCH_EXCURSION} <= kinds
    # the robot ends lying on its bumper: |pitch| far past the 45 deg fall threshold
    assert np.rad2deg(abs(run.frame[cat.PITCH].iloc[-1])) > 70.0


def test_same_seed_same_run_and_shorter_runs_are_prefixes():
    a = simulate_run("lean-ctl 1.4", seed=3, duration_s=4.0)
    b = simulate_run("lean-ctl 1.4", seed=3, duration_s=4.0)
    pd.testing.assert_frame_equal(a.frame, b.frame)
    c = simulate_run("lean-ctl 1.4", seed=4, duration_s=4.0)
    m = min(len(a.frame), len(c.frame))  # dropped rows differ between seeds
    assert not np.allclose(a.frame[cat.ROLL][:m], c.frame[cat.ROLL][:m])
    longer = simulate_run("lean-ctl 1.4", seed=3, duration_s=6.0)
    n = len(a.frame) - 3  # the last samples use central differences
    pd.testing.assert_frame_equal(a.frame.iloc[:n], longer.frame.iloc[:n])


def test_start_offset_and_second_course():
    run = simulate_run("lean-ctl 2.0", seed=2, duration_s=5.0, start_offset_m=8.0)
    assert run.true_series["distance"].iloc[0] == pytest.approx(-8.0)
    assert (run.true_series["segment"] == -1).all()  # still on the approach after 5 s
    hill = simulate_run("lean-ctl 2.0", seed=2, duration_s=3.0, course="gullhaven-hill")
    assert hill.course == "gullhaven-hill"


def test_bad_arguments_are_refused():
    with pytest.raises(OutriggerError, match="lean-ctl 1.4"):
        simulate_run("lean-ctl 9", duration_s=1.0)
    with pytest.raises(OutriggerError, match="gullhaven-loop"):
        simulate_run(course="nowhere", duration_s=1.0)
    with pytest.raises(OutriggerError, match="whole multiple"):
        simulate_run(duration_s=1.0, state_rate_hz=200.0, torque_rate_hz=75.0)


def test_profile_toml_parses_with_the_profile_reader():
    profile = profile_from_dict(tomllib.loads(profile_toml()))
    assert profile.name == "Marram-2"
    assert profile.wheel_radius == pytest.approx(R_WHEEL)
    assert profile.track_width == pytest.approx(TRACK)
    assert profile.wheel_encoder_reference == "leg"
    assert set(profile.actuator_names) == {"wheel_l", "wheel_r", "hip_l", "hip_r"}
    assert demo_profile() == profile


def test_channel_map_round_trips_and_its_units_have_the_right_dimension():
    ureg = pint.UnitRegistry()  # pint is the reference library for units
    cmap = tomllib.loads(channel_map_toml())
    run = simulate_run("lean-ctl 2.0", seed=1, duration_s=1.0)
    tables = foreign_tables(run)
    by_kind = {s["kind"]: s for s in cmap["source"]}
    for fname, table in tables.items():
        kind = "state" if fname.endswith("_state.csv.gz") else "torque"
        src = by_kind[kind]
        assert src["time_unit"] == "us"
        mapped = set(src["columns"]) | {src["time_column"]}
        unmapped = set(table.columns) - mapped
        assert unmapped == ({"batt_v", "ctrl_mode"} if kind == "state" else set())
        assert set(src["columns"]) <= set(table.columns)
        for spec in src["columns"].values():
            entry = cat.lookup(spec["signal"], ("wheel_l", "wheel_r", "hip_l", "hip_r"))
            assert entry is not None
            assert ureg.Quantity(1.0, spec["unit"]).dimensionality == (
                ureg.Quantity(1.0, entry.unit).dimensionality
            )
    assert cmap["source"][0]["columns"]["imu_pitch_deg"]["scale"] == -1
    # the log's pitch is nose-up positive: the raw column is minus the canonical pitch
    raw = tables[f"{run.name}_state.csv.gz"]
    assert np.allclose(-np.deg2rad(raw["imu_pitch_deg"]), run.frame[cat.PITCH], atol=1e-9)
    # 1 g0 = 9.80665 m/s² (ISO 80000-3), the unit of the accelerometer columns
    assert np.allclose(raw["acc_z_g"] * G0, run.frame[cat.ACCEL_Z], atol=1e-9)


def test_bundled_text_files_are_what_the_generator_writes():
    assert (DEMO_DIR / "channel-map.toml").read_text() == channel_map_toml()
    assert (DEMO_DIR / "marram-2.toml").read_text() == profile_toml()
    assert (DEMO_DIR / "runs.toml").read_text() == runs_toml()
    assert (DEMO_DIR / "README.md").read_text() == readme_text()
    listed = tomllib.loads(runs_toml())["run"]
    assert len(listed) == len(DEMO_RUNS) >= 3
    assert {r["controller"] for r in listed} == {"lean-ctl 1.4", "lean-ctl 2.0"}
    for r in listed:
        for fname in r["files"]:
            assert (DEMO_DIR / fname).is_file()


@pytest.mark.parametrize("spec", DEMO_RUNS, ids=lambda s: s.name)
def test_bundled_logs_start_as_the_generator_writes_them(spec):
    # Shorter runs are exact prefixes (each noise channel has its own generator), so
    # the first seconds regenerate quickly; the whole files are compared by the
    # `outrigger demo-logs` regeneration, which is deterministic.
    run = demo_run(spec, duration_s=6.0)
    for fname, table in foreign_tables(run).items():
        with gzip.open(DEMO_DIR / fname, "rt") as fh:
            committed = pd.read_csv(fh)
        assert list(committed.columns) == list(table.columns)
        n = len(table) - 3  # the last samples use central differences
        head = committed.iloc[:n]
        for col in table.columns:
            # values are written rounded; a last-digit flip from floating-point
            # differences between machines is allowed (one unit of the last decimal)
            assert np.allclose(head[col].to_numpy(), table[col].to_numpy()[:n], rtol=0, atol=0.011)


def test_bundled_files_are_small():
    total = sum(p.stat().st_size for p in DEMO_DIR.iterdir() if p.is_file())
    assert total < 10e6  # the limit on committed demo data
