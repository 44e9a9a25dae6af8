"""Benchmark: detection quality of every detector on noisy demo logs.

Simulates demo runs of the invented robot with the default sensor model
(``analysis.demo.sensors``: attitude-filter noise and drift, gyro noise and bias,
vibration, estimator lag, encoder quantisation, stamp jitter, dropped rows,
measured torque), analyses each with the README's default thresholds, and scores
the events against the generator's truth (``analysis.demo.truth``, from the true
states, sharing no code with the detectors). Prints, as Markdown tables:

* per event kind: planted, detected, precision, recall (target >= 0.95 each);
* per kind of noise-only stretch (standing still, constant-speed straights, a
  steady curve): its total time and the events found in it (target 0);
* the misses and false alarms, if any.

Scoring rules are in ``analysis/demo/quality.py``. By default the 10 runs of the
test suite (200 Hz); ``--full`` runs 5 seeds of every case per controller
(34 runs); ``--rate 400`` logs the state at 400 Hz instead of 200 Hz.

Run: ``.venv/bin/python benchmarks/bench_detection.py [--full] [--rate HZ]``.
"""

from __future__ import annotations

import argparse
import time

from analysis.demo import quality


def _fmt(x: float | None) -> str:
    return "–" if x is None else f"{x:.2f}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--full", action="store_true", help="5 seeds of every case (34 runs)")
    parser.add_argument("--seeds", type=int, default=5, help="seeds per case with --full")
    parser.add_argument("--rate", type=float, default=200.0, help="state log rate [Hz]")
    args = parser.parse_args()
    cases = (
        quality.full_cases(args.seeds, args.rate) if args.full else quality.short_cases(args.rate)
    )
    t0 = time.perf_counter()
    results = [quality.run_case(c) for c in cases]
    elapsed = time.perf_counter() - t0
    minutes = sum(float(r.run.frame["t"].iloc[-1]) for r in results) / 60.0
    print(
        f"{len(results)} runs, {minutes:.1f} min of logs at {args.rate:g} Hz, "
        f"simulated and analysed in {elapsed:.0f} s\n"
    )
    table = quality.score(results)
    print("| event kind | planted | detected | precision | recall |")
    print("| --- | --- | --- | --- | --- |")
    for kind, s in table.items():
        print(f"| `{kind}` | {s.planted} | {s.detected} | {_fmt(s.precision)} | {_fmt(s.recall)} |")
    seconds = quality.noise_only_seconds(results)
    found = quality.noise_only_events(results)
    print("\n| noise-only stretch | time | events |")
    print("| --- | --- | --- |")
    for label, secs in seconds.items():
        print(f"| {label} | {secs / 60.0:.1f} min | {len(found[label])} |")
    problems = [(k, "miss", m) for k, s in table.items() for m in s.misses]
    problems += [(k, "false alarm", m) for k, s in table.items() for m in s.false_alarms]
    problems += [("noise only", label, m) for label, items in found.items() for m in items]
    if problems:
        print("\nMisses and false alarms:")
        for kind, what, where in problems:
            print(f"- {kind} {what}: {where}")


if __name__ == "__main__":
    main()
