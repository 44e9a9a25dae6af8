"""Mutation check of the five detector modules: does a test notice a one-point bug?

Each entry of :data:`MUTATIONS` is one single-point change to one of
``analysis/detect/{saturation,slip,tipover,roll}.py`` or ``analysis/kinematics.py``,
chosen so that it changes a published KPI, event or derived series (a sign, a
factor, a swapped threshold, a dropped ``abs``). The script copies ``analysis/``,
``tests/`` and ``pyproject.toml`` to a scratch folder once, then for each mutation
rewrites the module in the copy, runs that module's tests there (``pytest -x``, no
bytecode cache so an edit of the same size is never served stale), and puts the
original back. The working tree is never touched.

A mutation is *caught* when the tests fail and *survives* when they pass. The
script prints a Markdown survival table (pasted into DEVELOPERS.md) and exits 1
if any mutation survives, 2 if the unmutated tests fail or a mutation no longer
matches the code (then the list needs updating, not the tests).

Run: ``make mutate`` or ``.venv/bin/python benchmarks/mutate.py [--only ID ...] [--list]``.
A full run takes about three minutes on a 2-core machine.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

#: Module under mutation -> the test files that are its tests.
MODULES: dict[str, tuple[str, ...]] = {
    "analysis/detect/saturation.py": (
        "tests/analysis/detect/test_saturation.py",
        "tests/analysis/detect/test_saturation_kpis.py",
    ),
    "analysis/detect/slip.py": (
        "tests/analysis/detect/test_slip.py",
        "tests/analysis/detect/test_slip_kpis.py",
    ),
    "analysis/detect/tipover.py": (
        "tests/analysis/detect/test_tipover.py",
        "tests/analysis/detect/test_tipover_kpis.py",
    ),
    "analysis/detect/roll.py": (
        "tests/analysis/detect/test_roll.py",
        "tests/analysis/detect/test_roll_kpis.py",
    ),
    "analysis/kinematics.py": ("tests/analysis/test_kinematics.py",),
}


@dataclass(frozen=True)
class Mutation:
    """One single-point change: ``old`` (must occur exactly once) becomes ``new``."""

    id: str
    module: str
    old: str
    new: str
    what: str


SAT, SLIP, TIP, ROLL, KIN = (
    "analysis/detect/saturation.py",
    "analysis/detect/slip.py",
    "analysis/detect/tipover.py",
    "analysis/detect/roll.py",
    "analysis/kinematics.py",
)

MUTATIONS: tuple[Mutation, ...] = (
    # --- saturation ---------------------------------------------------------------------
    Mutation(
        "sat-direction",
        SAT,
        "np.zeros(t.size), act, asked)",
        "np.zeros(t.size), act)",
        "torque direction dropped: braking judged on the motoring line",
    ),
    Mutation(
        "sat-brake-sign",
        SAT,
        "* w_signed < 0",
        "* w_signed > 0",
        "braking taken where torque and speed agree",
    ),
    Mutation(
        "sat-brake-emf",
        SAT,
        "(m.bus_voltage + m.k_e * w)",
        "(m.bus_voltage - m.k_e * w)",
        "back-EMF subtracted in the braking quadrant",
    ),
    Mutation(
        "sat-motor-emf",
        SAT,
        "(m.bus_voltage - m.k_e * w)",
        "(m.bus_voltage + m.k_e * w)",
        "back-EMF added in the motoring quadrant",
    ),
    Mutation(
        "sat-tol-sign",
        SAT,
        "(1.0 - tol) * available",
        "(1.0 + tol) * available",
        "tolerance above the available torque instead of below",
    ),
    Mutation(
        "sat-req-abs",
        SAT,
        "(np.abs(req) > np.abs(cmd) + eps)",
        "(req > cmd + eps)",
        "request beyond limiter without magnitudes (negative cuts missed)",
    ),
    Mutation(
        "sat-eps-sign",
        SAT,
        "np.abs(cmd) + eps)",
        "np.abs(cmd) - eps)",
        "eps subtracted from the command",
    ),
    Mutation(
        "sat-act-tol",
        SAT,
        "act.saturation_tol if act.saturation_tol is not None else th.saturation_tol",
        "th.saturation_tol",
        "per-actuator tolerance ignored",
    ),
    Mutation(
        "sat-act-eps",
        SAT,
        "act.saturation_eps if act.saturation_eps is not None else th.saturation_eps",
        "th.saturation_eps",
        "per-actuator eps ignored",
    ),
    Mutation(
        "sat-rms-source",
        SAT,
        "for x in (meas, cmd, req)",
        "for x in (cmd, meas, req)",
        "thermal RMS of the command although the measured torque is logged",
    ),
    Mutation(
        "sat-rms-ratio",
        SAT,
        "worst / act.continuous_torque",
        "worst / act.peak_torque",
        "thermal ratio against the peak rating",
    ),
    Mutation(
        "sat-rms-half",
        SAT,
        "seg_sq = 0.5 * (sq[:-1] + sq[1:])",
        "seg_sq = (sq[:-1] + sq[1:])",
        "trapezoid without the 1/2 in the sliding RMS",
    ),
    Mutation(
        "sat-longest",
        SAT,
        "max((e.duration_s for e in events), default=0.0)",
        "min((e.duration_s for e in events), default=0.0)",
        "longest event taken as the shortest",
    ),
    Mutation(
        "sat-window-start",
        SAT,
        "max(t[i] - th.thermal_window_s, t[0])",
        "t[i] - th.thermal_window_s",
        "worst window may start before the run",
    ),
    Mutation(
        "sat-zero-command",
        SAT,
        "& (a > 0) & valid",
        "& valid",
        "a zero command counts as saturated where no torque is available",
    ),
    Mutation(
        "sat-thermal-partial",
        SAT,
        "cand = np.where(full & np.isfinite(rms), rms, -np.inf)",
        "cand = np.where(np.isfinite(rms), rms, -np.inf)",
        "worst thermal window may be a partial one at the start of the run",
    ),
    # --- slip ---------------------------------------------------------------------------
    Mutation(
        "slip-speed-gate",
        SLIP,
        "np.where(np.abs(slip) > th.slip_speed_min, np.abs(kappa), 0.0)",
        "np.abs(kappa)",
        "slip-speed gate removed",
    ),
    Mutation(
        "slip-ratio-floor",
        SLIP,
        "np.maximum(np.abs(v_contact), min_ref_speed)",
        "np.abs(v_contact)",
        "no floor on the slip-ratio denominator",
    ),
    Mutation(
        "slip-ratio-sign",
        SLIP,
        "return (v_rim - v_contact) / ref",
        "return (v_contact - v_rim) / ref",
        "slip ratio of the opposite sign",
    ),
    Mutation(
        "slip-spin-moving",
        SLIP,
        "* np.sign(v_contact) > 0",
        "* np.sign(v_contact) < 0",
        "spin and skid swapped while moving",
    ),
    Mutation(
        "slip-spin-still",
        SLIP,
        "ahead_still = np.abs(v_rim) > np.abs(v_contact)",
        "ahead_still = np.abs(v_rim) < np.abs(v_contact)",
        "spin and skid swapped at a standstill",
    ),
    Mutation(
        "slip-hysteresis",
        SLIP,
        "th.slip_ratio_on,\n        th.slip_ratio_off,",
        "th.slip_ratio_off,\n        th.slip_ratio_on,",
        "slip entry and exit levels swapped",
    ),
    Mutation(
        "slip-peak-abs",
        SLIP,
        "float(np.nanmax(np.abs(slip)))",
        "float(np.nanmax(slip))",
        "peak slip speed without the magnitude",
    ),
    Mutation(
        "slip-skid-count",
        SLIP,
        '"skid_count": len(events) - n_spin',
        '"skid_count": n_spin',
        "skid count copied from the spin count",
    ),
    Mutation(
        "slip-yaw-diff",
        SLIP,
        "diff = yaw_wheels - gyro",
        "diff = gyro - yaw_wheels",
        "yaw_slip difference of the opposite sign",
    ),
    Mutation(
        "slip-yaw-rms",
        SLIP,
        "float(np.sqrt(np.nansum(w * diff * diff) / total))",
        "float(np.nansum(w * diff * diff) / total)",
        "yaw-rate difference: mean square reported as RMS",
    ),
    Mutation(
        "slip-share-valid",
        SLIP,
        "time_share(t, mask_of_events(t, events), valid)",
        "time_share(t, mask_of_events(t, events))",
        "slipping share over all time, not the time with a slip speed",
    ),
    Mutation(
        "slip-ratio-peak-index",
        SLIP,
        'ev.detail["slip_ratio_peak"] = float(kappa[i])',
        'ev.detail["slip_ratio_peak"] = float(kappa[b])',
        "slip ratio of an event read at its last sample, not at its peak",
    ),
    # --- tip-over -----------------------------------------------------------------------
    Mutation(
        "tip-below-off",
        TIP,
        "time_where(t, margin < th.tip_margin_on, valid)",
        "time_where(t, margin < th.tip_margin_off, valid)",
        "time below threshold with the exit level instead of the entry level",
    ),
    Mutation(
        "tip-p1-p99",
        TIP,
        "np.percentile(mv, 1.0)",
        "np.percentile(mv, 99.0)",
        "1st-percentile margin taken at the 99th",
    ),
    Mutation(
        "tip-min-time",
        TIP,
        '"min_margin_t_s": float(tv[k_min])',
        '"min_margin_t_s": float(t[k_min])',
        "time of the minimum read from the unfiltered time base",
    ),
    Mutation(
        "tip-hysteresis",
        TIP,
        "th.tip_margin_on,\n        th.tip_margin_off,",
        "th.tip_margin_off,\n        th.tip_margin_on,",
        "tip entry and exit levels swapped",
    ),
    Mutation(
        "tip-fallback-sign",
        TIP,
        "f_y = vx * wz",
        "f_y = -vx * wz",
        "fallback lateral force of the opposite sign",
    ),
    Mutation(
        "tip-com-y",
        TIP,
        "y_c = -L_c * np.sin(phi)",
        "y_c = L_c * np.sin(phi)",
        "CoM moves the wrong way with roll",
    ),
    Mutation(
        "tip-zmp-sign",
        TIP,
        "y_zmp = y_c - z_c * f_y / f_z",
        "y_zmp = y_c + z_c * f_y / f_z",
        "lateral force moves the ZMP the wrong way",
    ),
    Mutation(
        "tip-half-track",
        TIP,
        "(0.5 * track_width)",
        "(track_width)",
        "margin against the full track instead of half",
    ),
    Mutation(
        "tip-rotate-y",
        TIP,
        "f_y = c_phi * ay - s_phi * az",
        "f_y = c_phi * ay + s_phi * az",
        "roll rotation of the accelerometer of the wrong sign",
    ),
    Mutation(
        "tip-side",
        TIP,
        'return "left" if y_zmp > 0 else "right"',
        'return "right" if y_zmp > 0 else "left"',
        "side of the ZMP swapped",
    ),
    Mutation(
        "tip-unsupported",
        TIP,
        "margin = np.where(unsupported, 0.0, margin)",
        "margin = np.where(unsupported, 1.0, margin)",
        "free fall reported as a centred ZMP",
    ),
    Mutation(
        "tip-force-angle",
        TIP,
        "float(np.nanmin(angle))",
        "float(np.nanmax(angle))",
        "force-angle KPI takes the largest angle",
    ),
    Mutation(
        "tip-ssf",
        TIP,
        "return track_width / (2.0 * np.asarray(L_c, dtype=float))",
        "return track_width / np.asarray(L_c, dtype=float)",
        "static stability factor without the 2",
    ),
    Mutation(
        "tip-event-side-index",
        TIP,
        "side = None if k is None else _side(yv[a + k])",
        "side = None if k is None else _side(yv[k])",
        "side of an event read at an index of the run, not of the event",
    ),
    Mutation(
        "tip-rotate-pitch",
        TIP,
        "f_z = -s_th * ax + c_th * f_z1",
        "f_z = s_th * ax + c_th * f_z1",
        "pitch rotation of the accelerometer of the wrong sign",
    ),
    # --- roll ---------------------------------------------------------------------------
    Mutation(
        "roll-max-abs",
        ROLL,
        '"max_abs": float(np.max(np.abs(ev)))',
        '"max_abs": float(np.max(ev))',
        "max abs(e) taken as max e",
    ),
    Mutation(
        "roll-error-sign",
        ROLL,
        "np.asarray(roll_ref, dtype=float) - np.asarray(roll, dtype=float)",
        "np.asarray(roll, dtype=float) - np.asarray(roll_ref, dtype=float)",
        "error of the opposite sign",
    ),
    Mutation(
        "roll-lag-order",
        ROLL,
        "lag_by_xcorr(t, ref, roll, th.roll_lag_max_s)",
        "lag_by_xcorr(t, roll, ref, th.roll_lag_max_s)",
        "lag of the reference behind the roll (sign of the lag)",
    ),
    Mutation(
        "roll-lag-corr",
        ROLL,
        "else lag.correlation,",
        "else lag.correlation**2,",
        "correlation reported squared",
    ),
    Mutation(
        "roll-band-abs",
        ROLL,
        "time_where(t, np.abs(e) <= band, valid)",
        "time_where(t, e <= band, valid)",
        "share in band without the magnitude",
    ),
    Mutation(
        "roll-exit",
        ROLL,
        "ROLL_EXIT_FRACTION * band,\n        min_duration_s",
        "band,\n        min_duration_s",
        "no hysteresis on the roll_error events",
    ),
    Mutation(
        "roll-peak",
        ROLL,
        'peak="absmax", detail=detail',
        'peak="max", detail=detail',
        "event peak the largest signed error",
    ),
    Mutation(
        "roll-centring",
        ROLL,
        "-np.arctan(f_y / f_z), np.nan)",
        "np.arctan(f_y / f_z), np.nan)",
        "ZMP-centring lean of the wrong sign",
    ),
    # --- kinematics ---------------------------------------------------------------------
    Mutation(
        "kin-contacts",
        KIN,
        "return v - half, v + half",
        "return v + half, v - half",
        "left and right contact speeds swapped",
    ),
    Mutation(
        "kin-wheel-yaw",
        KIN,
        "wheel_radius * (w_r - w_l) / track_width",
        "wheel_radius * (w_l - w_r) / track_width",
        "yaw rate from the wheels of the wrong sign",
    ),
    Mutation(
        "kin-rim-pitch",
        KIN,
        "w = w + np.asarray(pitch_rate, dtype=float)",
        "w = w - np.asarray(pitch_rate, dtype=float)",
        "pitch rate subtracted from a leg-referenced encoder",
    ),
    Mutation(
        "kin-roll-arm",
        KIN,
        "* (r + L) * np.sin(",
        "* L * np.sin(",
        "roll lever arm without the wheel radius",
    ),
    Mutation(
        "kin-central",
        KIN,
        "(h_fwd * bwd + h_bwd * fwd)",
        "(h_bwd * bwd + h_fwd * fwd)",
        "uneven-grid central difference with swapped weights",
    ),
    Mutation(
        "kin-weight-gaps",
        KIN,
        "h = np.where(gaps, 0.0, np.diff(t))",
        "h = np.diff(t)",
        "time weights bridge data gaps",
    ),
    Mutation(
        "kin-share-valid",
        KIN,
        "w = w * np.asarray(valid, dtype=bool)",
        "w = w * 1.0",
        "time share ignores the valid mask",
    ),
    Mutation(
        "kin-pitch-arm",
        KIN,
        "derivative(t, L * np.sin(np.asarray(pitch, dtype=float)))",
        "derivative(t, L * np.cos(np.asarray(pitch, dtype=float)))",
        "pitch lever arm with cos instead of sin",
    ),
)


@dataclass
class Outcome:
    mutation: Mutation
    caught: bool
    by: str
    seconds: float


def _copy_tree(dest: Path) -> None:
    """Copy what the detector tests need into ``dest`` (no caches, no artefacts)."""
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc", ".pytest_cache", "test-artifacts")
    for name in ("analysis", "tests"):
        shutil.copytree(ROOT / name, dest / name, ignore=ignore)
    shutil.copy2(ROOT / "pyproject.toml", dest / "pyproject.toml")


def _pytest(work: Path, tests: tuple[str, ...]) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, PYTHONPATH=str(work), PYTHONDONTWRITEBYTECODE="1")
    cmd = [
        sys.executable,
        "-m",
        "pytest",
        "-x",
        "-q",
        "-p",
        "no:cacheprovider",
        "-m",
        "not browser",
    ]
    return subprocess.run(
        [*cmd, *tests], cwd=work, env=env, capture_output=True, text=True, check=False
    )


def _first_failure(out: str) -> str:
    """Name of the first failed test in pytest's short summary."""
    for line in out.splitlines():
        if line.startswith(("FAILED ", "ERROR ")):
            name = line.split()[1]
            return name.split("::", 1)[-1].split(" ")[0]
    return "(tests failed, see pytest output)"


