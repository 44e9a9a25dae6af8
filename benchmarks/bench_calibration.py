"""Benchmark: are the compare verdicts calibrated on runs of one controller, and do they find a real change?

The demo generator drives the invented robot over the Gullhaven loop with one
controller (lean-ctl 1.4) on ``N`` different days (``analysis.demo.days``:
target speeds within +-5 %, the step, the wet patch and the shove each moved by
up to +-1 m, own sensor noise). Nothing about the controller differs, so every
"better" or "worse" cell of a comparison between these runs is a false call.

* **False calls**: sets of ``k`` runs against ``k`` other runs (k = 1, 2, 3, and 5
  with ``--full``), for each the share of tested cells (overall and per segment)
  called better or worse, after the Benjamini-Hochberg correction and before it,
  and the share of comparisons with any false call at all (under no real
  difference this is the false discovery rate the correction holds at 5 %).
* **Power**: ``k`` runs of the same controller with a roll loop ``s`` slower
  (natural frequency -s) against ``k`` runs of the original, for several draws:
  the share of draws where the overall roll error RMS is called worse, and the
  mean size of that change.

Prints one table per part. The short default takes about two minutes on a
shared 2-core machine; ``--full`` drives more runs and draws.

Run: ``.venv/bin/python benchmarks/bench_calibration.py [--full]``.
"""

from __future__ import annotations

import argparse
import itertools
import time
from collections.abc import Sequence

import numpy as np

from analysis.compare.bootstrap import BETTER, WORSE
from analysis.compare.compare import Comparison, compare_runs
from analysis.compare.course_kpis import RunData
from analysis.demo.days import day_runs, slower_roll_loop

BASE = "lean-ctl 1.4"


def _cells(comp: Comparison) -> list:
    return [r for r in comp.kpis + [x for v in comp.segment_kpis.values() for x in v] if r.tested]


def _splits(
    n: int, k: int, limit: int, rng: np.random.Generator
) -> list[tuple[list[int], list[int]]]:
    """Up to ``limit`` pairs of disjoint sets of ``k`` runs out of ``n``, drawn at random."""
    out = []
    for a in itertools.combinations(range(n), k):
        rest = [i for i in range(n) if i not in a]
        for b in itertools.combinations(rest, k):
            if a < b:
                out.append((list(a), list(b)))
    if len(out) > limit:
        pick = rng.choice(len(out), size=limit, replace=False)
        out = [out[i] for i in sorted(pick)]
    return out


def false_calls(runs: Sequence[RunData], k: int, limit: int, n_boot: int, seed: int) -> dict:
    """False-call figures of ``k`` vs ``k`` comparisons among same-controller runs."""
    rng = np.random.default_rng(seed)
    splits = _splits(len(runs), k, limit, rng)
    called = raw = tested = any_call = overall_called = overall_tested = 0
    t0 = time.perf_counter()
    for a, b in splits:
        comp = compare_runs([runs[i] for i in a], [runs[i] for i in b], n_boot=n_boot)
        cells = _cells(comp)
        overall = [r for r in comp.kpis if r.tested]
        overall_called += sum(r.verdict in (BETTER, WORSE) for r in overall)
        overall_tested += len(overall)
        n_called = sum(r.verdict in (BETTER, WORSE) for r in cells)
        called += n_called
        raw += sum(r.raw_verdict in (BETTER, WORSE) for r in cells)
        tested += len(cells)
        any_call += n_called > 0
    return {
        "k": k,
        "comparisons": len(splits),
        "tested": tested,
        "called": called,
        "raw": raw,
        "any": any_call,
        "overall_called": overall_called,
        "overall_tested": overall_tested,
        "seconds": time.perf_counter() - t0,
    }


def power(
    base: Sequence[RunData], k: int, share: float, draws: int, n_boot: int, seed: int
) -> dict:
    """Share of draws where a roll loop ``share`` slower is called worse on roll error RMS."""
    rng = np.random.default_rng(seed)
    found, sizes = 0, []
    for d in range(draws):
        changed = day_runs(slower_roll_loop(share), k, seed=10_000 + 100 * d + int(1000 * share))
        pick = rng.choice(len(base), size=k, replace=False)
        comp = compare_runs([base[i] for i in pick], changed, n_boot=n_boot)
        row = comp.kpi("roll_error_rms")
        found += row.verdict == WORSE
        sizes.append(row.diff_pct)
    return {
        "k": k,
        "share": share,
        "draws": draws,
        "found": found,
        "size_pct": float(np.mean(sizes)),
    }


def main() -> None:
    """Run the benchmark and print its tables."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--full", action="store_true", help="more runs, splits and draws")
    args = ap.parse_args()
    n_runs = 16 if args.full else 8
    limit = 40 if args.full else 12
    draws = 10 if args.full else 4
    ks = (1, 2, 3, 5) if args.full else (1, 2, 3)
    n_boot = 2000  # the default of `outrigger compare`: the figures are those users get
    t0 = time.perf_counter()
    runs = day_runs(BASE, n_runs, seed=100)
    print(f"{n_runs} runs of {BASE} on different days simulated and analysed "
          f"in {time.perf_counter() - t0:.1f} s")  # fmt: skip
    print("\nFalse calls among runs of one controller (every call is false)")
    print(f"{'runs/version':>12} {'comparisons':>11} {'tested cells':>12} {'called':>7} "
          f"{'share':>7} {'raw share':>9} {'any call':>9} {'overall rows':>13} {'time':>7}")  # fmt: skip
    for k in ks:
        if 2 * k > n_runs:
            continue
        f = false_calls(runs, k, limit, n_boot, seed=k)
        print(f"{f['k']:>12} {f['comparisons']:>11} {f['tested']:>12} {f['called']:>7} "
              f"{100 * f['called'] / f['tested']:>6.2f}% {100 * f['raw'] / f['tested']:>8.2f}% "
              f"{f['any']:>4} of {f['comparisons']:<3} "
              f"{f['overall_called']:>5} of {f['overall_tested']:<5} {f['seconds']:>6.1f}s")  # fmt: skip
    print("\nPower: roll loop slower by s (natural frequency), roll error RMS called worse")
    print(f"{'runs/version':>12} {'s':>5} {'RMS change':>11} {'found':>10}")
    for k in (2, 3) if not args.full else (2, 3, 5):
        for share in (0.1, 0.2, 0.3):
            p = power(runs, k, share, draws, n_boot, seed=int(100 * share) + k)
            print(f"{p['k']:>12} {100 * p['share']:>4.0f}% {p['size_pct']:>+10.0f}% "
                  f"{p['found']:>3} of {p['draws']:<3}")  # fmt: skip
    print(f"\nTotal {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
