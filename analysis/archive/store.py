"""The run archive: one folder per run, a SQLite catalog, stored configs.

Layout under the root (default ``./outrigger-data``)::

    runs/<run_id>/meta.json              the truth about a run
    runs/<run_id>/streams/<name>.parquet one file per source, column t first
    runs/<run_id>/results/               events.parquet, series.parquet, summary.json
    catalog.sqlite                       index for filtering; rebuilt from the folders
    catalog.lock                         held while a run is committed (one run per log)
    configs/profiles/<name>.toml         robot profiles kept on the server
    configs/maps/<name>.toml             channel maps kept on the server
    staging/<pid>-<hex>/                 work in progress; renamed into place

Every write is staged and renamed into place, so a failing or killed ingest or
analysis leaves no partial run; staging folders of processes that no longer
run are removed when an :class:`Archive` is opened, and the catalog is brought
in line with the run folders. New results replace old ones in two renames; the
old ones wait in ``runs/<id>/.results-previous-<pid>`` between them, and an open
after a crash in that moment puts them back. A source hash is stored once: the
commit checks and inserts under ``catalog.lock``, and the catalog's unique index
on ``source_hash`` refuses a second row.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import re
import secrets
import shutil
import sqlite3
import tomllib
from collections.abc import Iterator
from contextlib import closing, contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from analysis import catalogue
from analysis.archive.files import (
    RowGroupCache,
    asof_indices,
    profile_from_si,
    read_frame,
    write_frame,
    write_json,
)
from analysis.archive.fleet import delete_fleet_rows
from analysis.archive.overview_store import overview_fingerprint, place_overview, write_overview
from analysis.errors import (
    AlreadyStoredError,
    ArchiveError,
    ChannelMapError,
    ProfileError,
    RunNotFoundError,
)
from analysis.ingest.channel_map import parse_channel_map
from analysis.overview import RunOverview
from analysis.profile import (
    RobotProfile,
    profile_from_dict,
)

#: A run id: lower-case letters, digits and '-', at most 100 characters (ids the archive
#: gives are 20 to 78 long).
RUN_ID_RE = re.compile(r"^[a-z0-9-]{1,100}$")
CONFIG_NAME_RE = re.compile(r"^[A-Za-z0-9_-]{1,80}$")
CONFIG_KINDS = {"profile": "profiles", "map": "maps"}
#: As-of join tolerance, in periods of the joined stream: one period plus half a
#: period of allowance for timestamp jitter; well below the 5-period gap limit.
ASOF_PERIODS = 1.5

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    run_id TEXT PRIMARY KEY, name TEXT, course TEXT, controller TEXT, date TEXT,
    duration_s REAL, distance_m REAL, tags TEXT, ingested_at TEXT,
    analysed INTEGER NOT NULL DEFAULT 0, source_hash TEXT, notes TEXT
);
CREATE TABLE IF NOT EXISTS run_tags (run_id TEXT NOT NULL, tag TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS run_tags_tag ON run_tags (tag);
CREATE INDEX IF NOT EXISTS runs_hash ON runs (source_hash);
"""
#: One run per set of source files. Created apart: an archive holding duplicates from
#: before this constraint keeps working (its later copies are catalogued without a hash).
_UNIQUE_HASH = (
    "CREATE UNIQUE INDEX IF NOT EXISTS runs_source_hash_unique ON runs (source_hash) "
    "WHERE source_hash IS NOT NULL"
)
#: Prefix of the previous results while new ones are put in place (``<prefix><pid>``).
ASIDE_PREFIX = ".results-previous-"


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


#: An inclusive time window of a run, either end open (None). [s]
Window = tuple[float | None, float | None]


