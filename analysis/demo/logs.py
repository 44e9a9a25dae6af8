"""Invented demo runs: Marram-2 driving the Gullhaven courses, with their ground truth.

:func:`simulate_run` drives the invented robot Marram-2 over a demo course with
one of two lean-controller versions (:mod:`analysis.demo.sim` holds the model,
:mod:`analysis.demo.course` the robot, controllers and courses), measures it
with the sensor model of :mod:`analysis.demo.sensors` (attitude-filter noise and
drift, gyro noise and bias, vibration, estimator lag, encoder quantisation, time
stamp jitter, dropped rows, measured torque), and returns the canonical SI
analysis frame, the noise-free true series and the list of events the drive
planted (from the true states, by the README's definitions, in
:mod:`analysis.demo.truth`, which shares no code with the detectors). :func:`foreign_tables` writes the same run in the
"foreign" log layout of the bundled demo files (own column names, degrees, rpm,
mm, g0, microsecond epoch stamps, state and torque at different rates), and
:func:`channel_map_toml` is the channel map that reads that layout.

This module touches no files: :func:`demo_files` returns the bundled files'
bytes, and the command ``outrigger demo-logs`` writes them.
"""

from __future__ import annotations

import gzip
import io
import tomllib
from dataclasses import dataclass, field
from datetime import UTC, datetime

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.demo import course as dc
from analysis.demo import sim as ds
from analysis.demo.sensors import SensorModel, measure_state, measure_torque, stamp_and_drop
from analysis.demo.truth import DEFINITIONS, PlantedEvent, planted_truth
from analysis.errors import OutriggerError
from analysis.profile import RobotProfile, profile_from_dict, unit_registry

__all__ = [
    "DemoRun",
    "PlantedEvent",
    "SensorModel",
    "channel_map_toml",
    "demo_profile",
    "foreign_tables",
    "profile_toml",
    "simulate_run",
    "table_bytes",
]

profile_toml = dc.profile_toml

DEFAULT_START = datetime(2024, 5, 14, 9, 0, 0, tzinfo=UTC)  # invented test day
TORQUE_STAMP_OFFSET_US = 1000  # the torque logger stamps 1 ms after the control step


@dataclass
class DemoRun:
    """One simulated drive.

    Attributes
    ----------
    name, course, controller : str
    start_utc : datetime
        Absolute time of the first state sample.
    frame : DataFrame
        Canonical SI analysis frame: ``t`` [s] then catalogue names at the state
        rate; torque signals joined as-of (latest torque sample at or before each
        state sample, within one torque period); unmapped log columns as
        ``extra.<name>``. Values are those of the foreign files converted back,
        so they carry the files' rounding.
    truth : list of PlantedEvent
        Events the drive planted, from the true states.
    true_series : DataFrame
        ``t`` plus noise-free series: ``distance`` [m], ``segment`` (index into
        the course's segments, -1 before the start), ``roll``, ``roll_ref``,
        ``pitch``, ``yaw_rate``, ``v_mid``, per wheel ``contact_speed``,
        ``rim_speed``, ``slip_speed``, ``slip_ratio``, ``specific_force_y|z``,
        ``com_height``, ``zmp_y``, ``tip_margin``, ``roll_error``, ...
    """

    name: str
    course: str
    controller: str
    start_utc: datetime
    frame: pd.DataFrame
    truth: list[PlantedEvent]
    true_series: pd.DataFrame
    seed: int = 0
    state_rate_hz: float = 200.0
    torque_rate_hz: float = 100.0
    raw: dict[str, pd.DataFrame] = field(default_factory=dict, repr=False)


