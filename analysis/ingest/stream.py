"""Ingest raw log files of one run into the archive, streaming.

:func:`ingest_files` checks the robot profile, the whole channel map and every
file's header before any row is read; then it streams each file block by block
(:mod:`analysis.ingest.read`), converts units with pint factors, names signals
canonically, puts time in seconds since the run's first sample, and writes one
Parquet file (zstd, ~1M-row row groups) per source into a staging folder of the
archive. The archive renames the folder into place only when everything
succeeded, so a failed or killed ingest leaves nothing behind.

Notes
-----
Time origin. All files of a run share one origin: the earliest timestamp of any
file. It is found before the streaming pass from the first rows of each file
(Parquet: the whole time column, which is cheap). Should a later row be earlier
still, every stream is shifted in the second pass (:mod:`analysis.ingest.order`)
so that ``t`` starts at 0.

Order and duplicates. The streaming pass drops rows whose timestamp equals the
previous row's (exact duplicates and conflicting values are counted apart) and
notices whether time ever runs backwards. Only then is the stream sorted in a
second, column-by-column pass over its Parquet file, which bounds memory by a
few columns rather than the whole table. Nothing is interpolated; gaps longer
than 5 median periods are counted and listed.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Protocol

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from analysis import __version__, catalogue
from analysis.errors import AlreadyStoredError, ChannelMapError, IngestError
from analysis.ingest.channel_map import (
    ChannelMap,
    SourceSpec,
    channel_map_from_dict,
    check_headers,
    load_channel_map,
)
from analysis.ingest.formats import hashed_while_read, iter_file
from analysis.ingest.identity import (
    default_run_name,
    find_duplicate,
    ingest_key,
    not_applied,
    same_files_run,
)
from analysis.ingest.order import (
    ROW_GROUP_ROWS,
    dictionary_columns,
    distance_in_parts,
    duplicate_masks,
    late_rows,
    open_writer,
    rewrite_stream,
    row_group_batches,
    time_stats,
)
from analysis.ingest.plausibility import check_time_base, check_values
from analysis.ingest.read import (
    MAX_TEXT_RATIO,
    BadLines,
    FileInfo,
    TextBudget,
    inspect_file,
)
from analysis.ingest.timebase import (
    Clock,
    extra_type,
    first_time_ns,
    raw_time,
    time_check,
    time_type,
)
from analysis.profile import RobotProfile, load_profile


class RunWriter(Protocol):
    """What ingest needs of the archive it writes into, passed in by the caller.

    :class:`analysis.archive.store.Archive` is one. Ingest comes before the archive
    in the pipeline and never imports it (the layout test checks).
    """

    def find_by_hash(self, source_hash: str) -> str | None: ...

    def get_meta(self, run_id: str) -> dict[str, Any]: ...

    def new_staging(self) -> Path: ...

    def commit_run(self, staging: Path, meta: dict[str, Any]) -> str: ...

    def discard_staging(self, path: Path) -> None: ...

    def list_runs(self) -> list[dict[str, Any]]: ...

    def delete_run(self, run_id: str) -> None: ...


#: Decompressed log text one ingest reads by default: the ratio to the server's default
#: 2048 MiB upload limit (``--max-text-mb`` on the command line). [bytes]
DEFAULT_MAX_TEXT_BYTES = MAX_TEXT_RATIO * 2048 * (1 << 20)
#: Fewest valid samples a log of a run may hold. [-]
MIN_SAMPLES = 10
#: Shortest run stored (first to last sample over all its logs). [s]
MIN_DURATION_S = 2.0
#: Largest share of bad lines a file may have before the ingest is refused. [-]
MAX_BAD_SHARE = 0.01
#: Bad lines named in the refusal message.
MAX_NAMED_LINES = 10

Progress = Callable[[float, str], None]


@dataclass
class IngestOutcome:
    """Result of :func:`ingest_files`.

    ``run_id`` of the stored (or already stored) run, the ingest ``report``
    (per stream), and ``duplicate_of``: the id of an existing run with the same
    source files, in which case nothing new was stored.
    """

    run_id: str
    report: dict[str, Any]
    duplicate_of: str | None = None
    #: A stored run from the same files with another channel map or profile.
    differs_from: str | None = None
    #: Metadata given to a duplicate ingest that was not applied (see ``identity``).
    not_applied: list[str] = field(default_factory=list)
    #: The run this ingest replaced (``replace=``), now deleted.
    replaced: str | None = None


def sha256_file(path: Path) -> str:
    """SHA-256 of a file's bytes, hex."""
    h = hashlib.sha256()
    with path.open("rb") as fh:
        while chunk := fh.read(8 << 20):
            h.update(chunk)
    return h.hexdigest()


