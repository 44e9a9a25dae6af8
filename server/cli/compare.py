"""``outrigger compare``: compare controller versions on one course, gate a release.

    outrigger compare A B [--json] [--gate GATE.toml] [--report OUT.html] [--data DIR]

``A`` and ``B`` are run ids; give several runs of a version as a comma-separated
list (``A1,A2 B1,B2``) to compare the sets. Exit codes: 0 done (and the gate,
if any, passed), 1 a gate rule is broken, 2 bad input.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import tomllib
from pathlib import Path
from typing import Any

from analysis.archive.courses import (
    course_marks,
    course_start_line,
    delete_course_marks,
    delete_start_line,
    save_course_marks,
    save_start_line,
)
from analysis.archive.objstore import open_archive
from analysis.compare.compare import Comparison, KpiRow, compare_archived
from analysis.compare.gate import GateCheck, check_gate, gate_from_mapping
from analysis.compare.segments import BLOCK_M
from analysis.compare.table import verdict_text
from analysis.compare.view import overlay
from analysis.display import display_kpi_row, export_value, people
from analysis.errors import CompareError
from server.cli.laps_text import compare_lap_lines
from server.cli.main import add_data_option, data_dir
from server.report import build_report


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the ``compare`` and ``course-marks`` commands."""
    p = sub.add_parser(
        "compare",
        help="compare version A with version B on one course (KPIs, intervals, gate)",
        description=(
            "Compare runs of controller version A with runs of version B driven on the same "
            "course: KPIs overall and per segment, B - A with a 95%% interval and a verdict "
            "corrected for the many cells (false discovery rate). With two or more runs per "
            "version the runs are the replicates; with one, the interval shows the spread "
            "within that run only. Give several runs of a version as A1,A2,A3."
        ),
    )
    p.add_argument("a", metavar="A", help="run id of version A, or A1,A2,... for a set")
    p.add_argument("b", metavar="B", help="run id of version B, or B1,B2,... for a set")
    p.add_argument("--json", action="store_true", help="print the comparison as JSON")
    p.add_argument("--gate", metavar="GATE.toml", help="gate file: exit 1 if B breaks a rule")
    p.add_argument("--report", metavar="OUT.html", help="write a self-contained HTML report")
    p.add_argument(
        "--marks",
        metavar="M1,M2,...",
        help=(
            "segment boundaries in metres along A's course (default: the marks stored for "
            "the course with `outrigger course-marks`, else from the curvature)"
        ),
    )
    p.add_argument(
        "--block-m",
        type=float,
        default=BLOCK_M,
        help=f"bootstrap block length in metres ({BLOCK_M})",
    )
    p.add_argument(
        "--whole-runs",
        action="store_true",
        help="compare multi-lap runs whole instead of lap by lap",
    )
    p.add_argument("--n-boot", type=int, default=2000, help="bootstrap replicates (2000)")
    p.add_argument("--seed", type=int, default=0, help="random seed of the bootstrap (0)")
    add_data_option(p)
    p.set_defaults(func=run_compare)

    m = sub.add_parser(
        "course-marks",
        help="store, show or clear the distance marks that split a course into segments",
        description=(
            "Distance marks (metres from the course start) stored for a course are used by "
            "every comparison of runs on it. Without MARKS, show the stored ones."
        ),
    )
    m.add_argument("course", metavar="COURSE", help="course name as given at ingest")
    m.add_argument("marks", metavar="MARKS", nargs="?", help="comma-separated metres: 12.5,40,75")
    m.add_argument("--clear", action="store_true", help="forget the course's marks")
    add_data_option(m)
    m.set_defaults(func=run_course_marks)

    s = sub.add_parser(
        "start-line",
        help="store, show or clear the start line of a loop course (where each lap starts)",
        description=(
            "The start line of a closed loop, as metres of odometry from where the course's "
            "runs start. Re-analyse the runs (`outrigger analyse-all --course COURSE`) to find "
            "their laps from it; comparisons of the course use it too. Without METRES, show it."
        ),
    )
    s.add_argument("course", metavar="COURSE", help="course name as given at ingest")
    s.add_argument("metres", metavar="METRES", nargs="?", type=float, help="e.g. 12.5")
    s.add_argument("--clear", action="store_true", help="forget the course's start line")
    add_data_option(s)
    s.set_defaults(func=run_start_line)


def run_course_marks(args: argparse.Namespace) -> int:
    """Store, show or clear a course's distance marks."""
    root = open_archive(data_dir(args)).root
    if args.clear:
        had = delete_course_marks(root, args.course)
        print(f"{args.course}: marks cleared" if had else f"{args.course}: no marks were stored")
        return 0
    if args.marks is not None:
        path = save_course_marks(root, args.course, _marks(args.marks) or [])
        print(f"{args.course}: marks stored in {path}")
        return 0
    marks = course_marks(root, args.course)
    if marks is None:
        print(f"{args.course}: no marks stored; comparisons split it at curvature changes")
    else:
        print(f"{args.course}: marks at " + ", ".join(f"{x:g} m" for x in marks))
    return 0


def run_start_line(args: argparse.Namespace) -> int:
    """Store, show or clear a course's start line."""
    root = open_archive(data_dir(args)).root
    if args.clear:
        had = delete_start_line(root, args.course)
        print(
            f"{args.course}: start line cleared"
            if had
            else f"{args.course}: no start line was stored"
        )
        return 0
    if args.metres is not None:
        path = save_start_line(root, args.course, args.metres)
        print(f"{args.course}: start line stored in {path}; re-analyse the course's runs to use it")
        return 0
    start = course_start_line(root, args.course)
    if start is None:
        print(f"{args.course}: no start line stored; laps start where each run starts")
    else:
        print(f"{args.course}: start line {start:g} m from a run's start")
    return 0


