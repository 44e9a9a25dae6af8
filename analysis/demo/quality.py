"""Detection quality: the detectors on noisy demo logs, measured against the demo truth.

Each case simulates a demo run with the default sensor model
(:mod:`analysis.demo.sensors`), analyses its logged frame with every detector
and the profile's thresholds (the README defaults), and compares the events
with the generator's truth (:mod:`analysis.demo.truth`, from the true states by
the README's definitions, sharing no code with the detectors).

Scoring rules:

- a detected and a planted event match when they have the same kind and channel
  and their intervals overlap, allowing :data:`MATCH_SLACK_S`;
- precision = detected events that match a planted one / detected events;
  recall = planted events that some detected event matches / planted events;
- after a run's first true fall begins, only ``fall`` and ``pitch_excursion``
  are scored: a robot tipping onto its bumper drives every other signal (the
  README: a fall explains everything that follows it);
- noise-only stretches are taken on the noise-only course ``gullhaven-quiet``
  (nothing planted), from the true states: standing still (speed under
  1 cm/s before the drive starts), constant-speed straights and a steady curve
  (speed reference and curvature held constant, true speed within
  0.05 m/s of the reference), each
  trimmed by :data:`SETTLE_S` at both ends and at least :data:`MIN_STRETCH_S`
  long. Any detected event that overlaps one is counted against it.

The test suite (``tests/analysis/detect/test_noisy_sensors.py``) and the
benchmark (``benchmarks/bench_detection.py``) both use these cases.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.demo.logs import DemoRun, PlantedEvent, demo_profile, simulate_run
from analysis.demo.sensors import SensorModel
from analysis.detect.pipeline import analyse_frame
from analysis.events import Event

#: Slack of the overlap test: two sample periods at 100 Hz (the torque rate), since
#: truth and detection sample different signals (common practice, no source). [s]
MATCH_SLACK_S = 0.02
#: Trim of a noise-only stretch at each end, so controller transients settle. [s]
SETTLE_S = 1.0
#: Shortest noise-only stretch counted. [s]
MIN_STRETCH_S = 3.0
#: Steady speed: the speed reference held and the true speed within this of it. [m/s]
STEADY_SPEED = 0.05
#: The course with nothing planted (the event courses' straights hold kerbs and shoves).
QUIET_COURSE = "gullhaven-quiet"
#: Kinds still scored after a fall begins.
AFTER_FALL_KINDS = (cat.FALL, cat.PITCH_EXCURSION)


@dataclass(frozen=True)
class Case:
    """One simulated run of the quality check (arguments of ``simulate_run``)."""

    controller: str
    seed: int
    course: str = "gullhaven-loop"
    fall: bool = False
    stand_s: float = 1.5
    duration_s: float | None = None
    state_rate_hz: float = 200.0

    @property
    def label(self) -> str:
        """Short name for tables."""
        extra = " fall" if self.fall else ""
        extra += f" stand {self.stand_s:g} s" if self.duration_s else ""
        extra += f" {self.state_rate_hz:g} Hz" if self.state_rate_hz != 200.0 else ""
        return f"{self.course} {self.controller} s{self.seed}{extra}"


def short_cases(state_rate_hz: float = 200.0) -> list[Case]:
    """The cases of the test suite: both controllers, both event courses, a fall, noise only."""
    out = [
        Case(c, s, state_rate_hz=state_rate_hz)
        for c in ("lean-ctl 1.4", "lean-ctl 2.0")
        for s in (0, 1)
    ]
    out.append(Case("lean-ctl 2.0", 3, fall=True, state_rate_hz=state_rate_hz))
    out += [
        Case(c, 2, course="gullhaven-hill", state_rate_hz=state_rate_hz)
        for c in ("lean-ctl 1.4", "lean-ctl 2.0")
    ]
    out += [
        Case(c, 4, course="gullhaven-quiet", state_rate_hz=state_rate_hz)
        for c in ("lean-ctl 1.4", "lean-ctl 2.0")
    ]
    out.append(
        Case(
            "lean-ctl 2.0",
            5,
            course="gullhaven-quiet",
            stand_s=150.0,
            duration_s=150.0,
            state_rate_hz=state_rate_hz,
        )
    )
    return out


def full_cases(seeds: int = 5, state_rate_hz: float = 200.0) -> list[Case]:
    """More seeds of every kind of case, for the benchmark's full size."""
    out = []
    for c in ("lean-ctl 1.4", "lean-ctl 2.0"):
        for s in range(seeds):
            out.append(Case(c, 10 + s, state_rate_hz=state_rate_hz))
            out.append(Case(c, 20 + s, course="gullhaven-hill", state_rate_hz=state_rate_hz))
            out.append(Case(c, 30 + s, course="gullhaven-quiet", state_rate_hz=state_rate_hz))
        out.append(Case(c, 40, fall=True, state_rate_hz=state_rate_hz))
        out.append(
            Case(
                c,
                41,
                course="gullhaven-quiet",
                stand_s=300.0,
                duration_s=300.0,
                state_rate_hz=state_rate_hz,
            )
        )
    return out


@dataclass
class CaseResult:
    """A case's run, its detected events and its noise-only stretches."""

    case: Case
    run: DemoRun
    events: list[Event]
    stretches: list[tuple[str, float, float]] = field(default_factory=list)


