"""Small multi-lap demo runs shared by the lap tests (simulated once per session).

Rates are 100 Hz state and 50 Hz torque, and runs are 4 to 8 laps of the ring
(about 104 m each), so each simulates in about a second.
"""

from __future__ import annotations

from functools import cache

from analysis.demo.laps import LapRun, simulate_laps
from analysis.demo.logs import demo_profile
from analysis.detect.pipeline import AnalysisResult, analyse_frame

RATES = {"state_rate_hz": 100.0, "torque_rate_hz": 50.0}
DISTURBED = 3
DRIFT = 0.01  # 1 % slower target speeds each lap (a sagging battery)


@cache
def drift_run() -> LapRun:
    """Candidate controller, 8 laps, lap 3 disturbed, target speeds falling 1 % a lap."""
    return simulate_laps(
        "lean-ctl 2.0", laps=8, seed=3, disturbed_lap=DISTURBED, drift_per_lap=DRIFT, **RATES
    )


@cache
def steady_run(controller: str = "lean-ctl 2.0", seed: int = 4) -> LapRun:
    """8 laps with lap-to-lap variation only, lap 3 disturbed, no drift."""
    return simulate_laps(controller, laps=8, seed=seed, disturbed_lap=DISTURBED, **RATES)


@cache
def analysed(which: str) -> tuple[LapRun, AnalysisResult]:
    """A run of this module with its analysis (``drift``, ``steady``, ``baseline``)."""
    run = {
        "drift": drift_run,
        "steady": steady_run,
        "baseline": lambda: steady_run("lean-ctl 1.4", 5),
    }[which]()
    return run, analyse_frame(run.run.frame, demo_profile())