def run(selected: list[Mutation], verbose: bool) -> tuple[list[Outcome], list[str]]:
    """Apply each mutation in a scratch copy, run its module's tests, restore."""
    problems: list[str] = []
    outcomes: list[Outcome] = []
    with tempfile.TemporaryDirectory(prefix="outrigger-mutate-") as tmp:
        work = Path(tmp)
        _copy_tree(work)
        for module in sorted({m.module for m in selected}):
            base = _pytest(work, MODULES[module])
            if base.returncode != 0:
                problems.append(f"{module}: its tests fail without any mutation:\n{base.stdout}")
        if problems:
            return outcomes, problems
        for m in selected:
            path = work / m.module
            original = path.read_text(encoding="utf-8")
            count = original.count(m.old)
            if count != 1:
                problems.append(
                    f"{m.id}: the text to mutate occurs {count} times in {m.module} (needs "
                    f"exactly 1); update MUTATIONS in benchmarks/mutate.py to today's code."
                )
                continue
            path.write_text(original.replace(m.old, m.new), encoding="utf-8")
            start = time.perf_counter()
            try:
                res = _pytest(work, MODULES[m.module])
            finally:
                path.write_text(original, encoding="utf-8")
            caught = res.returncode != 0
            by = _first_failure(res.stdout) if caught else ""
            outcomes.append(Outcome(m, caught, by, time.perf_counter() - start))
            if verbose:
                print(f"{m.id:20s} {'caught' if caught else 'SURVIVED'} {by}", file=sys.stderr)
    return outcomes, problems