# --- the foreign layout ---------------------------------------------------------------
# (raw column, canonical signal, unit, scale, decimals, noise sigma in SI)
_STATE_COLUMNS: list[tuple[str, str, str, float, int]] = [
    ("imu_roll_deg", cat.ROLL, "deg", 1.0, 3),
    ("imu_pitch_deg", cat.PITCH, "deg", -1.0, 3),  # log: nose up positive
    ("imu_yaw_deg", cat.YAW, "deg", 1.0, 2),
    ("gyro_x_dps", cat.ROLL_RATE, "deg/s", 1.0, 2),
    ("gyro_y_dps", cat.PITCH_RATE, "deg/s", -1.0, 2),
    ("gyro_z_dps", cat.YAW_RATE, "deg/s", 1.0, 2),
    ("acc_x_g", cat.ACCEL_X, "g0", 1.0, 4),
    ("acc_y_g", cat.ACCEL_Y, "g0", 1.0, 4),
    ("acc_z_g", cat.ACCEL_Z, "g0", 1.0, 4),
    ("vx_est", cat.VEL_X, "m/s", 1.0, 3),
    ("vy_est", cat.VEL_Y, "m/s", 1.0, 3),
    ("leg_l_mm", cat.LEG_L_LENGTH, "mm", 1.0, 1),
    ("leg_r_mm", cat.LEG_R_LENGTH, "mm", 1.0, 1),
    ("whl_l_rpm", "wheel_l.vel", "rpm", 1.0, 2),
    ("whl_r_rpm", "wheel_r.vel", "rpm", 1.0, 2),
    ("hip_l_deg", "hip_l.pos", "deg", 1.0, 3),
    ("hip_r_deg", "hip_r.pos", "deg", 1.0, 3),
    ("lean_cmd_deg", cat.ROLL_REF, "deg", 1.0, 3),
    ("pitch_cmd_deg", cat.PITCH_REF, "deg", -1.0, 3),
    ("height_cmd_mm", cat.HEIGHT_REF, "mm", 1.0, 1),
    ("vx_cmd", cat.VEL_X_REF, "m/s", 1.0, 3),
    ("yaw_rate_cmd_dps", cat.YAW_RATE_REF, "deg/s", 1.0, 2),
]
_TORQUE_PREFIX = {"wheel_l": "wl", "wheel_r": "wr", "hip_l": "hl", "hip_r": "hr"}
_TORQUE_QUANTITY = {cat.TORQUE_REQ: "req", cat.TORQUE_CMD: "cmd", cat.TORQUE: "meas"}
_EXTRA_STATE = ("batt_v", "ctrl_mode")


def _torque_columns() -> list[tuple[str, str, str, float, int]]:
    cols = []
    for act, prefix in _TORQUE_PREFIX.items():
        for quantity, short in _TORQUE_QUANTITY.items():
            cols.append((f"{prefix}_tq_{short}", cat.actuator_signal(act, quantity), "N*m", 1.0, 3))
    return cols


def channel_map_toml() -> str:
    """The channel map (README "Channel map" format) of the demo runs' foreign layout."""
    lines = [
        "# Channel map of the Marram-2 demo logs (invented robot, Gullhaven test yard).",
        "# Generated by analysis/demo/logs.py. batt_v and ctrl_mode are left unmapped on",
        "# purpose: they are kept as extra.batt_v and extra.ctrl_mode.",
        "",
        "[[source]]",
        'name = "state"',
        'files = "*_state.csv*"',
        'kind = "state"',
        'time_column = "stamp_us"',
        'time_unit = "us"',
        'time_origin = "epoch"',
        "",
        "[source.columns]",
    ]
    for raw, signal, unit, scale, _ in _STATE_COLUMNS:
        extra = ", scale = -1" if scale == -1.0 else ""
        note = "   # log: nose up positive" if scale == -1.0 else ""
        lines.append(f'{raw} = {{ signal = "{signal}", unit = "{unit}"{extra} }}{note}')
    lines += [
        "",
        "[[source]]",
        'name = "torque"',
        'files = "*_torque.csv*"',
        'kind = "torque"',
        'time_column = "t_us"',
        'time_unit = "us"',
        'time_origin = "epoch"',
        "",
        "[source.columns]",
    ]
    for raw, signal, unit, _, _ in _torque_columns():
        lines.append(f'{raw} = {{ signal = "{signal}", unit = "{unit}" }}')
    return "\n".join(lines) + "\n"


def demo_profile() -> RobotProfile:
    """The Marram-2 robot profile, parsed from :func:`profile_toml`."""
    return profile_from_dict(tomllib.loads(dc.profile_toml()), source="marram-2.toml")


# --- simulation -------------------------------------------------------------------------


def _factor(si_unit: str, unit: str) -> float:
    """Multiplier from the SI unit to a log unit, by pint."""
    return float(unit_registry().Quantity(1.0, si_unit).to(unit).magnitude)


def _si_unit(signal: str) -> str:
    entry = cat.lookup(signal, dc.ACTUATORS)
    if entry is None:  # pragma: no cover - the tables above only name catalogue signals
        raise OutriggerError(f"Demo layout names unknown signal {signal!r}.")
    return entry.unit