# --- streaming writer ------------------------------------------------------------------


def _has_equal_neighbours(prev_t: np.ndarray, t: np.ndarray) -> bool:
    """True when some row's time stamp equals the one before it (``prev_t``: last row)."""
    if t.size and prev_t.size and prev_t[-1] == t[0]:
        return True
    return bool(np.any(t[1:] == t[:-1]))


class _StreamWriter:
    """Convert tables of one source and write them to Parquet in ~1M-row row groups."""

    def __init__(
        self, path: Path, source: SourceSpec, clock: Clock, extras: dict[str, pa.DataType]
    ):
        self.path = path
        self.source = source
        self.clock = clock
        self.extras = extras
        fields = [pa.field(catalogue.T, pa.float64())]
        fields += [pa.field(c.signal, pa.float64()) for c in source.columns]
        fields += [pa.field(catalogue.extra(c), t) for c, t in extras.items()]
        self.schema = pa.schema(fields)
        self.writer: pq.ParquetWriter | None = None
        self.pending: list[pa.Table] = []
        self.pending_rows = 0
        self.t_parts: list[np.ndarray] = []
        self.last: pa.Table | None = None  # last kept row, for duplicates across blocks
        self.prev_max = -np.inf
        self.sorted = True
        self.exact = 0
        self.conflicting = 0
        self.reordered = 0
        self.t_min = np.inf
        self.non_finite: dict[str, dict[str, int]] = {}  # signal -> missing, nan, inf counts

    def add(self, raw: pa.Table) -> None:
        t = self.clock.seconds(raw_time(raw.column(self.source.time_column)))
        arrays: list[pa.Array | pa.ChunkedArray] = [pa.array(t)]
        for c in self.source.columns:
            col = raw.column(c.raw)
            arrays.append(col if c.multiplier == 1.0 else pc.multiply(col, c.multiplier))
        arrays += [raw.column(c) for c in self.extras]
        table = pa.Table.from_arrays(arrays, schema=self.schema)
        if len(t) == 0:
            return
        self.reordered += late_rows(t, self.prev_max)
        if self.reordered:
            self.sorted = False
        self.prev_max = max(self.prev_max, float(t.max()))
        self.t_min = min(self.t_min, float(t.min()))
        prev_t = self.last.column(0).to_numpy() if self.last is not None else t[:0]
        if not _has_equal_neighbours(prev_t, t):
            # The usual case: no two rows share a time stamp; keep the block as read
            # (no concatenation with the previous row, no filtered copy).
            self.last = table.slice(table.num_rows - 1)
            self.t_parts.append(t)
            self._count_non_finite(table)
            self.pending.append(table)
            self.pending_rows += table.num_rows
            if self.pending_rows >= ROW_GROUP_ROWS:
                self._flush()
            return
        if self.last is not None:
            table = pa.concat_tables([self.last, table])
            t = np.concatenate((prev_t, t))
        exact, conflicting = duplicate_masks(t, table)
        self.exact += int(exact.sum())
        self.conflicting += int(conflicting.sum())
        keep = ~(exact | conflicting)
        if self.last is not None:
            keep[0] = False
        if not keep.all():
            table = table.filter(pa.array(keep))
            t = t[keep]
        if table.num_rows == 0:
            return
        self.last = table.slice(table.num_rows - 1)
        self.t_parts.append(t)
        self._count_non_finite(table)
        self.pending.append(table)
        self.pending_rows += table.num_rows
        if self.pending_rows >= ROW_GROUP_ROWS:
            self._flush()

    def _count_non_finite(self, table: pa.Table) -> None:
        """Count missing, NaN and infinite values per mapped signal (kept as they are).

        A CSV cell ``nan`` or ``NaN`` is read as missing, like an empty cell; NaN
        proper comes from Parquet or JSON input.
        """
        for c in self.source.columns:
            col = table.column(c.signal)
            missing = col.null_count
            # one pass in the usual case (all finite); NaN and inf apart only if any
            odd = int(pc.sum(pc.invert(pc.is_finite(col))).as_py() or 0)
            nan = int(pc.sum(pc.is_nan(col)).as_py() or 0) if odd else 0
            inf = odd - nan
            if missing or nan or inf:
                seen = self.non_finite.setdefault(c.signal, {"missing": 0, "nan": 0, "inf": 0})
                seen["missing"] += missing
                seen["nan"] += nan
                seen["inf"] += inf

    def _flush(self) -> None:
        if not self.pending:
            return
        if self.writer is None:
            dictionary = dictionary_columns(self.pending[0])
            self.writer = open_writer(self.path, self.schema, dictionary)
        self.writer.write_table(pa.concat_tables(self.pending), row_group_size=ROW_GROUP_ROWS)
        self.pending, self.pending_rows = [], 0

    def close(self) -> np.ndarray:
        self._flush()
        if self.writer is None:
            self.writer = open_writer(self.path, self.schema)
        self.writer.close()
        return np.concatenate(self.t_parts) if self.t_parts else np.zeros(0)