def _ids(text: str, which: str) -> list[str]:
    ids = [x.strip() for x in text.split(",") if x.strip()]
    if not ids:
        raise CompareError(f"No run id given for version {which} (found {text!r}).")
    return ids


def _marks(text: str | None) -> list[float] | None:
    if text is None:
        return None
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError as exc:
        raise CompareError(
            f"--marks must be comma-separated metres such as 12.5,40,75; found {text!r}."
        ) from exc


def read_gate_file(path: str) -> dict[str, Any]:
    """Parse a gate TOML file; a clear :class:`CompareError` if missing or malformed."""
    p = Path(path)
    if not p.is_file():
        raise CompareError(f"The gate file {path} does not exist. Give the path of a TOML file.")
    try:
        with p.open("rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise CompareError(f"The gate file {path} is not valid TOML: {exc}.") from exc
    except UnicodeDecodeError as exc:
        raise CompareError(f"The gate file {path} is not UTF-8 text.") from exc


def write_text_atomic(path: str, text: str) -> None:
    """Write a file through a temporary file in the same folder, so nothing is half-written.

    The file gets the permissions of any new file (0644 under the usual umask 022),
    not the owner-only 0600 of the temporary file.
    """
    target = Path(path)
    if not target.parent.is_dir():
        raise CompareError(f"Cannot write {path}: folder {target.parent} does not exist.")
    fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=".report-", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _table(rows: list[KpiRow]) -> str:
    """KPI rows as text, in the units a person reads (deg, %), 3 significant digits."""
    lines = [
        f"{'KPI':38} {'A':>10} {'B':>10} {'B - A':>10}  {'95% interval':>23} {'adj. p':>7}  verdict"
    ]
    for row in rows:
        r = display_kpi_row(row.to_dict())
        low, high = r["low"], r["high"]
        interval = (
            f"{people(low)} .. {people(high)}" if low is not None and high is not None else "–"
        )
        q = "–" if row.q != row.q else f"{row.q:.2g}"
        lines.append(
            f"{r['key'] + ' [' + r['unit'] + ']':38} {people(r['a']):>10} {people(r['b']):>10} "
            f"{people(r['diff']):>10}  {interval:>23} {q:>7}  {verdict_text(row)}"
        )
    return "\n".join(lines)


def _print_text(comp: Comparison, checks: list[GateCheck] | None) -> None:
    a = ", ".join(f"{r['name']} ({r['run']})" for r in comp.runs_a)
    b = ", ".join(f"{r['name']} ({r['run']})" for r in comp.runs_b)
    print(f"A: {a}\nB: {b}")
    for al in comp.alignments:
        print(f"Alignment of {al['run']}: {al['reason']}")
    if comp.refusal:
        print(f"Per-segment comparison refused: {comp.refusal}")
    for item in comp.not_run:
        print(
            f"Not run: detector {item['detector']} on run {item['run']} ({item['reason']}); "
            f"its KPIs are left out, not counted as 0."
        )
    print(f"Verdicts rest on: {comp.settings.get('basis', '')}")
    print()
    print(_table(comp.kpis))
    if comp.same_course:
        for seg in comp.segments:
            print(f"\nSegment {seg.name} ({seg.kind}, {seg.start_m:.1f}-{seg.end_m:.1f} m)")
            print(_table(comp.segment_kpis[seg.name]))
    if comp.laps:
        print()
        print("\n".join(compare_lap_lines(comp.laps)))
    for note in comp.notes:
        print(f"\nNote: {note}")
    if checks is not None:
        print("\nGate:")
        for c in checks:
            print(f"  {'BROKEN' if c.broken else 'ok    '} {c.message}")


def run_compare(args: argparse.Namespace) -> int:
    """Run ``outrigger compare``; return the exit code."""
    ids_a, ids_b = _ids(args.a, "A"), _ids(args.b, "B")
    gate = gate_from_mapping(read_gate_file(args.gate), where=args.gate) if args.gate else None
    if args.n_boot < 100:
        raise CompareError(
            f"--n-boot must be at least 100 for a 95% interval, found {args.n_boot}."
        )
    archive = open_archive(data_dir(args))
    comp, runs_a, runs_b = compare_archived(
        archive, ids_a, ids_b, marks_m=_marks(args.marks), block_m=args.block_m,
        n_boot=args.n_boot, seed=args.seed, laps=not args.whole_runs,
    )  # fmt: skip
    checks = check_gate(comp, gate) if gate else None
    if args.report:
        write_text_atomic(args.report, build_report(comp, overlay(comp, runs_a, runs_b)))
    if args.json:
        out = comp.to_dict()
        if checks is not None:
            out["gate"] = {
                "passed": not any(c.broken for c in checks),
                "checks": [c.to_dict() for c in checks],
            }
        json.dump(export_value(out), sys.stdout, indent=2, allow_nan=False)
        print()
    else:
        _print_text(comp, checks)
    if checks is not None and any(c.broken for c in checks):
        broken = [c for c in checks if c.broken]
        print(
            f"outrigger: gate failed: {len(broken)} rule(s) broken: "
            + "; ".join(c.message for c in broken),
            file=sys.stderr,
        )
        return 1
    return 0
