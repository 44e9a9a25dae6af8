"""Invented multi-lap demo runs: Marram-2 driving many laps of the Gullhaven ring.

An endurance run is many laps of one closed loop. :func:`simulate_laps` builds
a course of ``laps`` copies of the ring (about 104 m, turning 360 degrees in
all), each lap driven at its own small speed factor (lap-to-lap variation), one
chosen lap with a disturbance (a wet patch under the right wheel and a lateral
shove), and an optional slow drift: every lap's target speeds fall by
``drift_per_lap`` (a sagging battery), so lap time rises lap by lap. The
velocity estimate carries a small scale error (odometry drift), so distance
from odometry runs away from the true distance over the run.

The truth of every lap (start and end time from the simulator's own distance,
which speed factor it was driven at, whether it was disturbed) comes from the
generator's own definitions, never from ``analysis`` code.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime

import numpy as np

from analysis.demo import course as dc
from analysis.demo import logs as dl
from analysis.demo import sim as ds
from analysis.demo.sensors import SensorModel
from analysis.demo.truth import planted_truth
from analysis.errors import OutriggerError

#: One lap of the ring: straights and curves turning +120, -60, +150 and +150 degrees
#: (360 in all, so the loop closes). Invented.
RING: tuple[dc.Segment, ...] = (
    dc.Segment("start straight", speed=1.8, length=14.0),
    dc.Segment("mill bend", speed=1.8, radius=5.0, angle_deg=120.0),
    dc.Segment("back straight", speed=3.0, length=18.0, accel="sprint"),
    dc.Segment("reed chicane", speed=1.8, radius=-6.0, angle_deg=60.0),
    dc.Segment("dyke lane", speed=1.6, length=10.0),
    dc.Segment("sluice bend", speed=1.6, radius=4.0, angle_deg=150.0),
    dc.Segment("pier straight", speed=2.2, length=10.0),
    dc.Segment("home bend", speed=1.8, radius=5.0, angle_deg=150.0),
)
RING_NAME = "gullhaven-ring"
#: Scale error of the velocity estimate (odometry drift): +0.4 %. [-] (invented)
ODOMETRY_SCALE = 1.004
#: Lap-to-lap spread of the speed factor (one standard deviation). [-] (invented)
LAP_SPEED_SPREAD = 0.005


def ring_length() -> float:
    """Length of one lap of the ring along the path. [m]"""
    return float(sum(seg.arc_length for seg in RING))


@dataclass(frozen=True)
class LapTruth:
    """One lap as the generator drove it.

    ``number`` 1..laps; ``start_s``/``end_s`` times the true distance crossed the
    lap's start and end [s]; ``speed_factor`` the factor on every target speed [-];
    ``disturbed`` whether the wet patch and shove were on this lap.
    """

    number: int
    start_s: float
    end_s: float
    speed_factor: float
    disturbed: bool


@dataclass
class LapRun:
    """A simulated multi-lap run: the demo run and the truth of its laps."""

    run: dl.DemoRun
    laps: list[LapTruth]
    lap_length_m: float


def ring_course(laps: int, factors: np.ndarray, disturbed_lap: int | None) -> dc.Course:
    """The ring driven ``laps`` times, lap ``k`` at target speeds times ``factors[k-1]``."""
    segments = []
    for k in range(1, laps + 1):
        for seg in RING:
            segments.append(
                replace(seg, name=f"lap {k} {seg.name}", speed=seg.speed * factors[k - 1])
            )
    features: tuple[dc.Feature, ...] = ()
    if disturbed_lap is not None:
        features = (
            dc.Feature("low_friction", f"lap {disturbed_lap} back straight", at=0.2, length=4.0,
                       size=dc.FRICTION_WET, side="r"),
            dc.Feature("shove", f"lap {disturbed_lap} dyke lane", at=4.0, length=1.0, size=12.0),
        )  # fmt: skip
    return dc.Course(name=RING_NAME, site="Gullhaven test yard", segments=tuple(segments),
                     features=features)  # fmt: skip


def simulate_laps(
    controller: str = "lean-ctl 2.0",
    *,
    laps: int = 8,
    seed: int = 0,
    disturbed_lap: int | None = None,
    drift_per_lap: float = 0.0,
    state_rate_hz: float = 200.0,
    torque_rate_hz: float = 100.0,
    start_offset_m: float = 0.0,
    duration_s: float | None = None,
    start_utc: datetime | None = None,
    name: str | None = None,
) -> LapRun:
    """Simulate Marram-2 driving ``laps`` laps of the ring.

    Parameters
    ----------
    controller : str
        "lean-ctl 1.4" or "lean-ctl 2.0".
    laps : int
        Laps driven (the run stops at the end of the last). [-]
    seed : int
        Seed of the noise and of the lap-to-lap speed factors. [-]
    disturbed_lap : int or None
        Lap (1-based) with a wet patch under the right wheel and a shove.
    drift_per_lap : float
        Relative fall of the target speeds per lap (0.005: 0.5 % slower each lap). [-]
    state_rate_hz, torque_rate_hz : float
        Log rates. [Hz]
    start_offset_m : float
        Straight approach driven before the first crossing of the start line. [m]
    duration_s : float or None
        Cut the run after this long (a partial last lap). [s]
    start_utc : datetime or None
        Absolute start.
    name : str or None
        Run name.
    """
    if laps < 1:
        raise OutriggerError(f"laps must be at least 1, found {laps}.")
    if disturbed_lap is not None and not 1 <= disturbed_lap <= laps:
        raise OutriggerError(f"disturbed_lap must be between 1 and {laps}, found {disturbed_lap}.")
    if not 0.0 <= drift_per_lap * laps < 0.5:
        raise OutriggerError(
            f"drift_per_lap x laps must be in [0, 0.5) so the robot still drives, found "
            f"{drift_per_lap} x {laps}."
        )
    ctl = dc.controller_params(controller)
    spread = np.random.default_rng([seed, 900]).normal(0.0, LAP_SPEED_SPREAD, laps)
    factors = (1.0 + spread) * (1.0 - drift_per_lap * np.arange(laps))
    course = ring_course(laps, factors, disturbed_lap)
    dt = 1.0 / state_rate_hz
    ratio = int(round(state_rate_hz / torque_rate_hz))
    bound = duration_s if duration_s is not None else 40.0 + laps * ring_length() / 1.2
    st = ds.simulate_states(course, ctl, seed=seed, dt=dt, duration_s=bound,
                            start_offset_m=start_offset_m, fall_at_s=None)  # fmt: skip
    true = ds.derive_true(st, dt)
    t = st["t"]
    tq_index = np.arange(0, t.size, ratio)
    t_tq = t[tq_index] + dl.TORQUE_STAMP_OFFSET_US * 1e-6
    truth = planted_truth(t, st, true, t_tq, tq_index)
    start = start_utc or dl.DEFAULT_START
    raw = dl._foreign(st, true, seed, dt, tq_index, start, SensorModel())
    raw["state"]["vx_est"] = np.round(raw["state"]["vx_est"] * ODOMETRY_SCALE, 3)
    frame = dl._frame_from_foreign(raw)
    run = dl.DemoRun(
        name=name or f"{RING_NAME}-{controller.replace(' ', '-')}-s{seed}",
        course=RING_NAME, controller=controller, start_utc=start, frame=frame, truth=truth,
        true_series=dl._true_series(st, true), seed=seed, state_rate_hz=state_rate_hz,
        torque_rate_hz=torque_rate_hz, raw=raw,
    )  # fmt: skip
    length = ring_length()
    s = st["s"]
    lap_truth = []
    for k in range(1, laps + 1):
        a, b = (k - 1) * length, k * length
        if s[-1] < b:
            break
        t_a = float(t[np.argmax(s >= a)])
        t_b = float(t[np.argmax(s >= b)])
        lap_truth.append(LapTruth(k, t_a, t_b, float(factors[k - 1]), k == disturbed_lap))
    return LapRun(run, lap_truth, length)