class Archive:
    """A run archive rooted at a folder (created if absent).

    Raises :class:`ArchiveError` if the folder cannot be created or written.
    :class:`analysis.archive.objstore.ObjectArchive` is the same on an object
    store; open either with :func:`analysis.archive.objstore.open_archive`.
    """

    #: False for the object-store archive (no SQLite catalog, no renames).
    is_local = True

    def __init__(self, root: str | os.PathLike[str]) -> None:
        if "://" in str(root):
            raise ArchiveError(
                f"{root} is a URI, not a folder; open it with "
                f"analysis.archive.objstore.open_archive (s3://BUCKET/PREFIX is supported)."
            )
        self.root = Path(root)
        try:
            for sub in ("runs", "staging", "configs/profiles", "configs/maps"):
                (self.root / sub).mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise ArchiveError(
                f"The archive folder {self.root} cannot be created or used ({exc}). "
                f"Give a writable folder with --data or $OUTRIGGER_DATA."
            ) from exc
        if not os.access(self.root, os.W_OK):
            raise ArchiveError(f"The archive folder {self.root} is not writable.")
        self._catalog = self.root / "catalog.sqlite"
        try:
            with self._db() as con:
                con.executescript(_SCHEMA)
            with contextlib.suppress(sqlite3.IntegrityError), self._db() as con:
                con.execute(_UNIQUE_HASH)
        except sqlite3.DatabaseError as exc:
            raise ArchiveError(
                f"The catalog {self._catalog} is unusable ({exc}). Move it away; "
                f"Archive.rebuild_catalog() recreates it from the run folders."
            ) from exc
        self._lock_path = self.root / "catalog.lock"
        self._lock_path.touch(exist_ok=True)
        self._clean_staging()
        self._recover_results()
        self._reconcile()

    # --- plumbing ---------------------------------------------------------------------

    @contextmanager
    def _db(self) -> Iterator[sqlite3.Connection]:
        with closing(sqlite3.connect(self._catalog, timeout=30)) as con, con:
            yield con

    @contextmanager
    def _commit_lock(self) -> Iterator[None]:
        """Exclusive lock of the archive's run list, across threads and processes."""
        with self._lock_path.open("a") as fh:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
            try:
                yield
            finally:
                fcntl.flock(fh.fileno(), fcntl.LOCK_UN)

    def _recover_results(self) -> None:
        """Finish or undo a results swap that a crash interrupted (see :meth:`write_results`).

        A run with an aside copy of its previous results (left by a process that no
        longer runs) and no ``results/`` gets the copy back; when ``results/`` is
        there, the new results were placed and the copy is removed.
        """
        for aside in (self.root / "runs").glob(f"*/{ASIDE_PREFIX}*"):
            pid_text = aside.name[len(ASIDE_PREFIX) :]
            if pid_text.isdigit() and _pid_alive(int(pid_text)) and int(pid_text) != os.getpid():
                continue  # another process is between its two renames right now
            current = aside.parent / "results"
            if current.exists():
                shutil.rmtree(aside, ignore_errors=True)
            else:
                os.rename(aside, current)

    def _run_dir(self, run_id: str) -> Path:
        if not isinstance(run_id, str) or not RUN_ID_RE.match(run_id):
            shown = repr(run_id[:40]) + ("..." if len(str(run_id)) > 40 else "")
            raise RunNotFoundError(
                f"{shown} is not a run id (lower-case letters, digits and '-', at most 100)."
            )
        path = self.root / "runs" / run_id
        if not (path / "meta.json").is_file():
            raise RunNotFoundError(
                f"No run {run_id!r} in the archive. `outrigger runs` lists the runs."
            )
        return path

    def new_staging(self) -> Path:
        """Create and return an empty staging folder owned by this process."""
        path = self.root / "staging" / f"{os.getpid()}-{secrets.token_hex(6)}"
        path.mkdir(parents=True)
        return path

    def discard_staging(self, path: Path) -> None:
        """Remove a staging folder and everything in it."""
        shutil.rmtree(path, ignore_errors=True)

    def _clean_staging(self) -> None:
        for entry in (self.root / "staging").iterdir():
            pid_text = entry.name.split("-", 1)[0]
            if not pid_text.isdigit() or not _pid_alive(int(pid_text)):
                if entry.is_dir():
                    shutil.rmtree(entry, ignore_errors=True)
                else:
                    entry.unlink(missing_ok=True)

    def _folder_ids(self) -> set[str]:
        return {
            p.name
            for p in (self.root / "runs").iterdir()
            if RUN_ID_RE.match(p.name) and (p / "meta.json").is_file()
        }

    def _reconcile(self) -> None:
        """Bring the catalog in line with the run folders (the truth)."""
        folders = self._folder_ids()
        with self._db() as con:
            flags = {r[0]: bool(r[1]) for r in con.execute("SELECT run_id, analysed FROM runs")}
        rows = set(flags)
        for gone in rows - folders:
            self._delete_row(gone)
        for run_id in folders - rows:
            self._upsert_row(self.get_meta(run_id))
        for run_id in folders & rows:
            # A crash between storing results and updating the row leaves a stale flag.
            analysed = (self.root / "runs" / run_id / "results" / "summary.json").is_file()
            if flags[run_id] != analysed:
                self._upsert_row(self.get_meta(run_id))

    def _upsert_row(self, meta: dict[str, Any]) -> None:
        run_id = meta["run_id"]
        analysed = (self.root / "runs" / run_id / "results" / "summary.json").is_file()
        tags = [str(t) for t in meta.get("tags") or []]
        source_hash = meta.get("source_hash")
        with self._db() as con:
            holder = con.execute(
                "SELECT run_id FROM runs WHERE source_hash = ? AND run_id != ?",
                (source_hash, run_id),
            ).fetchone()
            if holder is not None:
                # A copy stored before hashes were unique: listed, but not as the holder of
                # the hash (a REPLACE would silently drop the other run's row).
                source_hash = None
            con.execute("DELETE FROM run_tags WHERE run_id = ?", (run_id,))
            con.execute(
                "INSERT OR REPLACE INTO runs VALUES (?,?,?,?,?,?,?,?,?,?,?,?)",
                (
                    run_id, meta.get("name"), meta.get("course"), meta.get("controller"),
                    meta.get("date"), meta.get("duration_s"), meta.get("distance_m"),
                    json.dumps(tags), meta.get("ingested_at"), int(analysed),
                    source_hash, meta.get("notes"),
                ),
            )  # fmt: skip
            con.executemany("INSERT INTO run_tags VALUES (?, ?)", [(run_id, t) for t in tags])

    def _delete_row(self, run_id: str) -> None:
        with self._db() as con:
            con.execute("DELETE FROM runs WHERE run_id = ?", (run_id,))
            con.execute("DELETE FROM run_tags WHERE run_id = ?", (run_id,))

    def rebuild_catalog(self) -> int:
        """Recreate the catalog from the run folders; return the number of runs."""
        with self._db() as con:
            con.execute("DELETE FROM runs")
            con.execute("DELETE FROM run_tags")
        ids = sorted(self._folder_ids())
        for run_id in ids:
            self._upsert_row(self.get_meta(run_id))
        return len(ids)

    # --- ingest support -----------------------------------------------------------

    def find_by_hash(self, source_hash: str) -> str | None:
        """Id of the run ingested from exactly this set of source files, if any."""
        with self._db() as con:
            row = con.execute(
                "SELECT run_id FROM runs WHERE source_hash = ?", (source_hash,)
            ).fetchone()
        return row[0] if row else None

    def commit_run(self, staging: Path, meta: dict[str, Any]) -> str:
        """Give a staged run its id, write its meta.json, rename it into place, catalog it.

        Raises :class:`AlreadyStoredError` (nothing changed) when a run of the same source
        files is stored already, possibly by another process a moment before.
        """
        when = meta.get("date") or meta.get("ingested_at")
        try:
            stamp = datetime.fromisoformat(str(when).replace("Z", "+00:00")).astimezone(UTC)
        except ValueError:
            stamp = datetime.now(UTC)
        digest = str(meta["source_hash"])
        with self._commit_lock():
            # Check and insert under one lock: of two ingests of the same files, the
            # second finds the first's run here and stores nothing.
            with self._db() as con:
                row = con.execute(
                    "SELECT run_id FROM runs WHERE source_hash = ?", (digest,)
                ).fetchone()
            existing = row[0] if row else None
            if existing is not None and (self.root / "runs" / existing / "meta.json").is_file():
                raise AlreadyStoredError(existing)
            return self._commit_locked(staging, meta, stamp, digest)

    def _commit_locked(
        self, staging: Path, meta: dict[str, Any], stamp: datetime, digest: str
    ) -> str:
        for length in (6, 10, 16, 64):
            run_id = f"{stamp:%Y%m%d-%H%M}-{digest[:length]}"
            target = self.root / "runs" / run_id
            if target.exists():
                continue
            meta["run_id"] = run_id
            write_json(staging / "meta.json", meta)
            try:
                # Atomic, and never onto a run folder that exists (it is never empty).
                os.rename(staging, target)
            except OSError as exc:
                if target.exists():
                    continue  # another ingest took this id meanwhile: try a longer one
                raise ArchiveError(f"Cannot move the staged run into {target}: {exc}") from exc
            break
        else:
            raise ArchiveError(
                f"Run {run_id} already exists in {self.root}; nothing was changed. "
                "Ingest the files again to retry."
            )
        try:
            self._upsert_row(meta)
        except BaseException:
            shutil.rmtree(target, ignore_errors=True)
            raise
        return run_id

    # --- runs ---------------------------------------------------------------------------

    def list_runs(
        self,
        *,
        course: str | None = None,
        controller: str | None = None,
        tag: str | None = None,
        date_from: str | None = None,
        date_to: str | None = None,
    ) -> list[dict[str, Any]]:
        """Runs in the catalog, oldest first, filtered by the given fields.

        ``date_from`` and ``date_to`` are ISO 8601 prefixes (``2026-11-28`` takes
        the whole day); both bounds are inclusive.
        """
        sql = (
            "SELECT run_id, name, course, controller, date, duration_s, distance_m, tags, "
            "ingested_at, analysed FROM runs WHERE 1=1"
        )
        args: list[Any] = []
        for col, value in (("course", course), ("controller", controller)):
            if value is not None:
                sql += f" AND {col} = ?"
                args.append(value)
        if tag is not None:
            sql += " AND run_id IN (SELECT run_id FROM run_tags WHERE tag = ?)"
            args.append(tag)
        if date_from:
            sql += " AND date >= ?"
            args.append(date_from)
        if date_to:
            sql += " AND substr(date, 1, ?) <= ?"
            args += [len(date_to), date_to]
        sql += " ORDER BY date, ingested_at, run_id"
        with self._db() as con:
            rows = con.execute(sql, args).fetchall()
        keys = ("run_id", "name", "course", "controller", "date", "duration_s", "distance_m")
        out = []
        for r in rows:
            d = dict(zip(keys, r[:7], strict=True))
            d["tags"] = json.loads(r[7] or "[]")
            d["ingested_at"] = r[8]
            d["analysed"] = bool(r[9])
            out.append(d)
        return out

    def is_analysed(self, run_id: str) -> bool:
        """True when the run has stored analysis results."""
        return (self._run_dir(run_id) / "results" / "summary.json").is_file()

    def get_meta(self, run_id: str) -> dict[str, Any]:
        """The run's meta.json as a dict."""
        path = self._run_dir(run_id) / "meta.json"
        try:
            meta: dict[str, Any] = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise ArchiveError(f"{path} cannot be read ({exc}).") from exc
        return meta

    def update_meta(
        self,
        run_id: str,
        *,
        name: str | None = None,
        notes: str | None = None,
        tags: list[str] | None = None,
    ) -> dict[str, Any]:
        """Change a run's name, notes or tags (atomic rewrite of meta.json, then the catalog)."""
        meta = self.get_meta(run_id)
        before = dict(meta)
        if name is not None:
            meta["name"] = str(name)
        if notes is not None:
            meta["notes"] = str(notes)
        if tags is not None:
            if not isinstance(tags, list | tuple) or not all(isinstance(t, str) for t in tags):
                raise ArchiveError(f"Tags must be a list of strings, found {tags!r}.")
            meta["tags"] = list(dict.fromkeys(t.strip() for t in tags if t.strip()))
        path = self._run_dir(run_id) / "meta.json"
        write_json(path, meta)
        try:
            self._upsert_row(meta)
        except BaseException:
            write_json(path, before)  # keep meta.json and the catalog in agreement
            raise
        return meta

    def delete_run(self, run_id: str) -> None:
        """Remove a run: moved out of runs/ first, then uncatalogued, then deleted."""
        path = self._run_dir(run_id)
        trash = self.root / "staging" / f"{os.getpid()}-del-{secrets.token_hex(4)}"
        os.rename(path, trash)
        try:
            self._delete_row(run_id)
        except BaseException:
            os.rename(trash, path)  # the run stays whole and listed
            raise
        delete_fleet_rows(self.root, run_id)
        shutil.rmtree(trash, ignore_errors=True)

    def run_files(self, run_id: str) -> list[Path]:
        """Every Parquet file, meta.json and results summary of the run."""
        path = self._run_dir(run_id)
        files = sorted(path.rglob("*.parquet")) + [path / "meta.json"]
        summary = path / "results" / "summary.json"
        return files + ([summary] if summary.is_file() else [])

    def load_profile(self, run_id: str) -> RobotProfile:
        """The robot profile stored with the run (from its TOML text when kept)."""
        meta = self.get_meta(run_id)
        if meta.get("profile_toml"):
            return profile_from_dict(tomllib.loads(meta["profile_toml"]), source=f"run {run_id}")
        return profile_from_si(meta["profile"], where=f"run {run_id}")

    # --- frames -----------------------------------------------------------------------

    def _owners(self, meta: dict[str, Any]) -> tuple[dict[str, Any], dict[str, tuple[str, str]]]:
        streams = [s for s in meta["streams"] if s.get("rows")]
        if not streams:
            raise ArchiveError(f"Run {meta['run_id']} holds no rows.")
        state = [s for s in streams if s["kind"] == "state"] or streams
        base = max(state, key=lambda s: s.get("rate_hz") or 0.0)
        owners: dict[str, tuple[str, str]] = {}
        for s in [base] + [s for s in streams if s is not base]:
            for col in s["columns"][1:]:
                name = col
                if name in owners and col.startswith(catalogue.EXTRA_PREFIX):
                    name = catalogue.extra(f"{s['name']}.{col[len(catalogue.EXTRA_PREFIX) :]}")
                owners.setdefault(name, (s["name"], col))
        return base, owners

    def columns(self, run_id: str) -> list[str]:
        """Columns :meth:`load_frame` can return for the run (``t`` first)."""
        _, owners = self._owners(self.get_meta(run_id))
        return [catalogue.T, *owners]

    def load_frame(
        self,
        run_id: str,
        columns: list[str] | None = None,
        t0: float | None = None,
        t1: float | None = None,
        cache: RowGroupCache | None = None,
    ) -> pd.DataFrame:
        """The run as one frame on the time base of its fastest state stream.

        Parameters
        ----------
        run_id : str
            The run.
        columns : list of str, optional
            Columns wanted (canonical names or ``extra.<col>``); all when None.
            Names the run does not hold are left out, so check ``in frame``.
        t0, t1 : float, optional
            Time window, inclusive. [s]
        cache : RowGroupCache, optional
            Keeps decoded row groups between calls that read successive windows.

        Returns
        -------
        DataFrame
            Column ``t`` first. Other streams are joined as of the nearest
            earlier sample no more than :data:`ASOF_PERIODS` of their median
            periods before; further away (in particular across a gap, which is
            longer than 5 periods) the value is missing (NaN / null).
        """
        meta = self.get_meta(run_id)
        base, owners = self._owners(meta)
        wanted = [c for c in (columns if columns is not None else owners) if c in owners]
        by_stream: dict[str, list[tuple[str, str]]] = {}
        for c in wanted:
            by_stream.setdefault(owners[c][0], []).append((c, owners[c][1]))
        run_dir = self._run_dir(run_id)
        info = {s["name"]: s for s in meta["streams"]}

        def read(stream: str, cols: list[str], lo: float | None) -> pa.Table:
            filters = []
            if lo is not None:
                filters.append((catalogue.T, ">=", lo))
            if t1 is not None:
                filters.append((catalogue.T, "<=", t1))
            if cache is not None and self.is_local:
                path = run_dir / info[stream]["path"]
                return cache.read(path, [catalogue.T, *dict.fromkeys(cols)], lo, t1)
            return self._read_stream(
                run_dir, info[stream]["path"], [catalogue.T, *dict.fromkeys(cols)], filters or None
            )

        base_tab = read(base["name"], [s for _, s in by_stream.get(base["name"], [])], t0)
        t = base_tab.column(catalogue.T).to_numpy()
        got: dict[str, Any] = {}
        for name, stored in by_stream.get(base["name"], []):
            got[name] = base_tab.column(stored)
        for stream, pairs in by_stream.items():
            if stream == base["name"]:
                continue
            rate = info[stream].get("rate_hz") or 0.0
            tol = ASOF_PERIODS / rate if rate > 0 else 0.0
            tab = read(stream, [s for _, s in pairs], None if t0 is None else t0 - tol)
            take = asof_indices(t, tab.column(catalogue.T).to_numpy(), tol)
            for name, stored in pairs:
                got[name] = tab.column(stored).take(take)
        # built in the wanted order: reordering the pandas frame afterwards copies it
        return pa.table({catalogue.T: t, **{c: got[c] for c in wanted}}).to_pandas()

    def row_group_starts(self, run_id: str) -> tuple[np.ndarray, np.ndarray] | None:
        """First time [s] and row count of each row group of the run's base stream.

        Read from the Parquet footer's statistics (no rows are decoded), for cutting a
        long run into windows. None where they are not at hand: a run in an object
        store, or a file written without statistics of ``t``.
        """
        if not self.is_local:
            return None
        base, _ = self._owners(self.get_meta(run_id))
        md = pq.ParquetFile(self._run_dir(run_id) / base["path"]).metadata
        col = md.schema.to_arrow_schema().get_field_index(catalogue.T)
        firsts, rows = [], []
        for i in range(md.num_row_groups):
            rg = md.row_group(i)
            stats = rg.column(col).statistics
            if rg.num_rows and (stats is None or not stats.has_min_max):
                return None
            if rg.num_rows:
                firsts.append(float(stats.min))
                rows.append(rg.num_rows)
        return np.asarray(firsts, dtype=float), np.asarray(rows, dtype=np.int64)

    def windows(
        self,
        run_id: str,
        rows: int,
        t0: float | None = None,
        t1: float | None = None,
        times: np.ndarray | None = None,
    ) -> tuple[list[Window], int]:
        """Consecutive inclusive time windows of about ``rows`` rows covering ``[t0, t1]``.

        For reading a long run a window at a time (:meth:`load_frame` with ``t0``,
        ``t1``). Each window ends just before the next one's first sample time: no
        row is read twice, none is skipped, also where times repeat. The cuts are
        the first times of the base stream's row groups (:meth:`row_group_starts`,
        whole row groups per window); without them, every ``rows``-th time of the
        stream (``times`` when the caller has read them already, else read whole: 8
        bytes a row). The first window starts at ``t0`` and the last ends at ``t1``
        (None: open). Also returns the run's rows in all (in ``[t0, t1]`` when cut
        from the times).
        """
        groups = self.row_group_starts(run_id)
        if groups is not None:
            firsts, counts = groups
            per = max(1, rows // max(1, int(np.median(counts)) if counts.size else 1))
            starts, total = firsts[per::per], int(counts.sum())
        else:
            if times is None:
                t = self.load_frame(run_id, columns=[], t0=t0, t1=t1)[catalogue.T].to_numpy(float)
            else:
                lo = 0 if t0 is None else int(np.searchsorted(times, t0, side="left"))
                hi = times.size if t1 is None else int(np.searchsorted(times, t1, side="right"))
                t = times[lo:hi]
            starts, total = t[rows::rows], int(t.size)
            del t
        if t0 is not None:
            starts = starts[starts > t0]
        if t1 is not None:
            starts = starts[starts <= t1]
        starts = starts[np.r_[True, starts[1:] > starts[:-1]]] if starts.size else starts
        lows: list[float | None] = [t0, *starts.tolist()]
        highs: list[float | None] = [float(np.nextafter(s, -np.inf)) for s in starts.tolist()]
        return list(zip(lows, [*highs, t1], strict=True)), total

    def _read_stream(
        self, run_dir: Path, rel: str, columns: list[str], filters: list[Any] | None
    ) -> pa.Table:
        """Columns of one stream file of a run (the object-store archive reads its own way)."""
        return pq.read_table(run_dir / rel, columns=columns, filters=filters)

    # --- results ----------------------------------------------------------------------

    def series_location(self, run_id: str) -> Path | None:
        """Where the run's current derived series are; None before the first analysis."""
        path = self._run_dir(run_id) / "results" / "series.parquet"
        return path if path.is_file() else None

    def write_results(
        self,
        run_id: str,
        events: pd.DataFrame,
        series: pd.DataFrame | Path,
        summary: dict[str, Any],
        overview: RunOverview | None = None,
    ) -> None:
        """Store analysis results, replacing the previous ones atomically.

        ``series`` is the derived-series frame, or the path of a Parquet file of it
        already written (see ``analysis.archive.files.FrameWriter``), moved in.

        ``overview`` (the whole-run chart overview built from the run's frame and
        these ``series``) replaces the stored one right after the results; when
        left out, the stored one turns stale and is rebuilt on first use.
        """
        run_dir = self._run_dir(run_id)
        staging = self.new_staging()
        try:
            new = staging / "results"
            new.mkdir()
            write_frame(events, new / "events.parquet")
            if isinstance(series, Path):  # written in parts beforehand (a chunked analysis)
                shutil.move(series, new / "series.parquet")
            else:
                write_frame(series, new / "series.parquet")
            write_json(new / "summary.json", summary)
            if overview is not None:
                stamp = overview_fingerprint(self, run_id, series_path=new / "series.parquet")
                write_overview(self, run_id, overview, stamp, folder=staging)
            # Aside inside the run's own folder, named after this process: a crash between
            # the two renames leaves it there, and the next open puts it back.
            old = run_dir / f"{ASIDE_PREFIX}{os.getpid()}"
            shutil.rmtree(old, ignore_errors=True)
            current = run_dir / "results"
            if current.exists():
                os.rename(current, old)
            try:
                os.rename(new, current)
            except BaseException:
                if old.exists():  # put the previous results back
                    os.rename(old, current)
                raise
            shutil.rmtree(old, ignore_errors=True)
            if overview is not None:
                place_overview(staging, run_dir)
        finally:
            shutil.rmtree(staging, ignore_errors=True)
        self._upsert_row(self.get_meta(run_id))

    def read_results(self, run_id: str) -> tuple[pd.DataFrame, dict[str, Any]] | None:
        """(events, summary) of the last analysis, or None if the run was never analysed."""
        res = self._run_dir(run_id) / "results"
        if not (res / "summary.json").is_file():
            return None
        summary: dict[str, Any] = json.loads((res / "summary.json").read_text(encoding="utf-8"))
        return read_frame(res / "events.parquet"), summary

    def series_columns(self, run_id: str) -> list[str]:
        """Columns of the run's derived series (``t`` first), without reading a row.

        Raises :class:`RunNotFoundError` when the run was never analysed.
        """
        # An empty window (t < 0 never occurs): the Parquet statistics skip every row group.
        return [str(c) for c in self.read_result_series(run_id, t0=-1.0, t1=-1.0).columns]

    def read_result_series(
        self,
        run_id: str,
        columns: list[str] | None = None,
        t0: float | None = None,
        t1: float | None = None,
        cache: RowGroupCache | None = None,
    ) -> pd.DataFrame:
        """Derived series of the last analysis: column ``t`` and the asked columns present.

        ``t0``, ``t1`` bound the time window (inclusive); ``cache`` keeps decoded row
        groups between calls that read successive windows (as for :meth:`load_frame`).
        """
        path = self._run_dir(run_id) / "results" / "series.parquet"
        if not path.is_file():
            raise RunNotFoundError(f"Run {run_id} has not been analysed yet; no derived series.")
        names = pq.ParquetFile(path).schema_arrow.names
        cols = names if columns is None else [catalogue.T, *[c for c in columns if c in names]]
        if cache is not None:
            return cache.read(path, list(dict.fromkeys(cols)), t0, t1).to_pandas()
        filters = []
        if t0 is not None:
            filters.append((catalogue.T, ">=", t0))
        if t1 is not None:
            filters.append((catalogue.T, "<=", t1))
        return read_frame(path, list(dict.fromkeys(cols)), filters or None)

    # --- stored configs -----------------------------------------------------------------

    def _config_dir(self, kind: str, name: str | None = None) -> Path:
        if kind not in CONFIG_KINDS:
            raise ArchiveError(f"Config kind must be 'profile' or 'map', found {kind!r}.")
        if name is not None and not CONFIG_NAME_RE.match(name):
            error = ProfileError if kind == "profile" else ChannelMapError
            raise error(
                f"Config name {name!r} may hold only letters, digits, '_' and '-' (1-80 chars)."
            )
        return self.root / "configs" / CONFIG_KINDS[kind]

    def save_config(self, kind: str, name: str, text: str) -> Path:
        """Check and store a profile or channel map under ``name``; return its path."""
        folder = self._config_dir(kind, name)
        if kind == "profile":
            try:
                data = tomllib.loads(text)
            except tomllib.TOMLDecodeError as exc:
                raise ProfileError(f"Profile {name!r} is not valid TOML: {exc}.") from exc
            except RecursionError as exc:
                raise ProfileError(
                    f"Profile {name!r} is nested too deeply to read (arrays or tables inside "
                    "each other hundreds of levels deep); see the README for its layout."
                ) from exc
            profile_from_dict(data, source=f"profile {name!r}")
        else:
            parse_channel_map(text, origin=f"channel map {name!r}")
        path = folder / f"{name}.toml"
        tmp = folder / f".{name}.{secrets.token_hex(3)}.tmp"
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
        return path

    def list_configs(self, kind: str) -> list[str]:
        """Names of the stored configs of a kind, sorted."""
        return sorted(p.stem for p in self._config_dir(kind).glob("*.toml"))

    def config_path(self, kind: str, name: str) -> Path:
        """Path of a stored config; raises if there is none of that name."""
        path = self._config_dir(kind, name) / f"{name}.toml"
        if not path.is_file():
            error = ProfileError if kind == "profile" else ChannelMapError
            stored = ", ".join(self.list_configs(kind)) or "none"
            raise error(f"No stored {kind} named {name!r} (stored: {stored}).")
        return path