def simulate_run(
    controller: str = "lean-ctl 2.0",
    *,
    seed: int = 0,
    duration_s: float | None = None,
    state_rate_hz: float = 200.0,
    torque_rate_hz: float = 100.0,
    start_utc: datetime | None = None,
    course: str = "gullhaven-loop",
    start_offset_m: float = 0.0,
    fall: bool = False,
    name: str | None = None,
    sensors: SensorModel | None = None,
    stand_s: float = ds.T_STAND,
) -> DemoRun:
    """Simulate Marram-2 driving a demo course; return frame, truth and true series.

    Parameters
    ----------
    controller : str
        "lean-ctl 1.4" or "lean-ctl 2.0".
    seed : int
        Seed of the noise generators; the same seed gives the same run. [-]
    duration_s : float or None
        Cut the run after this long; None drives the whole course and stops. [s]
    state_rate_hz, torque_rate_hz : float
        Sample rates of the state and torque logs; the state rate must be a
        whole multiple of the torque rate. [Hz]
    start_utc : datetime or None
        Absolute time of the first state sample (default: an invented test day).
    course : str
        "gullhaven-loop", "gullhaven-hill" or "gullhaven-quiet" (noise only:
        constant-speed straights and a steady circle, nothing planted).
    start_offset_m : float
        Start this far before the course start (a straight approach). [m]
    fall : bool
        Fault the drive part-way (at 60 % of ``duration_s``, or 60 s) so that the
        robot tips forward onto its bumper; the run ends 2 s after it comes to rest.
    name : str or None
        Run name (default from course, controller and seed).
    sensors : SensorModel or None
        What the logs carry instead of the true states (:mod:`analysis.demo.sensors`);
        None for the default model, ``SensorModel.ideal()`` for the true states.
    stand_s : float
        Time the robot stands balancing before it drives off; with ``duration_s``
        at most this long the run is a robot standing still. [s]
    """
    if stand_s < 0:
        raise OutriggerError(f"stand_s must be >= 0 s, found {stand_s}.")
    ctl = dc.controller_params(controller)
    plan = dc.course_plan(course)
    if state_rate_hz <= 0 or torque_rate_hz <= 0:
        raise OutriggerError(
            f"Sample rates must be > 0 Hz, found state {state_rate_hz}, torque {torque_rate_hz}."
        )
    ratio = state_rate_hz / torque_rate_hz
    if abs(ratio - round(ratio)) > 1e-9 or round(ratio) < 1:
        raise OutriggerError(
            f"The state rate ({state_rate_hz} Hz) must be a whole multiple of the torque rate "
            f"({torque_rate_hz} Hz), e.g. 200 and 100."
        )
    if duration_s is not None and duration_s <= 0:
        raise OutriggerError(f"duration_s must be > 0 s or None, found {duration_s}.")
    sensors = SensorModel() if sensors is None else sensors
    dt = 1.0 / state_rate_hz
    fall_at = (0.6 * duration_s if duration_s is not None else 60.0) if fall else None
    st = ds.simulate_states(
        plan,
        ctl,
        seed=seed,
        dt=dt,
        duration_s=None if fall else duration_s,
        start_offset_m=start_offset_m,
        fall_at_s=fall_at,
        stand_s=stand_s,
    )
    true = ds.derive_true(st, dt)
    t = st["t"]
    step = int(round(ratio))
    tq_index = np.arange(0, t.size, step)
    t_tq = t[tq_index] + TORQUE_STAMP_OFFSET_US * 1e-6
    truth = planted_truth(t, st, true, t_tq, tq_index)
    start = start_utc or DEFAULT_START
    if start.tzinfo is None:
        raise OutriggerError(f"start_utc must carry a time zone (UTC), found {start.isoformat()}.")
    raw = _foreign(st, true, seed, dt, tq_index, start, sensors)
    frame = _frame_from_foreign(raw)
    series = _true_series(st, true)
    return DemoRun(
        name=name or f"{course}-{controller.replace(' ', '-')}-s{seed}",
        course=course,
        controller=controller,
        start_utc=start,
        frame=frame,
        truth=truth,
        true_series=series,
        seed=seed,
        state_rate_hz=state_rate_hz,
        torque_rate_hz=torque_rate_hz,
        raw=raw,
    )


