"""Archive commands: ``ingest``, ``runs``, ``show``, ``delete``, ``map-template``.

Each command calls one ``analysis`` function and prints its result, as text
for people or as JSON (``--json``) for scripts.
"""

from __future__ import annotations

import argparse
import importlib
import json
import sys
import time
from datetime import datetime
from pathlib import Path
from typing import Any

import pyarrow.parquet as pq

from analysis.archive.objstore import open_archive
from analysis.errors import IngestError, OutriggerError
from analysis.ingest.map_template import FileHeader, template
from analysis.ingest.read import inspect_file
from analysis.ingest.stream import DEFAULT_MAX_TEXT_BYTES, ingest_files
from analysis.profile import load_profile
from server.cli.laps_text import lap_lines
from server.cli.main import add_data_option, data_dir


def register(subparsers: Any) -> None:
    """Add the archive commands to the ``outrigger`` parser."""
    p = subparsers.add_parser(
        "ingest",
        help="ingest the log files of one run into the archive",
        description="Ingest the log files of one run (same clock) into the archive.",
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="CSV (.gz), Parquet or JSON Lines log")
    p.add_argument("--map", required=True, metavar="MAP.toml", help="channel map")
    p.add_argument("--profile", required=True, metavar="ROBOT.toml", help="robot profile")
    p.add_argument("--name", help="run name (default: the common start of the file names)")
    p.add_argument("--course", help="course driven, e.g. gullhaven-loop")
    p.add_argument("--controller", help="controller version")
    p.add_argument("--tag", action="append", default=[], help="tag (repeatable)")
    p.add_argument("--notes", default="", help="free text")
    p.add_argument("--date", help="ISO 8601 start, for logs timed from boot")
    p.add_argument("--no-analyse", action="store_true", help="store only; do not analyse")
    p.add_argument(
        "--replace",
        metavar="RUN",
        help="replace stored run RUN (e.g. after fixing its channel map): RUN is deleted "
        "once the new run is staged",
    )
    p.add_argument(
        "--max-text-mb",
        type=int,
        default=DEFAULT_MAX_TEXT_BYTES >> 20,
        metavar="N",
        help="most log text read once decompressed, all files together, in MiB "
        f"(default {DEFAULT_MAX_TEXT_BYTES >> 20})",
    )
    p.add_argument("--json", action="store_true", help="print the outcome as JSON")
    p.add_argument("--quiet", action="store_true", help="print only the run id")
    add_data_option(p)
    p.set_defaults(func=cmd_ingest)

    p = subparsers.add_parser("runs", help="list the runs in the archive")
    p.add_argument("--course")
    p.add_argument("--controller")
    p.add_argument("--tag")
    p.add_argument("--json", action="store_true", help="print JSON")
    add_data_option(p)
    p.set_defaults(func=cmd_runs)

    p = subparsers.add_parser("show", help="print a run's metadata and ingest report")
    p.add_argument("run", metavar="RUN", help="run id")
    p.add_argument("--json", action="store_true", help="print meta.json as stored")
    add_data_option(p)
    p.set_defaults(func=cmd_show)

    p = subparsers.add_parser(
        "delete",
        help="delete a stored run and its files (asks for the id again)",
        description="Delete a stored run, its files and results. This cannot be undone: "
        "type the run id again when asked, or give --yes.",
    )
    p.add_argument("run", metavar="RUN", help="run id")
    p.add_argument("--yes", action="store_true", help="do not ask; delete at once")
    add_data_option(p)
    p.set_defaults(func=cmd_delete)

    p = subparsers.add_parser(
        "map-template", help="write a starter channel map from the files' headers"
    )
    p.add_argument("files", nargs="+", metavar="FILE")
    p.add_argument("--out", metavar="MAP.toml", help="write here instead of stdout")
    p.add_argument("--profile", metavar="ROBOT.toml", help="use its actuator names")
    p.set_defaults(func=cmd_map_template)


class _Bar:
    """Plain-text progress bar on stderr, drawn only when stderr is a terminal."""

    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled and sys.stderr.isatty()
        self.last = 0.0

    def __call__(self, fraction: float, message: str) -> None:
        now = time.monotonic()
        if not self.enabled or (now - self.last < 0.2 and fraction < 1.0):
            return
        self.last = now
        width = 30
        filled = int(width * max(0.0, min(1.0, fraction)))
        bar = "#" * filled + "-" * (width - filled)
        sys.stderr.write(f"\r[{bar}] {100 * fraction:5.1f}% {message[:40]:40s}")
        if fraction >= 1.0:
            sys.stderr.write("\n")
        sys.stderr.flush()