# --- the ingest ------------------------------------------------------------------------


def _resolve(
    channel_map: ChannelMap | str | os.PathLike[str], profile: RobotProfile | str | os.PathLike[str]
) -> tuple[ChannelMap, RobotProfile, str | None]:
    profile_text = None
    if not isinstance(profile, RobotProfile):
        path = Path(profile)
        prof = load_profile(path)
        profile_text = path.read_text(encoding="utf-8")
    else:
        prof = profile
    if isinstance(channel_map, ChannelMap):
        cmap = channel_map_from_dict(
            channel_map.raw, prof, text=channel_map.text, origin=channel_map.origin
        )
    else:
        cmap = load_channel_map(channel_map, prof)
    return cmap, prof, profile_text


def _refuse_bad(info: FileInfo, bad: BadLines) -> None:
    if bad.count <= MAX_BAD_SHARE * max(bad.total, 1):
        return
    named = "; ".join(
        f"{bad.unit} {b[bad.unit]}: {b['reason']}" for b in bad.listed[:MAX_NAMED_LINES]
    )
    more = f" (and {bad.count - MAX_NAMED_LINES} more)" if bad.count > MAX_NAMED_LINES else ""
    hint = "or check the delimiter and the channel map's column names"
    if any("plausible range" in str(b["reason"]) for b in bad.listed):
        hint = (
            "or, when most times are out of range, check the channel map's time_unit "
            "and time_origin for this file (a time in us read as s lies years away)"
        )
    raise IngestError(
        f"{info.path.name}: {bad.count} of {bad.total} {bad.unit}s do not parse "
        f"({100 * bad.count / max(bad.total, 1):.1f}%, more than the "
        f"{100 * MAX_BAD_SHARE:g}% allowed): {named}{more}. Repair or cut those {bad.unit}s, "
        f"{hint}."
    )