def run_case(case: Case, sensors: SensorModel | None = None) -> CaseResult:
    """Simulate, analyse with the profile's thresholds, and find the noise-only stretches."""
    run = simulate_run(
        case.controller,
        seed=case.seed,
        course=case.course,
        fall=case.fall,
        stand_s=case.stand_s,
        duration_s=case.duration_s,
        state_rate_hz=case.state_rate_hz,
        sensors=sensors,
    )
    result = analyse_frame(run.frame, demo_profile())
    quiet = case.course == QUIET_COURSE
    stretches = noise_only_stretches(run.true_series) if quiet else []
    return CaseResult(case, run, result.events, stretches)


def noise_only_stretches(true_series: pd.DataFrame) -> list[tuple[str, float, float]]:
    """(label, start_s, end_s) of standing, straight and steady-curve stretches of the truth.

    Labels: "standing", "straight", "steady curve". See the module docstring.
    """
    t = true_series[cat.T].to_numpy()
    if t.size < 3:
        return []
    v = true_series[cat.VEL_X].to_numpy()
    vref = true_series[cat.VEL_X_REF].to_numpy()
    kappa = true_series["curvature"].to_numpy()
    standing = (np.abs(v) < 0.01) & (t < _drive_start(t, v))
    held = (np.abs(np.gradient(vref)) < 1e-9) & (np.abs(np.gradient(kappa)) < 1e-9)
    steady = held & (np.abs(v - vref) < STEADY_SPEED) & (vref > 0.3)
    labels = np.where(standing, 1, np.where(steady & (kappa == 0), 2, np.where(steady, 3, 0)))
    names = {1: "standing", 2: "straight", 3: "steady curve"}
    out = []
    edges = np.flatnonzero(np.diff(labels) != 0) + 1
    for a, b in zip(np.r_[0, edges], np.r_[edges, t.size], strict=True):
        lab = int(labels[a])
        if lab == 0:
            continue
        t0, t1 = t[a] + SETTLE_S, t[b - 1] - SETTLE_S
        if t1 - t0 >= MIN_STRETCH_S:
            out.append((names[lab], float(t0), float(t1)))
    return out


def _drive_start(t: np.ndarray, v: np.ndarray) -> float:
    moving = np.flatnonzero(np.abs(v) >= 0.01)
    return float(t[moving[0]]) if moving.size else float(t[-1]) + 1.0


def _overlaps(a: Event | PlantedEvent, b: Event | PlantedEvent) -> bool:
    return (
        a.kind == b.kind
        and a.channel == b.channel
        and a.start_s <= b.end_s + MATCH_SLACK_S
        and b.start_s <= a.end_s + MATCH_SLACK_S
    )


def _scored(events: Iterable[Event | PlantedEvent], fall_at: float | None) -> list:
    if fall_at is None:
        return list(events)
    return [e for e in events if e.kind in AFTER_FALL_KINDS or e.start_s < fall_at]


@dataclass
class KindScore:
    """Counts of one event kind over all cases."""

    kind: str
    planted: int = 0
    detected: int = 0
    matched_detected: int = 0
    matched_planted: int = 0
    misses: list[str] = field(default_factory=list)
    false_alarms: list[str] = field(default_factory=list)

    @property
    def precision(self) -> float | None:
        """Matched detected / detected; None when nothing was detected. [-]"""
        return self.matched_detected / self.detected if self.detected else None

    @property
    def recall(self) -> float | None:
        """Matched planted / planted; None when nothing was planted. [-]"""
        return self.matched_planted / self.planted if self.planted else None


def score(results: Iterable[CaseResult]) -> dict[str, KindScore]:
    """Precision and recall per event kind over the cases (rules in the module docstring)."""
    table = {k: KindScore(k) for k in cat.EVENT_KINDS}
    for res in results:
        falls = [e.start_s for e in res.run.truth if e.kind == cat.FALL]
        fall_at = min(falls) if falls else None
        truth = _scored(res.run.truth, fall_at)
        found = _scored(res.events, fall_at)
        for kind, ks in table.items():
            det = [e for e in found if e.kind == kind]
            planted = [e for e in truth if e.kind == kind]
            ks.detected += len(det)
            ks.planted += len(planted)
            for d in det:
                if any(_overlaps(d, p) for p in planted):
                    ks.matched_detected += 1
                else:
                    ks.false_alarms.append(f"{res.case.label}: {d.channel or ''} {d.start_s:.2f} s")
            for p in planted:
                if any(_overlaps(p, d) for d in det):
                    ks.matched_planted += 1
                else:
                    ks.misses.append(f"{res.case.label}: {p.channel or ''} {p.start_s:.2f} s")
    return table


def noise_only_events(results: Iterable[CaseResult]) -> dict[str, list[str]]:
    """Detected events that overlap a noise-only stretch, by stretch label.

    Returns a dict label -> list of "case: kind channel start" descriptions (an
    empty list when the detectors stayed silent there).
    """
    out: dict[str, list[str]] = {"standing": [], "straight": [], "steady curve": []}
    for res in results:
        for label, t0, t1 in res.stretches:
            for e in res.events:
                if e.start_s <= t1 and e.end_s >= t0:
                    out[label].append(
                        f"{res.case.label}: {e.kind} {e.channel or ''} {e.start_s:.2f} s"
                    )
    return out


def noise_only_seconds(results: Iterable[CaseResult]) -> dict[str, float]:
    """Total time of the noise-only stretches, by label. [s]"""
    out = {"standing": 0.0, "straight": 0.0, "steady curve": 0.0}
    for res in results:
        for label, t0, t1 in res.stretches:
            out[label] += t1 - t0
    return out