def _short_report(report: dict[str, Any]) -> list[str]:
    lines = []
    for name, r in report.items():
        rate = f"{r['rate_hz']:.1f} Hz" if r.get("rate_hz") else "rate n/a"
        lines.append(
            f"  {name:10s} {r['file']}: {r['rows']} rows, {rate}, {r['duration_s']:.1f} s, "
            f"{r['gaps']['count']} gaps, {r['duplicates_dropped']} duplicates, "
            f"{r['conflicting_timestamps_dropped']} conflicting, {r['reordered_rows']} reordered, "
            f"{r['skipped_lines']['count']} skipped lines"
        )
        for s in r["skipped_lines"]["lines"][:5]:
            where = s.get("line", s.get("row"))
            lines.append(f"      skipped {s.get('file', '')}:{where}: {s['reason']}")
        odd = [
            f"{signal} " + ", ".join(f"{n} {k}" for k, n in counts.items() if n)
            for signal, counts in (r.get("non_finite") or {}).items()
        ]
        if odd:
            lines.append(f"      missing or non-finite values: {'; '.join(odd)}")
        if r["extra_columns"]:
            lines.append(f"      kept unmapped: {', '.join(r['extra_columns'])}")
        for w in r.get("warnings", []):
            lines.append(f"      warning: {w['message']}")
    return lines


def _positive_mb(value: int, option: str) -> int:
    if value <= 0:
        raise IngestError(f"{option} must be a positive number of MiB, found {value}.")
    return value << 20


def cmd_ingest(args: argparse.Namespace) -> int:
    """``outrigger ingest``."""
    archive = open_archive(data_dir(args))
    outcome = ingest_files(
        archive,
        args.files,
        args.map,
        args.profile,
        name=args.name,
        course=args.course,
        controller=args.controller,
        tags=args.tag,
        notes=args.notes,
        date=args.date,
        progress=_Bar(not args.quiet and not args.json),
        replace=args.replace,
        max_text_bytes=_positive_mb(args.max_text_mb, "--max-text-mb"),
    )
    analysed: str | None = None
    # A stored run is analysed unless --no-analyse; that includes a run stored by an
    # earlier ingest that was cut short before its analysis (re-ingesting finishes it).
    pending = outcome.duplicate_of is None or not archive.is_analysed(outcome.run_id)
    if not args.no_analyse and pending:
        try:
            pipeline = importlib.import_module("analysis.detect.pipeline")
        except ModuleNotFoundError as exc:
            if exc.name != "analysis.detect.pipeline":
                raise
            analysed = "skipped: the analysis pipeline is not part of this build"
        else:
            pipeline.analyse_run(archive, outcome.run_id)
            analysed = "done"
    if args.json:
        print(
            json.dumps(
                {
                    "run_id": outcome.run_id,
                    "duplicate_of": outcome.duplicate_of,
                    "differs_from": outcome.differs_from,
                    "not_applied": outcome.not_applied,
                    "replaced": outcome.replaced,
                    "analysis": analysed,
                    "report": outcome.report,
                },
                indent=1,
            )
        )
        return 0
    if args.quiet:
        print(outcome.run_id)
        return 0
    if outcome.duplicate_of:
        print(
            f"{outcome.run_id}: these files were ingested before with the same channel map and "
            "profile; nothing new stored. To ingest them again, give --replace "
            f"{outcome.run_id}."
        )
        if outcome.not_applied:
            print(
                "Not applied (the stored run keeps its own): "
                + "; ".join(outcome.not_applied)
                + ". Change them on the run's page (Edit)."
            )
        if analysed == "done":
            print(f"{outcome.run_id}: it had not been analysed; analysed now.")
        return 0
    print(outcome.run_id)
    if outcome.replaced:
        print(f"replaces run {outcome.replaced}, which is deleted")
    if outcome.differs_from:
        print(
            f"note: the same files are stored as run {outcome.differs_from} with another channel "
            f"map or profile; this is a new run. `outrigger delete {outcome.differs_from}` "
            "removes the old one."
        )
    print("\n".join(_short_report(outcome.report)))
    if analysed and analysed != "done":
        print(f"analysis {analysed}")
    return 0