def _iso_utc(ns: int) -> str:
    stamp = datetime.fromtimestamp(ns // 10**9, UTC).replace(microsecond=(ns % 10**9) // 1000)
    return stamp.isoformat().replace("+00:00", "Z")


def _parse_date(date: str | None) -> str | None:
    if not date:
        return None
    try:
        stamp = datetime.fromisoformat(date)
    except ValueError as exc:
        raise IngestError(
            f"Date {date!r} is not ISO 8601; give e.g. 2026-11-28 or 2026-11-28T09:31:00Z."
        ) from exc
    if stamp.tzinfo is None:
        stamp = stamp.replace(tzinfo=UTC)
    return stamp.astimezone(UTC).isoformat().replace("+00:00", "Z")


def ingest_files(
    archive: RunWriter,
    files: Sequence[str | os.PathLike[str]],
    channel_map: ChannelMap | str | os.PathLike[str],
    profile: RobotProfile | str | os.PathLike[str],
    *,
    name: str | None = None,
    course: str | None = None,
    controller: str | None = None,
    tags: Sequence[str] = (),
    notes: str = "",
    date: str | None = None,
    progress: Progress | None = None,
    max_text_bytes: int | None = DEFAULT_MAX_TEXT_BYTES,
    replace: str | None = None,
) -> IngestOutcome:
    """Ingest the log files of one run into ``archive``.

    Parameters
    ----------
    archive : RunWriter
        Target archive.
    files : sequence of path
        Log files of the run (CSV, CSV.gz, Parquet, JSON Lines), one clock.
    channel_map, profile : object or path
        Channel map and robot profile, as checked objects or TOML file paths.
    name, course, controller, tags, notes : optional
        Run metadata for the catalog.
    date : str, optional
        ISO 8601 start date for logs timed from boot (ignored when the log
        carries absolute time).
    progress : callable, optional
        Called as ``progress(fraction, message)``, fraction in [0, 1]. [-]
    max_text_bytes : int or None
        Most text read from the CSV and JSON Lines files together, counted after
        decompression while streaming; None for no cap. Every line is also at most
        :data:`analysis.ingest.read.MAX_LINE_BYTES` long. [bytes]
    replace : str, optional
        Id of a stored run this ingest replaces: it is deleted once the new run is
        fully staged, just before the new run is committed; an identical ingest
        (same files, map and profile) is stored again instead of being a duplicate.

    Returns
    -------
    IngestOutcome

    Raises
    ------
    ChannelMapError, ProfileError, IngestError
        Before anything is stored.
    """
    say = progress or (lambda fraction, message: None)
    _parse_date(date)  # a bad --date is refused before any work
    if replace is not None:
        archive.get_meta(replace)  # RunNotFoundError before any work
    cmap, prof, profile_text = _resolve(channel_map, profile)
    paths = [Path(f) for f in files]
    if not paths:
        raise IngestError("No log files given. Name the state (and torque) logs of one run.")
    names = [p.name for p in paths]
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise IngestError(f"File name(s) {', '.join(twice)} given twice; give each file once.")
    infos = {p: inspect_file(p, cmap.source_for(p.name).delimiter) for p in paths}
    check_headers(cmap, {str(p): i.columns for p, i in infos.items()})
    groups: dict[str, list[Path]] = {}
    for p in paths:
        groups.setdefault(cmap.source_for(p.name).name, []).append(p)
    for files_of in groups.values():
        first = infos[files_of[0]].columns
        for other in files_of[1:]:
            if infos[other].columns != first:
                raise ChannelMapError(
                    f"{other.name} and {files_of[0].name} match the same source but have "
                    f"different columns; files of one source must share their header."
                )
    # Uncompressed CSV files are hashed in the reading pass; the others here, first.
    late = {p for p in paths if hashed_while_read(infos[p])}
    say(0.0, "hashing source files")
    early = {p.name: sha256_file(p) for p in paths if p not in late}
    map_dict, prof_dict = cmap.to_dict(), prof.to_dict()
    given = {"name": name, "course": course, "controller": controller, "tags": list(tags),
             "notes": notes}  # fmt: skip

    def duplicate_check(
        hashes: dict[str, str],
    ) -> tuple[IngestOutcome | None, str, str, str | None]:
        # The run's identity: its files, channel map and profile (a new map is a new run).
        run_hash, files_hash = ingest_key(hashes, map_dict, prof_dict)
        existing = find_duplicate(archive, run_hash, files_hash, map_dict, prof_dict)
        if existing is not None and existing != replace:
            meta = archive.get_meta(existing)
            outcome = IngestOutcome(
                existing, meta.get("ingest_report", {}), duplicate_of=existing,
                not_applied=not_applied(meta, given),
            )  # fmt: skip
            return outcome, run_hash, files_hash, None
        differs = None if existing else same_files_run(archive, files_hash, skip=replace)
        return None, run_hash, files_hash, differs

    run_hash = files_hash = ""
    differs_from: str | None = None
    if not late:
        duplicate, run_hash, files_hash, differs_from = duplicate_check(early)
        if duplicate is not None:
            return duplicate
    if name is None or not name.strip():
        name = default_run_name(paths)

    sources = {s.name: s for s in cmap.sources}
    types: dict[str, dict[str, pa.DataType]] = {}
    extras: dict[str, dict[str, pa.DataType]] = {}
    firsts: list[int] = []
    for sname, files_of in groups.items():
        src, info = sources[sname], infos[files_of[0]]
        ttype = time_type(info, src)
        mapped = {c.raw for c in src.columns}
        extras[sname] = {
            c: extra_type(info, c) for c in info.columns if c != src.time_column and c not in mapped
        }
        types[sname] = {src.time_column: ttype, **{c.raw: pa.float64() for c in src.columns}}
        types[sname].update(extras[sname])
        for p in files_of:
            infos[p].time_check = time_check(src)
            f = first_time_ns(infos[p], src, ttype)
            if f is not None:
                firsts.append(f)
    origin_ns = min(firsts) if firsts else 0
    epoch = cmap.sources[0].time_origin == "epoch"

    total_bytes = sum(i.size for i in infos.values()) or 1
    done_bytes = 0
    budget = None if max_text_bytes is None else TextBudget(int(max_text_bytes))
    for info in infos.values():
        info.text_budget = budget
    staging = archive.new_staging()
    try:
        (staging / "streams").mkdir()
        writers: dict[str, _StreamWriter] = {}
        bad_of: dict[str, list[tuple[str, BadLines]]] = {}
        t_of: dict[str, np.ndarray] = {}
        for sname, files_of in groups.items():
            src = sources[sname]
            w = _StreamWriter(
                staging / "streams" / f"{sname}.parquet", src, Clock(src, origin_ns), extras[sname]
            )
            writers[sname] = w
            for p in files_of:
                info, bad = infos[p], BadLines()

                def tick(pos: int, base: int = done_bytes, fname: str = p.name) -> None:
                    say(0.9 * (base + pos) / total_bytes, f"reading {fname}")

                hasher = hashlib.sha256() if p in late else None
                for table in iter_file(info, types[sname], src.time_column, bad, tick, hasher):
                    w.add(table)
                if hasher is not None:
                    early[p.name] = hasher.hexdigest()
                _refuse_bad(info, bad)
                bad_of.setdefault(sname, []).append((p.name, bad))
                done_bytes += info.size
            t_of[sname] = w.close()
        hashes = {p.name: early[p.name] for p in paths}
        if late:
            duplicate, run_hash, files_hash, differs_from = duplicate_check(hashes)
            if duplicate is not None:
                archive.discard_staging(staging)
                return duplicate
        say(0.9, "checking time order")
        t_min = min((w.t_min for w in writers.values()), default=0.0)
        # t must start at 0: the origin from the first rows can miss an earlier late row,
        # or be a row later skipped as bad; then every stream is shifted (rare).
        shift = -t_min if np.isfinite(t_min) and t_min != 0.0 else 0.0
        report: dict[str, Any] = {}
        for sname, w in writers.items():
            exact, conflicting = w.exact, w.conflicting
            if shift or not w.sorted:
                t_of[sname], e2, c2 = rewrite_stream(w.path, shift, not w.sorted)
                exact, conflicting = exact + e2, conflicting + c2
            stats = time_stats(t_of[sname])
            if stats["rows"] == 0:
                raise IngestError(
                    f"No valid rows in {', '.join(n for n, _ in bad_of[sname])} "
                    f"(source {sname!r}); every line was skipped."
                )
            if stats["rows"] < MIN_SAMPLES:
                raise IngestError(
                    f"{', '.join(n for n, _ in bad_of[sname])} (source {sname!r}) holds "
                    f"{stats['rows']} valid sample(s); a run needs at least {MIN_SAMPLES} per "
                    "log to be analysed. Give the whole log of the run."
                )
            bads = bad_of[sname]
            report[sname] = {
                "file": ", ".join(n for n, _ in bads),
                "kind": w.source.kind,
                **stats,
                "duplicates_dropped": exact,
                "conflicting_timestamps_dropped": conflicting,
                "reordered_rows": w.reordered,
                "skipped_lines": {
                    "count": sum(b.count for _, b in bads),
                    "lines": [dict(x, file=n) for n, b in bads for x in b.listed][:100],
                },
                "non_finite": w.non_finite,
                "signals": [c.signal for c in w.source.columns],
                "extra_columns": [catalogue.extra(c) for c in w.extras],
                "warnings": _plausibility(w.path, w.source, stats, prof),
            }
        run_s = max(float(t[-1]) for t in t_of.values())
        if run_s < MIN_DURATION_S:
            raise IngestError(
                f"The run lasts {run_s:.3g} s (from the first to the last sample of its logs); "
                f"a run needs at least {MIN_DURATION_S:g} s to be analysed. Give the whole "
                "log of the run."
            )
        origin_ns += int(round(-shift * 1e9)) if shift else 0
        meta = _build_meta(
            staging, cmap, prof, profile_text, report, hashes, run_hash, origin_ns, epoch,
            name=name, course=course, controller=controller, tags=list(tags), notes=notes, date=date,
            duration_s=max(float(t[-1]) for t in t_of.values()),
        )  # fmt: skip
        meta["files_hash"] = files_hash
        if replace is not None:
            meta["replaces"] = replace
            say(0.96, f"deleting run {replace}, which this ingest replaces")
            archive.delete_run(replace)
        say(0.97, "storing run")
        run_id = archive.commit_run(staging, meta)
    except AlreadyStoredError as exc:  # another ingest of these files stored them first
        archive.discard_staging(staging)
        winner = archive.get_meta(exc.run_id)
        return IngestOutcome(exc.run_id, winner.get("ingest_report", {}), duplicate_of=exc.run_id)
    except BaseException:
        archive.discard_staging(staging)
        raise
    say(1.0, f"stored run {run_id}")
    return IngestOutcome(run_id, report, differs_from=differs_from, replaced=replace)


def _plausibility(
    path: Path, source: SourceSpec, stats: dict[str, Any], prof: RobotProfile
) -> list[dict[str, Any]]:
    """Plausibility warnings of one stored stream (:mod:`analysis.ingest.plausibility`)."""
    warnings = check_time_base(source, stats["rate_hz"], stats["duration_s"])
    wanted = [c.signal for c in source.columns if c.signal in _PLAUSIBILITY_SIGNALS]
    wanted += [c.signal for c in source.columns if c.signal.endswith(f".{catalogue.VEL}")]
    wanted += [c.signal for c in source.columns if c.signal.endswith(f".{catalogue.POS}")]
    if wanted:
        cols = _every_kth_row(path, [catalogue.T, *dict.fromkeys(wanted)])
        warnings += check_values(source, cols.pop(catalogue.T), cols, prof)
    return warnings


#: Rows the plausibility checks look at, at most: a longer stream is read one row
#: group at a time and every k-th row kept, so that an 8-hour log needs no more memory
#: than a 45-minute one at 400 Hz (unit and sign heuristics do not need every sample). [-]
PLAUSIBILITY_MAX_ROWS = 1 << 20


def _every_kth_row(path: Path, columns: list[str]) -> dict[str, np.ndarray]:
    """Columns of a stored stream, every k-th row when it has more than the cap."""
    pf = pq.ParquetFile(path)
    k = max(1, -(-pf.metadata.num_rows // PLAUSIBILITY_MAX_ROWS))
    parts: dict[str, list[np.ndarray]] = {c: [] for c in columns}
    start = 0  # row index of the group's first row, so that the rows kept are 0, k, 2k, ...
    for i in range(pf.num_row_groups):
        tab = pf.read_row_group(i, columns=columns)
        first = (-start) % k
        for c in columns:
            # a copy: a strided view would keep the whole decoded row group alive
            parts[c].append(tab.column(c).to_numpy(zero_copy_only=False)[first::k].copy())
        start += tab.num_rows
        del tab
    return {c: np.concatenate(p) if p else np.zeros(0) for c, p in parts.items()}


_PLAUSIBILITY_SIGNALS = {
    catalogue.ROLL,
    catalogue.PITCH,
    catalogue.YAW,
    catalogue.ROLL_REF,
    catalogue.PITCH_REF,
    catalogue.YAW_RATE,
    catalogue.ACCEL_Z,
    catalogue.VEL_X,
}


def _build_meta(
    staging: Path,
    cmap: ChannelMap,
    prof: RobotProfile,
    profile_text: str | None,
    report: dict[str, Any],
    hashes: dict[str, str],
    run_hash: str,
    origin_ns: int,
    epoch: bool,
    **info: Any,
) -> dict[str, Any]:
    date = info.pop("date")
    start = _iso_utc(origin_ns) if epoch else _parse_date(date)
    distance_m = None
    for sname, r in report.items():
        if catalogue.VEL_X in r["signals"]:
            rate = r.get("rate_hz")
            if not rate:
                continue
            # one row group at a time: an 8-hour stream's two columns would be 0.2 GB
            pf = pq.ParquetFile(staging / "streams" / f"{sname}.parquet")
            parts = (
                (b.column(0).to_numpy(), b.column(1).to_numpy(zero_copy_only=False))
                for b in row_group_batches(pf, [catalogue.T, catalogue.VEL_X], ROW_GROUP_ROWS)
            )
            distance_m = distance_in_parts(parts, 1.0 / float(rate))
    streams = [
        {
            "name": s,
            "kind": r["kind"],
            "path": f"streams/{s}.parquet",
            "rate_hz": r["rate_hz"],
            "rows": r["rows"],
            "columns": [catalogue.T, *r["signals"], *r["extra_columns"]],
        }
        for s, r in report.items()
    ]
    return {
        "run_id": None,  # set by the archive
        "name": info["name"],
        "course": info["course"],
        "controller": info["controller"],
        "date": start,
        "tags": info["tags"],
        "notes": info["notes"],
        "profile": prof.to_dict(),
        "profile_toml": profile_text,
        "channel_map": cmap.to_dict(),
        "channel_map_toml": cmap.text,
        "source_files": hashes,
        "source_hash": run_hash,
        "streams": streams,
        "ingest_report": report,
        "duration_s": info.pop("duration_s"),
        "distance_m": distance_m,
        "ingested_at": datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z"),
        "outrigger_version": __version__,
    }
