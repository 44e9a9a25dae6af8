"""The run archive on an S3-compatible object store (``s3://BUCKET/PREFIX``).

Same layout and the same public methods as the local :class:`Archive`, but no
SQLite file and no renames (an object store has neither locking nor atomic
folder renames). What makes it safe instead:

- **A run's manifest is written last.** Ingest stages the run on local disk,
  uploads its stream files to ``runs/<id>/streams/``, and only then puts
  ``runs/<id>/meta.json``, the manifest. A run exists exactly when its manifest
  does; objects without one (a killed ingest) are never listed and are swept
  by a later ingest once an hour old (:meth:`ObjectArchive.sweep`).
- **The catalog is the set of manifests.** Listing the runs lists the
  ``meta.json`` objects and reads each (cached by size and time), so two
  archives on two machines see the same runs and nothing can go out of step.
- **Two writers never take one key.** A run id carries 16 hex digits (64 bits)
  of the hash of its source files, so two different runs never share an id;
  two ingests of the same files write the same objects and one run results.
- **Results are swapped by one pointer.** Events, series and overview go to
  ``runs/<id>/results/<token>/``; ``runs/<id>/results/summary.json`` (the
  summary and the token) is written last and then the previous token's objects
  are deleted. Readers follow the pointer, so they see the old results or the
  new ones, never a mix.
"""

from __future__ import annotations

import json
import logging
import os
import secrets
import shutil
import tempfile
import time
import tomllib
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.fs as pafs

from analysis.archive.files import RowGroupCache, json_safe, read_frame, write_frame
from analysis.archive.fleet import delete_fleet_rows
from analysis.archive.location import Location, is_uri
from analysis.archive.overview_store import overview_fingerprint, write_overview
from analysis.archive.store import CONFIG_KINDS, CONFIG_NAME_RE, RUN_ID_RE, Archive, _pid_alive
from analysis.catalogue import T
from analysis.errors import (
    AlreadyStoredError,
    ArchiveError,
    ChannelMapError,
    ProfileError,
    RunNotFoundError,
)
from analysis.ingest.channel_map import parse_channel_map
from analysis.overview import RunOverview
from analysis.profile import profile_from_dict

log = logging.getLogger("outrigger.archive")

#: Hex digits of the source hash in an object-store run id (64 bits).
ID_HASH_DIGITS = 16
#: Objects of unfinished ingests and replaced results older than this are swept. [s]
SWEEP_AGE_S = 3600.0
#: A manifest this old is cached by size and time (clock skew and 1 s time steps). [s]
CACHE_AFTER_S = 5.0
#: Local staging folders: ``<tmp>/outrigger-staging-<pid>-<hex>``.
STAGING_PREFIX = "outrigger-staging-"
META = "meta.json"
POINTER = "results/summary.json"


def open_archive(root: str | Path) -> Archive:
    """The archive at ``root``: a local folder (SQLite catalog) or ``s3://BUCKET/PREFIX``."""
    if is_uri(str(root)):
        return ObjectArchive(str(root))
    return Archive(root)


