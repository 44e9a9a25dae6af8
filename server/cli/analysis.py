"""``outrigger analyse``, ``analyse-all``, ``fleet`` and ``check``: run the detectors, query, gate."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from analysis.archive.fleet import read_fleet
from analysis.archive.objstore import open_archive
from analysis.catalogue import EVENT_KINDS
from analysis.detect.batch import BatchOutcome, reanalyse
from analysis.detect.limits import evaluate_limits, load_limits
from analysis.detect.pipeline import analyse_run, load_analysis, sync_fleet
from analysis.display import export_value
from analysis.errors import ThresholdsError
from analysis.profile import load_thresholds
from server.cli.main import add_data_option, data_dir


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the ``analyse`` and ``check`` commands."""
    p = sub.add_parser(
        "analyse",
        help="run every detector on a stored run and store the results",
        description="Run every detector on a stored run; replaces its stored results.",
    )
    p.add_argument("run", metavar="RUN", help="run id (see `outrigger runs`)")
    p.add_argument("--thresholds", metavar="FILE", help="TOML file overriding profile thresholds")
    p.add_argument("--json", action="store_true", help="print the full result as JSON")
    add_data_option(p)
    p.set_defaults(func=_analyse)

    a = sub.add_parser(
        "analyse-all",
        help="re-analyse every stored run (e.g. after a detector change)",
        description=(
            "Re-analyse every stored run matching the filters: here, one after another, or "
            "on a Dask cluster with --dask. Exit 1 if any run failed."
        ),
    )
    a.add_argument("--course", help="only runs of this course")
    a.add_argument("--controller", help="only runs of this controller version")
    a.add_argument(
        "--pending",
        action="store_true",
        help="only runs never analysed (e.g. whose ingest was interrupted before analysis)",
    )
    a.add_argument(
        "--dask",
        metavar="ADDRESS",
        help="scheduler address of a Dask cluster whose workers see this archive (optional)",
    )
    add_data_option(a)
    a.set_defaults(func=_analyse_all)

    f = sub.add_parser(
        "fleet",
        help="events or KPIs of every analysed run, as one table",
        description=(
            "Print the fleet table of events or KPIs across all analysed runs "
            "(the partitioned Parquet dataset under <archive>/fleet/)."
        ),
    )
    f.add_argument("table", choices=["events", "kpis"], help="which table")
    f.add_argument("--kind", help="events: only this event kind")
    f.add_argument("--course", help="only runs of this course")
    f.add_argument("--controller", help="only runs of this controller version")
    f.add_argument("--csv", action="store_true", help="print CSV instead of an aligned table")
    add_data_option(f)
    f.set_defaults(func=_fleet)

    c = sub.add_parser(
        "check",
        help="check a run's results against limits; exit 1 if any is broken",
        description=(
            "Check a run's stored analysis against a limits file, for build pipelines. "
            "Exit 0 when every limit holds, 1 when any is broken (each is named), 2 on bad input. "
            "The run is analysed first if it never was."
        ),
    )
    c.add_argument("run", metavar="RUN", help="run id")
    c.add_argument("--limits", metavar="FILE", required=True, help="limits TOML file")
    c.add_argument("--json", action="store_true", help="print the verdict as JSON")
    add_data_option(c)
    c.set_defaults(func=_check)


def _print_summary(result: dict[str, Any]) -> None:
    counts = result.get("event_counts", {})
    print(f"run {result['run']}  (analysis {result.get('analysis_version')})")
    listed = ", ".join(f"{k} {v}" for k, v in counts.items() if v) or "none"
    print(f"  events: {listed}")
    for item in result.get("skipped", []):
        print(f"  skipped {item['detector']}: {item['reason']}")
    for detector, lines in result.get("notes", {}).items():
        for line in lines:
            print(f"  note ({detector}): {line}")


def _analyse(args: argparse.Namespace) -> int:
    archive = open_archive(data_dir(args))
    archive.get_meta(args.run)  # RunNotFoundError before any work
    profile = archive.load_profile(args.run)
    thresholds = (
        load_thresholds(args.thresholds, base=profile.thresholds) if args.thresholds else None
    )
    result = analyse_run(archive, args.run, thresholds).to_json(args.run)
    if args.json:
        json.dump(export_value(result), sys.stdout, indent=2)
        print()
    else:
        _print_summary(result)
    return 0


def _analyse_all(args: argparse.Namespace) -> int:
    archive = open_archive(data_dir(args))
    runs = archive.list_runs(course=args.course, controller=args.controller)
    if args.pending:
        runs = [r for r in runs if not r.get("analysed")]
    if not runs:
        print(
            "no stored run is waiting for analysis"
            if args.pending
            else "no stored run matches; nothing to analyse"
        )
        return 0
    client = None
    if args.dask:
        try:
            from distributed import Client
        except ImportError as exc:
            raise ThresholdsError(
                "--dask needs the dask.distributed package: pip install 'dask[distributed]'."
            ) from exc
        client = Client(args.dask)
    total = len(runs)
    count = iter(range(1, total + 1))

    def show(o: BatchOutcome) -> None:
        what = f"{o.events} events" if o.error is None else f"FAILED: {o.error}"
        print(f"[{next(count)}/{total}] {o.run_id}: {what}")

    try:
        outcomes = reanalyse(archive.root, [r["run_id"] for r in runs], client, show)
    finally:
        if client is not None:
            client.close()
    return 1 if any(o.error for o in outcomes) else 0


def _fleet(args: argparse.Namespace) -> int:
    archive = open_archive(data_dir(args))
    repaired = sync_fleet(archive)  # rows an interrupted analysis left stale
    if repaired:
        print(f"fleet rows brought up to date for {len(repaired)} run(s)", file=sys.stderr)
    table = read_fleet(archive.root, args.table)
    if table.empty:
        print("no analysed run in this archive yet (run `outrigger analyse RUN`)")
        return 0
    if args.kind:
        if args.table != "events":
            raise ThresholdsError("--kind filters the events table; drop it for kpis.")
        if args.kind not in EVENT_KINDS:
            raise ThresholdsError(
                f"Unknown event kind {args.kind!r}; use one of: {', '.join(EVENT_KINDS)}."
            )
        table = table[table["kind"] == args.kind]
    for col in ("course", "controller"):
        wanted = getattr(args, col)
        if wanted:
            table = table[table[col] == wanted]
    if args.csv:
        table.to_csv(sys.stdout, index=False, float_format="%.6g")
    else:
        print(table.to_string(index=False, max_colwidth=40))
    return 0


def _check(args: argparse.Namespace) -> int:
    limits = load_limits(args.limits)
    archive = open_archive(data_dir(args))
    archive.get_meta(args.run)
    summary = load_analysis(archive, args.run)
    if summary is None:
        summary = analyse_run(archive, args.run).to_json(args.run)
    wheels = tuple(a.name for a in archive.load_profile(args.run).wheels().values())
    checks = evaluate_limits(summary, limits, wheels)
    broken = [c.message for c in checks if not c.held]
    held = [c.message for c in checks if c.held]
    if args.json:
        json.dump(
            {"run": args.run, "passed": not broken, "broken": broken, "held": held,
             "checks": [c.to_dict() for c in checks]},
            sys.stdout, indent=2,
        )  # fmt: skip
        print()
        return 1 if broken else 0
    if broken:
        print(f"run {args.run}: {len(broken)} limit(s) broken, {len(held)} held")
    else:
        print(f"run {args.run}: every limit in {args.limits} holds ({len(held)} checked)")
    for c in checks:
        print(f"  {'held  ' if c.held else 'BROKEN'} {c.message}")
    return 1 if broken else 0