def cmd_runs(args: argparse.Namespace) -> int:
    """``outrigger runs``."""
    runs = open_archive(data_dir(args)).list_runs(
        course=args.course, controller=args.controller, tag=args.tag
    )
    if args.json:
        print(json.dumps(runs, indent=1))
        return 0
    if not runs:
        print("no runs")
        return 0
    print(f"{'run id':24s} {'date (UTC)':20s} {'course':16s} {'controller':12s} {'dur s':>7s} "
          f"{'dist m':>8s} an tags / name")  # fmt: skip
    for r in runs:
        dist = f"{r['distance_m']:.1f}" if r["distance_m"] is not None else "-"
        print(
            f"{r['run_id']:24s} {(r['date'] or '-')[:19]:20s} {(r['course'] or '-')[:16]:16s} "
            f"{(r['controller'] or '-')[:12]:12s} {r['duration_s'] or 0:7.1f} {dist:>8s} "
            f"{'y ' if r['analysed'] else 'n '} {','.join(r['tags'])} {r['name'] or ''}"
        )
    return 0


def cmd_delete(args: argparse.Namespace) -> int:
    """``outrigger delete``: delete a run after the id is typed again (or ``--yes``)."""
    archive = open_archive(data_dir(args))
    meta = archive.get_meta(args.run)  # RunNotFoundError (exit 2) before asking
    if not args.yes:
        print(
            f"Deleting run {args.run} ({meta.get('name')}) and its files cannot be undone.",
            file=sys.stderr,
        )
        try:
            answer = input("Type the run id again to delete it: ")
        except EOFError:
            answer = ""
        if answer.strip() != args.run:
            raise OutriggerError(
                f"Run {args.run} was not deleted: the id typed ({answer.strip()!r}) does not "
                "match. Type it exactly, or give --yes."
            )
    archive.delete_run(args.run)
    print(f"deleted run {args.run}")
    return 0


def cmd_show(args: argparse.Namespace) -> int:
    """``outrigger show``."""
    archive = open_archive(data_dir(args))
    meta = archive.get_meta(args.run)
    stored = archive.read_results(args.run)
    laps = stored[1].get("laps") if stored is not None else None
    if args.json:
        print(json.dumps({**meta, "laps": laps}, indent=1))
        return 0
    for key in ("run_id", "name", "course", "controller", "date", "tags", "notes"):
        print(f"{key:12s} {meta.get(key)}")
    dist = meta.get("distance_m")
    print(f"{'duration':12s} {meta.get('duration_s', 0):.1f} s")
    print(f"{'distance':12s} {'-' if dist is None else f'{dist:.1f} m'}")
    print(f"{'robot':12s} {meta['profile'].get('name')}")
    print(f"{'ingested':12s} {meta.get('ingested_at')} (outrigger {meta.get('outrigger_version')})")
    for name, digest in meta.get("source_files", {}).items():
        print(f"{'source':12s} {name} sha256 {digest[:16]}...")
    print("ingest report:")
    print("\n".join(_short_report(meta.get("ingest_report", {}))))
    if stored is not None:
        print("\n".join(lap_lines(laps)))
    return 0


def _header(path: Path) -> FileHeader:
    info = inspect_file(path)
    first: dict[str, object] = {}
    if info.fmt == "parquet":
        pf = pq.ParquetFile(path)
        batch = next(pf.iter_batches(batch_size=1), None)
        if batch is not None:
            first = {k: v[0] for k, v in batch.to_pydict().items()}
    elif info.peek is not None and info.peek.num_rows:
        first = {k: v[0] for k, v in info.peek.slice(0, 1).to_pydict().items()}
    for k, v in first.items():
        if isinstance(v, datetime):
            first[k] = v.isoformat()
    return FileHeader(path, info.columns, first)


def cmd_map_template(args: argparse.Namespace) -> int:
    """``outrigger map-template``."""
    actuators = load_profile(args.profile).actuator_names if args.profile else ()
    headers = [_header(Path(f)) for f in args.files]
    text = template(headers, actuators)
    if args.out:
        out = Path(args.out)
        if out.exists():
            raise IngestError(f"{out} exists; give another --out or delete it first.")
        out.write_text(text, encoding="utf-8")
        print(f"wrote {out}: check every line marked GUESS before ingesting.")
    else:
        print(text)
    return 0