class ObjectArchive(Archive):
    """A run archive under ``s3://BUCKET/PREFIX`` (see the module notes).

    Raises :class:`ArchiveError` when the bucket cannot be reached.
    """

    is_local = False

    def __init__(self, uri: str) -> None:  # no call to Archive.__init__: no folder, no SQLite
        self.loc: Location = Location.of(uri)
        # Code shared with the local archive joins paths on ``root``; a Location joins alike.
        self.root = self.loc  # type: ignore[assignment]
        bucket = self.loc.path.split("/", 1)[0]
        try:
            kind = self.loc.fs.get_file_info(bucket).type
        except OSError as exc:
            raise ArchiveError(
                f"The object store of {uri} cannot be reached ({exc}). Check "
                f"AWS_ENDPOINT_URL, AWS_ACCESS_KEY_ID and AWS_SECRET_ACCESS_KEY."
            ) from exc
        if kind == pafs.FileType.NotFound:
            raise ArchiveError(
                f"The bucket {bucket!r} of {uri} does not exist. Create it first "
                f"(the archive never creates buckets)."
            )
        self._metas: dict[str, tuple[Any, dict[str, Any]]] = {}
        self._local: Path | None = None  # local copies of stored configs, made on first use
        self._clean_staging()

    def __del__(self) -> None:
        local = getattr(self, "_local", None)
        if local is not None:
            shutil.rmtree(local, ignore_errors=True)

    # --- plumbing ---------------------------------------------------------------------

    @contextmanager
    def _db(self) -> Iterator[Any]:  # pragma: no cover - guard
        raise ArchiveError("An object-store archive has no SQLite catalog.")
        yield

    def _run_loc(self, run_id: str) -> Location:
        if not isinstance(run_id, str) or not RUN_ID_RE.match(run_id):
            raise RunNotFoundError(f"{run_id!r} is not a run id (lower-case letters, digits, '-').")
        return self.loc / "runs" / run_id

    def _run_dir(self, run_id: str) -> Location:  # type: ignore[override]
        loc = self._run_loc(run_id)
        if not (loc / META).is_file():
            raise RunNotFoundError(
                f"No run {run_id!r} in the archive {self.loc}. `outrigger runs` lists the runs."
            )
        return loc

    def new_staging(self) -> Path:
        """A local staging folder: the run is built on disk, then uploaded."""
        return Path(tempfile.mkdtemp(prefix=f"{STAGING_PREFIX}{os.getpid()}-"))

    def discard_staging(self, path: Path) -> None:
        shutil.rmtree(path, ignore_errors=True)

    def _clean_staging(self) -> None:
        """Remove local staging folders of ingests whose process is gone (killed)."""
        for entry in Path(tempfile.gettempdir()).glob(f"{STAGING_PREFIX}*"):
            pid_text = entry.name[len(STAGING_PREFIX) :].split("-", 1)[0]
            if pid_text.isdigit() and not _pid_alive(int(pid_text)):
                shutil.rmtree(entry, ignore_errors=True)

    def _reconcile(self) -> None:
        pass

    def _upsert_row(self, meta: dict[str, Any]) -> None:
        pass

    def _delete_row(self, run_id: str) -> None:
        pass

    def _listing(self) -> tuple[dict[str, pafs.FileInfo], set[str]]:
        """Manifests by run id, and the ids of runs with results, from one listing."""
        manifests: dict[str, pafs.FileInfo] = {}
        analysed: set[str] = set()
        base = f"{self.loc.path}/runs/"
        for info in (self.loc / "runs").walk():
            rel = info.path[len(base) :]
            run_id, _, rest = rel.partition("/")
            if not RUN_ID_RE.match(run_id):
                continue
            if rest == META:
                manifests[run_id] = info
            elif rest == POINTER:
                analysed.add(run_id)
        return manifests, analysed & set(manifests)

    def _folder_ids(self) -> set[str]:
        return set(self._listing()[0])

    def _meta_from(self, run_id: str, info: pafs.FileInfo) -> dict[str, Any]:
        """The manifest, read once and then kept while its size and time stay the same.

        Stores give times to the second, so a manifest is kept only once it is
        :data:`CACHE_AFTER_S` old: a later rewrite then always shows a later time.
        """
        key = (info.size, info.mtime_ns)
        cached = self._metas.get(run_id)
        if cached is not None and cached[0] == key:
            return dict(cached[1])
        meta = self._read_json(self.loc / "runs" / run_id / META)
        if info.mtime_ns is not None and time.time_ns() - info.mtime_ns > CACHE_AFTER_S * 1e9:
            self._metas[run_id] = (key, meta)
        return dict(meta)

    def _read_json(self, loc: Location) -> dict[str, Any]:
        try:
            data: dict[str, Any] = json.loads(loc.read_bytes())
        except FileNotFoundError as exc:
            raise RunNotFoundError(f"{loc} is gone (deleted meanwhile?).") from exc
        except (OSError, ValueError) as exc:
            raise ArchiveError(f"{loc} cannot be read ({exc}).") from exc
        return data

    def _write_json(self, loc: Location, data: dict[str, Any]) -> None:
        loc.write_text(json.dumps(json_safe(data), indent=1, allow_nan=False))

    def rebuild_catalog(self) -> int:
        """The catalog is the manifests themselves: sweep leftovers, return the run count."""
        self._metas.clear()
        self.sweep()
        return len(self._folder_ids())

    def sweep(self, min_age_s: float = SWEEP_AGE_S, results: bool = True) -> list[str]:
        """Delete objects no manifest or results pointer refers to, older than ``min_age_s``.

        Such objects are left by a killed ingest (streams without a manifest)
        or, with ``results``, a killed analysis (results not, or no longer,
        pointed to). Younger ones may belong to work still in progress and are
        kept. Returns the deleted keys.
        """
        manifests, analysed = self._listing()
        tokens: dict[str, str | None] = {}
        unknown = set()
        for run_id in analysed if results else ():
            try:
                tokens[run_id] = str(self._pointer(run_id).get("objects"))
            except (RunNotFoundError, ArchiveError):
                unknown.add(run_id)  # pointer unreadable now: leave its results alone
        now_ns = time.time_ns()
        base = f"{self.loc.path}/runs/"
        removed = []
        for info in (self.loc / "runs").walk():
            if info.mtime_ns is not None and now_ns - info.mtime_ns < min_age_s * 1e9:
                continue
            run_id, _, rest = info.path[len(base) :].partition("/")
            parts = rest.split("/")
            stale_results = (
                results
                and run_id not in unknown
                and parts[0] == "results"
                and len(parts) == 3
                and parts[1] != tokens.get(run_id)
            )
            if run_id not in manifests or stale_results:
                self.loc.fs.delete_file(info.path)
                removed.append(info.path)
        return removed

    # --- ingest support -----------------------------------------------------------

    def find_by_hash(self, source_hash: str) -> str | None:
        manifests, _ = self._listing()
        for run_id, info in sorted(manifests.items()):
            try:
                if self._meta_from(run_id, info).get("source_hash") == source_hash:
                    return run_id
            except RunNotFoundError:
                continue
        return None

    def commit_run(self, staging: Path, meta: dict[str, Any]) -> str:
        """Upload a staged run's files, then its manifest (last: the run becomes visible).

        The id is ``<date>-<time>-<16 hex digits of the source hash>``. Raises
        :class:`AlreadyStoredError` (nothing changed) when a manifest of the same
        source files is there already: another ingest of these files stored them first.
        """
        when = meta.get("date") or meta.get("ingested_at")
        try:
            stamp = datetime.fromisoformat(str(when).replace("Z", "+00:00")).astimezone(UTC)
        except ValueError:
            stamp = datetime.now(UTC)
        digest = str(meta["source_hash"])
        for length in (ID_HASH_DIGITS, 64):
            run_id = f"{stamp:%Y%m%d-%H%M}-{digest[:length]}"
            target = self._run_loc(run_id)
            if not (target / META).is_file():
                break
            other = self._read_json(target / META)
            if other.get("source_hash") == digest:
                raise AlreadyStoredError(run_id)
        else:
            raise ArchiveError(
                f"Run {run_id} already exists in {self.loc} with other source files; "
                "nothing was changed."
            )
        meta["run_id"] = run_id
        # On failure the objects already uploaded stay: without a manifest they are never
        # listed, and deleting them could hit the same keys of a concurrent ingest of the
        # same files that did finish. The next ingest sweeps them once an hour old.
        try:
            for path in sorted(p for p in staging.rglob("*") if p.is_file()):
                rel = path.relative_to(staging).as_posix()
                if rel != META:
                    (target / rel).upload(path)
            self._write_json(target / META, meta)  # last: now the run exists
        except OSError as exc:
            raise ArchiveError(f"Cannot store run {run_id} in {self.loc}: {exc}") from exc
        try:  # leftovers of killed ingests (an hour old) go with the next ingest
            self.sweep(SWEEP_AGE_S, results=False)
        except (OSError, ArchiveError) as exc:
            log.warning("Leftover objects in %s not swept (%s).", self.loc, exc)
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
        manifests, analysed = self._listing()
        out = []
        for run_id, info in manifests.items():
            try:
                meta = self._meta_from(run_id, info)
            except RunNotFoundError:
                continue  # deleted while listing
            tags = [str(t) for t in meta.get("tags") or []]
            date = meta.get("date")
            if course is not None and meta.get("course") != course:
                continue
            if controller is not None and meta.get("controller") != controller:
                continue
            if tag is not None and tag not in tags:
                continue
            if date_from and (date is None or str(date) < date_from):
                continue
            if date_to and (date is None or str(date)[: len(date_to)] > date_to):
                continue
            row = {k: meta.get(k) for k in ("name", "course", "controller", "date")}
            out.append(
                {
                    "run_id": run_id,
                    **row,
                    "duration_s": meta.get("duration_s"),
                    "distance_m": meta.get("distance_m"),
                    "tags": tags,
                    "ingested_at": meta.get("ingested_at"),
                    "analysed": run_id in analysed,
                }
            )

        def order(r: dict[str, Any]) -> tuple[Any, ...]:  # as SQLite: NULL first
            return tuple((r[k] is not None, r[k] or "") for k in ("date", "ingested_at", "run_id"))

        return sorted(out, key=order)

    def is_analysed(self, run_id: str) -> bool:
        """True when the run has stored analysis results (its results pointer exists)."""
        return (self._run_dir(run_id) / POINTER).is_file()

    def get_meta(self, run_id: str) -> dict[str, Any]:
        loc = self._run_loc(run_id) / META
        info = loc.info()
        if info.type != pafs.FileType.File:
            raise RunNotFoundError(
                f"No run {run_id!r} in the archive {self.loc}. `outrigger runs` lists the runs."
            )
        return self._meta_from(run_id, info)

    def update_meta(
        self,
        run_id: str,
        *,
        name: str | None = None,
        notes: str | None = None,
        tags: list[str] | None = None,
    ) -> dict[str, Any]:
        """Change a run's name, notes or tags (one new manifest object; last writer wins)."""
        meta = self.get_meta(run_id)
        if name is not None:
            meta["name"] = str(name)
        if notes is not None:
            meta["notes"] = str(notes)
        if tags is not None:
            if not isinstance(tags, list | tuple) or not all(isinstance(t, str) for t in tags):
                raise ArchiveError(f"Tags must be a list of strings, found {tags!r}.")
            meta["tags"] = list(dict.fromkeys(t.strip() for t in tags if t.strip()))
        self._write_json(self._run_loc(run_id) / META, meta)
        return meta

    def delete_run(self, run_id: str) -> None:
        """Remove a run: its manifest first (it disappears at once), then its objects."""
        loc = self._run_dir(run_id)
        (loc / META).unlink()
        self._metas.pop(run_id, None)
        delete_fleet_rows(self.loc, run_id)
        loc.rmtree()

    def run_files(self, run_id: str) -> list[Location]:  # type: ignore[override]
        """Every stored object of the run's current version (streams, manifest, results)."""
        loc = self._run_dir(run_id)
        files = [loc / str(s["path"]) for s in self.get_meta(run_id)["streams"] if s.get("path")]
        files.append(loc / META)
        pointer = self._pointer_or_none(run_id)
        if pointer is not None:
            res = loc / "results" / str(pointer["objects"])
            files += [res / "events.parquet", res / "series.parquet", loc / POINTER]
        return files

    # --- frames -----------------------------------------------------------------------

    def _read_stream(
        self, run_dir: Any, rel: str, columns: list[str], filters: list[Any] | None
    ) -> pa.Table:
        loc: Location = run_dir / rel
        return loc.read_parquet(columns=columns, filters=filters)

    # --- results ----------------------------------------------------------------------

    def _pointer_or_none(self, run_id: str) -> dict[str, Any] | None:
        loc = self._run_dir(run_id) / POINTER
        try:
            return json.loads(loc.read_bytes())
        except FileNotFoundError:
            return None
        except (OSError, ValueError) as exc:
            raise ArchiveError(f"{loc} cannot be read ({exc}).") from exc

    def _pointer(self, run_id: str) -> dict[str, Any]:
        found = self._pointer_or_none(run_id)
        if found is None:
            raise RunNotFoundError(f"Run {run_id} has not been analysed yet; no derived series.")
        return found

    def series_location(self, run_id: str) -> Location | None:  # type: ignore[override]
        """Where the run's current derived series are; None before the first analysis."""
        pointer = self._pointer_or_none(run_id)
        if pointer is None:
            return None
        return self._run_loc(run_id) / "results" / str(pointer["objects"]) / "series.parquet"

    def write_results(
        self,
        run_id: str,
        events: pd.DataFrame,
        series: pd.DataFrame | Path,
        summary: dict[str, Any],
        overview: RunOverview | None = None,
    ) -> None:
        """Store results under a new token, then point to them (one object), then drop the old.

        ``series`` may be a local Parquet file a chunked analysis wrote; it is uploaded
        as it is.
        """
        run = self._run_dir(run_id)
        old = self._pointer_or_none(run_id)
        token = f"{time.time_ns():x}-{secrets.token_hex(4)}"
        folder = run / "results" / token
        try:
            write_frame(events, (folder / "events.parquet").path, filesystem=folder.fs)
            target = (folder / "series.parquet").path
            if isinstance(series, Path):  # written chunk by chunk: copy the file up
                with open(series, "rb") as src, folder.fs.open_output_stream(target) as dst:
                    shutil.copyfileobj(src, dst, 8 << 20)
            else:
                write_frame(series, target, filesystem=folder.fs)
            self._write_json(run / POINTER, {"objects": token, "summary": summary})
        except OSError as exc:
            raise ArchiveError(f"Cannot store the results of run {run_id}: {exc}") from exc
        if overview is not None:  # derived data: when this fails it is rebuilt on first use
            try:
                stamp = overview_fingerprint(self, run_id, series_path=folder / "series.parquet")
                write_overview(self, run_id, overview, stamp)
            except (OSError, ArchiveError) as exc:
                log.warning("The chart overview of %s cannot be stored (%s).", run_id, exc)
        if old is not None and old.get("objects") != token:
            try:
                (run / "results" / str(old["objects"])).rmtree()
            except OSError as exc:  # swept later
                log.warning("Old results of %s not deleted (%s).", run_id, exc)

    def read_results(self, run_id: str) -> tuple[pd.DataFrame, dict[str, Any]] | None:
        pointer = self._pointer_or_none(run_id)
        if pointer is None:
            return None
        loc = self._run_loc(run_id) / "results" / str(pointer["objects"]) / "events.parquet"
        events = read_frame(loc.path, filesystem=loc.fs)
        summary: dict[str, Any] = pointer["summary"]
        return events, summary

    def read_result_series(
        self,
        run_id: str,
        columns: list[str] | None = None,
        t0: float | None = None,
        t1: float | None = None,
        cache: RowGroupCache | None = None,  # not used: objects are read whole per window
    ) -> pd.DataFrame:
        loc = self.series_location(run_id)
        if loc is None:
            raise RunNotFoundError(f"Run {run_id} has not been analysed yet; no derived series.")
        names = loc.read_schema().names
        cols = names if columns is None else [T, *[c for c in columns if c in names]]
        filters = []
        if t0 is not None:
            filters.append((T, ">=", t0))
        if t1 is not None:
            filters.append((T, "<=", t1))
        return read_frame(loc.path, list(dict.fromkeys(cols)), filters or None, filesystem=loc.fs)

    # --- stored configs -----------------------------------------------------------------

    def _config_loc(self, kind: str, name: str | None = None) -> Location:
        if kind not in CONFIG_KINDS:
            raise ArchiveError(f"Config kind must be 'profile' or 'map', found {kind!r}.")
        if name is not None and not CONFIG_NAME_RE.match(name):
            error = ProfileError if kind == "profile" else ChannelMapError
            raise error(
                f"Config name {name!r} may hold only letters, digits, '_' and '-' (1-80 chars)."
            )
        return self.loc / "configs" / CONFIG_KINDS[kind]

    def save_config(self, kind: str, name: str, text: str) -> Path:
        folder = self._config_loc(kind, name)
        if kind == "profile":
            try:
                data = tomllib.loads(text)
            except tomllib.TOMLDecodeError as exc:
                raise ProfileError(f"Profile {name!r} is not valid TOML: {exc}.") from exc
            profile_from_dict(data, source=f"profile {name!r}")
        else:
            parse_channel_map(text, origin=f"channel map {name!r}")
        (folder / f"{name}.toml").write_text(text)
        return Path(f"{folder.uri}/{name}.toml")

    def list_configs(self, kind: str) -> list[str]:
        folder = self._config_loc(kind)
        return sorted(
            i.base_name[: -len(".toml")]
            for i in folder.listdir()
            if i.type == pafs.FileType.File and i.base_name.endswith(".toml")
        )

    def config_path(self, kind: str, name: str) -> Path:
        """A local copy of a stored config (ingest and downloads read local files)."""
        loc = self._config_loc(kind, name) / f"{name}.toml"
        try:
            text = loc.read_bytes()
        except FileNotFoundError:
            error = ProfileError if kind == "profile" else ChannelMapError
            stored = ", ".join(self.list_configs(kind)) or "none"
            raise error(f"No stored {kind} named {name!r} (stored: {stored}).") from None
        if self._local is None:
            self._local = Path(tempfile.mkdtemp(prefix="outrigger-objstore-"))
        path = self._local / CONFIG_KINDS[kind] / f"{name}.toml"
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(text)
        return path