def table(outcomes: list[Outcome]) -> str:
    """Markdown survival table."""
    rows = [
        "| mutation | module | change | result | first failing test |",
        "| --- | --- | --- | --- | --- |",
    ]
    for o in outcomes:
        module = Path(o.mutation.module).stem
        result = "caught" if o.caught else "**survived**"
        what = o.mutation.what.replace("|", "\\|")
        rows.append(f"| `{o.mutation.id}` | {module} | {what} | {result} | {o.by} |")
    return "\n".join(rows)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", nargs="+", metavar="ID", help="run only these mutations")
    parser.add_argument("--list", action="store_true", help="list the mutations and exit")
    parser.add_argument(
        "-v", "--verbose", action="store_true", help="print each result as it comes"
    )
    args = parser.parse_args()
    if args.list:
        for m in MUTATIONS:
            print(f"{m.id:20s} {m.module:32s} {m.what}")
        return 0
    selected = list(MUTATIONS)
    if args.only:
        unknown = sorted(set(args.only) - {m.id for m in MUTATIONS})
        if unknown:
            print(f"Unknown mutation id(s): {', '.join(unknown)}; see --list.", file=sys.stderr)
            return 2
        selected = [m for m in MUTATIONS if m.id in set(args.only)]
    start = time.perf_counter()
    outcomes, problems = run(selected, args.verbose)
    for p in problems:
        print(p, file=sys.stderr)
    if outcomes:
        print(table(outcomes))
        caught = sum(o.caught for o in outcomes)
        print(
            f"\n{caught} of {len(outcomes)} mutations caught, {len(outcomes) - caught} survived "
            f"({time.perf_counter() - start:.0f} s)."
        )
    if problems:
        return 2
    return 0 if all(o.caught for o in outcomes) else 1


if __name__ == "__main__":
    sys.exit(main())
