"""Runs of one controller as driven on different days, for calibrating the verdicts.

A real test team drives the same controller on the same course and never gets
the same run twice: the driver or path follower is a few percent faster or
slower, a shove lands a metre earlier, the step is met at another moment.
:func:`day_runs` simulates such runs with the demo generator and analyses them,
so that a comparison of two sets of them (same controller on both sides) shows
how many "better"/"worse" calls arise from the conditions alone, and a
comparison against a slightly changed controller shows whether a real change is
still found. ``benchmarks/bench_calibration.py`` and the calibration test use it.
All of it is invented (robot Marram-2, the Gullhaven loop).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from analysis.compare.course_kpis import RunData
from analysis.demo import course as dc
from analysis.demo.logs import demo_profile, simulate_run
from analysis.detect.pipeline import analyse_frame
from analysis.errors import OutriggerError

#: Largest day-to-day change of the target speeds: +-5 %. [-]
SPEED_VARIATION = 0.05
#: Largest shift of each course feature (step, wet patch, shove) between days. [m]
FEATURE_SHIFT_M = 1.0


@dataclass(frozen=True)
class DayVariation:
    """How one run's day differed: speed factor and feature shifts. [-], [m]"""

    speed_scale: float
    feature_shift_m: tuple[float, ...]


def day_variation(seed: int, course: str = "gullhaven-loop") -> DayVariation:
    """A random day: speeds within +-5 %, each feature moved by up to +-1 m (uniform)."""
    rng = np.random.default_rng([seed, 1913])
    n = len(dc.course_plan(course).features)
    return DayVariation(
        float(rng.uniform(1 - SPEED_VARIATION, 1 + SPEED_VARIATION)),
        tuple(float(x) for x in rng.uniform(-FEATURE_SHIFT_M, FEATURE_SHIFT_M, n)),
    )


def slower_roll_loop(share: float, base: str = "lean-ctl 1.4") -> dc.ControllerParams:
    """A demo controller whose roll-loop natural frequency is ``share`` lower (a real change).

    Parameters
    ----------
    share : float
        Relative reduction of ``roll_wn``, in [0, 0.9). [-]
    base : str
        Demo controller it derives from.
    """
    if not 0.0 <= share < 0.9:
        raise OutriggerError(f"share must lie in [0, 0.9), found {share!r}.")
    ctl = dc.controller_params(base)
    return replace(ctl, name=f"{base} roll -{100 * share:g}%", roll_wn=ctl.roll_wn * (1 - share))


def day_runs(
    controller: str | dc.ControllerParams,
    n: int,
    *,
    seed: int = 0,
    state_rate_hz: float = 200.0,
    course: str = "gullhaven-loop",
) -> list[RunData]:
    """``n`` analysed runs of one controller, each on its own day.

    Parameters
    ----------
    controller : str or ControllerParams
    n : int
        Runs. [-]
    seed : int
        Run ``i`` uses noise seed ``seed + i`` and the day of that seed. [-]
    state_rate_hz : float
        State log rate (torque at half of it). [Hz]
    course : str

    Returns
    -------
    list of RunData
        Ready for :func:`analysis.compare.compare.compare_runs`.
    """
    if n < 1:
        raise OutriggerError(f"n must be at least 1, found {n}.")
    profile = demo_profile()
    out = []
    for i in range(n):
        day = day_variation(seed + i, course)
        run = simulate_run(
            controller, seed=seed + i, course=course, state_rate_hz=state_rate_hz,
            torque_rate_hz=state_rate_hz / 2, speed_scale=day.speed_scale,
            feature_shift_m=day.feature_shift_m,
        )  # fmt: skip
        result = analyse_frame(run.frame, profile)
        meta = {"name": run.name, "course": course, "controller": run.controller}
        out.append(RunData(f"d{seed + i}", run.frame, result.series, result.events, profile, meta))
    return out