def _true_series(st: dict[str, np.ndarray], true: dict[str, np.ndarray]) -> pd.DataFrame:
    cols: dict[str, np.ndarray] = {
        cat.T: st["t"],
        "distance": st["s"],
        "segment": st["segment"].astype(int),
        "curvature": st["kappa"],
        cat.VEL_X_REF: st["vref"],
        cat.ROLL: st["phi"],
        cat.ROLL_REF: st["phi_ref"],
        cat.PITCH: st["theta"],
        cat.PITCH_RATE: st["dtheta"],
        cat.VEL_X: st["v"],
        cat.LEG_L_LENGTH: st["L_l"],
        cat.LEG_R_LENGTH: st["L_r"],
    }
    floor = DEFINITIONS.slip_min_ref_speed
    for key, val in true.items():
        cols[key] = val
    for side in ("l", "r"):
        wheel = f"wheel_{side}"
        slip = true[f"{wheel}.{cat.SLIP_SPEED}"]
        v_c = true[f"{wheel}.{cat.CONTACT_SPEED}"]
        cols[f"{wheel}.{cat.SLIP_RATIO}"] = slip / np.maximum(np.abs(v_c), floor)
    for act in dc.ACTUATORS:
        cols[cat.actuator_signal(act, cat.TORQUE_REQ)] = st[f"{act}_req"]
        cols[cat.actuator_signal(act, cat.TORQUE_CMD)] = st[f"{act}_cmd"]
    return pd.DataFrame(cols)


def _foreign(
    st: dict[str, np.ndarray],
    true: dict[str, np.ndarray],
    seed: int,
    dt: float,
    tq_index: np.ndarray,
    start: datetime,
    sensors: SensorModel,
) -> dict[str, pd.DataFrame]:
    """The run in the foreign layout: measured by the sensor model, in log units, rounded."""
    t = st["t"]
    n = t.size
    yaw = np.cumsum(true["yaw_rate"]) * dt
    hip_angle = {
        side: np.arccos(np.clip(st[f"L_{side}"] / (2.0 * dc.HIP_SEGMENT), -1.0, 1.0))
        for side in ("l", "r")
    }
    si: dict[str, np.ndarray] = {
        cat.ROLL: st["phi"],
        cat.PITCH: st["theta"],
        cat.YAW: yaw,
        cat.ROLL_RATE: st["dphi"],
        cat.PITCH_RATE: st["dtheta"],
        cat.YAW_RATE: true["yaw_rate"],
        cat.ACCEL_X: true[cat.ACCEL_X],
        cat.ACCEL_Y: true[cat.ACCEL_Y],
        cat.ACCEL_Z: true[cat.ACCEL_Z],
        cat.VEL_X: st["v"],
        cat.VEL_Y: true["vel_y"],
        cat.LEG_L_LENGTH: st["L_l"],
        cat.LEG_R_LENGTH: st["L_r"],
        "wheel_l.vel": true["wheel_l.joint_vel"],
        "wheel_r.vel": true["wheel_r.joint_vel"],
        "hip_l.pos": hip_angle["l"],
        "hip_r.pos": hip_angle["r"],
        cat.ROLL_REF: st["phi_ref"],
        cat.PITCH_REF: st["theta_ref"],
        cat.HEIGHT_REF: st["href"],
        cat.VEL_X_REF: st["vref"],
        cat.YAW_RATE_REF: st["kappa"] * st["vref"],
    }
    si = measure_state(si, st["v"], st["v"] / dc.WHEEL_RADIUS, dt, seed, sensors)
    si[cat.YAW] = np.angle(np.exp(1j * si[cat.YAW]))  # wrapped to (-pi, pi]
    start_us = int(round(start.timestamp() * 1e6))
    stamps, keep = stamp_and_drop(t, dt, seed, 0, sensors)
    state: dict[str, np.ndarray] = {"stamp_us": start_us + np.round(stamps * 1e6).astype(np.int64)}
    for raw, signal, unit, scale, decimals in _STATE_COLUMNS:
        value = si[signal]
        state[raw] = np.round(value * _factor(_si_unit(signal), unit) * scale, decimals) + 0.0
    load = sum(np.abs(st[f"{a}_cmd"]) for a in dc.ACTUATORS)
    batt = 50.4 - 0.004 * t - 0.05 * load + 0.02 * ds._rng(seed, 150).standard_normal(n)
    state["batt_v"] = np.round(batt, 2)
    mode = np.where(st["vref"] > 0.0, 2, 1)
    mode = np.where(np.abs(st["theta"]) > np.deg2rad(45.0), 4, mode)
    state["ctrl_mode"] = mode.astype(np.int64)

    t_tq = t[tq_index]
    dt_tq = dt * (tq_index[1] - tq_index[0]) if tq_index.size > 1 else dt
    stamps_tq, keep_tq = stamp_and_drop(t_tq, dt_tq, seed, 1, sensors)
    torque: dict[str, np.ndarray] = {
        "t_us": start_us + np.round(stamps_tq * 1e6).astype(np.int64) + TORQUE_STAMP_OFFSET_US
    }
    for k, act in enumerate(dc.ACTUATORS):
        prefix = _TORQUE_PREFIX[act]
        peak = dc.WHEEL_PEAK if act.startswith("wheel") else dc.HIP_PEAK
        cmd = st[f"{act}_cmd"]
        meas = measure_torque(cmd, peak, dt, seed, k, sensors)[tq_index]
        torque[f"{prefix}_tq_req"] = np.round(st[f"{act}_req"][tq_index], 3)
        torque[f"{prefix}_tq_cmd"] = np.round(cmd[tq_index], 3)
        torque[f"{prefix}_tq_meas"] = np.round(meas, 3)
    state_table = pd.DataFrame(state)[keep].reset_index(drop=True)
    torque_table = pd.DataFrame(torque)[keep_tq].reset_index(drop=True)
    return {"state": state_table, "torque": torque_table}


def _frame_from_foreign(raw: dict[str, pd.DataFrame]) -> pd.DataFrame:
    """Convert the foreign tables back to the canonical frame (pint, as-of join)."""
    ureg = unit_registry()
    state, torque = raw["state"], raw["torque"]
    origin = min(int(state["stamp_us"].iloc[0]), int(torque["t_us"].iloc[0]))
    t = (state["stamp_us"].to_numpy() - origin) * 1e-6
    cols: dict[str, np.ndarray] = {cat.T: t}
    for raw_name, signal, unit, scale, _ in _STATE_COLUMNS:
        value = state[raw_name].to_numpy(dtype=float) * scale
        cols[signal] = np.asarray(ureg.Quantity(value, unit).to(_si_unit(signal)).magnitude)
    t_tq = (torque["t_us"].to_numpy() - origin) * 1e-6
    period = float(np.median(np.diff(t_tq))) if t_tq.size > 1 else np.inf
    j = np.searchsorted(t_tq, t, side="right") - 1
    ok = (j >= 0) & (t - t_tq[np.maximum(j, 0)] <= period * (1.0 + 1e-9))
    jj = np.maximum(j, 0)
    for raw_name, signal, unit, _, _ in _torque_columns():
        value = torque[raw_name].to_numpy(dtype=float)
        si_value = np.asarray(ureg.Quantity(value, unit).to(_si_unit(signal)).magnitude)
        cols[signal] = np.where(ok, si_value[jj], np.nan)
    for extra_name in _EXTRA_STATE:
        cols[cat.extra(extra_name)] = state[extra_name].to_numpy()
    return pd.DataFrame(cols)


def foreign_tables(run: DemoRun) -> dict[str, pd.DataFrame]:
    """The run's log files in the foreign layout: file name -> table.

    ``<name>_state.csv.gz`` (state rate, ``stamp_us`` in microseconds from the
    Unix epoch, degrees, deg/s, g0, mm, rpm, pitch nose-up positive, plus the
    unmapped ``batt_v`` and ``ctrl_mode``) and ``<name>_torque.csv.gz`` (torque
    rate, ``t_us``, requested/commanded/measured torques in N*m).
    """
    if not run.raw:
        raise OutriggerError(
            f"Run {run.name!r} holds no foreign tables; build it with simulate_run()."
        )
    return {
        f"{run.name}_state.csv.gz": run.raw["state"].copy(),
        f"{run.name}_torque.csv.gz": run.raw["torque"].copy(),
    }


def table_bytes(table: pd.DataFrame) -> bytes:
    """A table as gzip-compressed CSV bytes, reproducibly (no time stamp in the gzip header)."""
    buf = io.StringIO()
    table.to_csv(buf, index=False, lineterminator="\n")
    return gzip.compress(buf.getvalue().encode("utf-8"), compresslevel=9, mtime=0)
