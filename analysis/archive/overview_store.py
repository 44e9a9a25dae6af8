"""The stored whole-run chart overview of a run: ``runs/<run_id>/overview.parquet``.

The overview (:mod:`analysis.overview`) is written with the analysis results
(:meth:`analysis.archive.store.Archive.write_results`) and, for runs stored before it
existed, built on first use by :func:`ensure_overview`. It is derived data: it
can always be rebuilt from the run's streams and derived series, so it is never
served stale or half-read.

- Atomic: written to a temporary file in the run folder, then renamed.
- Never stale: the file holds a fingerprint (inode, size, modification time)
  of the files it was built from (the run's stream files and
  ``results/series.parquet``) taken *before* they were read; a file whose
  fingerprint differs from the files now on disk is rebuilt, not served.
- Unreadable or malformed files are rebuilt too.

Layout: one row per kept point, columns ``signal`` (dictionary-encoded text),
``t`` and ``y`` (float64, NaN at break points), signals one after the other;
the schema metadata key ``outrigger.overview`` holds JSON with the format,
bucket count, fingerprint, each source's time span and, per signal, its source,
valid sample count and row range.
"""

from __future__ import annotations

import json
import logging
import os
import secrets
from pathlib import Path
from typing import Any, Protocol

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from analysis import overview as overview_module
from analysis.archive.location import Location
from analysis.catalogue import T
from analysis.overview import DERIVED, FRAME, RunOverview, SignalOverview, build_overview
from analysis.overview_builder import OverviewBuilder


class RunSource(Protocol):
    """What the overview store reads of an archive, passed in by the caller.

    :class:`analysis.archive.store.Archive` is one; taking the archive as this
    protocol keeps the store module free of an import of ``store`` (no cycle).
    """

    root: Any  # a Path, or a Location for an object-store archive

    def series_location(self, run_id: str) -> Any: ...

    def get_meta(self, run_id: str) -> dict[str, Any]: ...

    def load_frame(
        self,
        run_id: str,
        columns: list[str] | None = None,
        t0: float | None = None,
        t1: float | None = None,
        cache: Any = None,
    ) -> pd.DataFrame: ...

    def read_result_series(
        self,
        run_id: str,
        columns: list[str] | None = None,
        t0: float | None = None,
        t1: float | None = None,
        cache: Any = None,
    ) -> pd.DataFrame: ...

    def windows(
        self,
        run_id: str,
        rows: int,
        t0: float | None = None,
        t1: float | None = None,
        times: np.ndarray | None = None,
    ) -> tuple[list[tuple[float | None, float | None]], int]: ...


log = logging.getLogger("outrigger.archive")

OVERVIEW_FILE = "overview.parquet"
_META_KEY = b"outrigger.overview"
#: Bumped when the stored layout or the reduction changes: older files are rebuilt.
OVERVIEW_FORMAT = 1
_SERIES = "results/series.parquet"

Fingerprint = tuple[tuple[Any, ...], ...]


def _stat(key: str, path: Path | Location | None) -> tuple[Any, ...]:
    if path is None:
        return (key, None)
    if isinstance(path, Location):  # object store: the key names the results version
        stamp = path.stamp()
        return (key, None) if stamp is None else (key, path.path, *stamp)
    try:
        st = os.stat(path)
    except OSError:
        return (key, None)
    return (key, st.st_ino, st.st_size, st.st_mtime_ns)


def overview_fingerprint(
    archive: RunSource, run_id: str, series_path: Path | Location | None = None
) -> Fingerprint:
    """What changes on disk when the data under the run's charts changes.

    Parameters
    ----------
    archive : RunSource
        The run archive.
    run_id : str
        The run.
    series_path : Path, optional
        Where the derived series are (a staged results file about to be renamed
        into place keeps its inode, size and time); ``results/series.parquet``
        of the run when None.
    """
    meta = archive.get_meta(run_id)  # raises RunNotFoundError for an unknown run
    run_dir = archive.root / "runs" / run_id
    streams = sorted(str(s["path"]) for s in meta.get("streams", []) if s.get("path"))
    stamps = [_stat(p, run_dir / p) for p in streams]
    if series_path is None and not isinstance(run_dir, Location):
        series_path = run_dir / _SERIES
    stamps.append(_stat(_SERIES, series_path or archive.series_location(run_id)))
    return tuple(stamps)


def _to_table(overview: RunOverview, fingerprint: Fingerprint) -> pa.Table:
    names: list[np.ndarray] = []
    ts: list[np.ndarray] = []
    ys: list[np.ndarray] = []
    entries: list[list[Any]] = []
    row = 0
    for name, sig in overview.signals.items():
        entries.append([name, sig.source, sig.samples, row, row + sig.t.size])
        row += sig.t.size
        names.append(np.full(sig.t.size, len(names), dtype=np.int32))
        ts.append(sig.t)
        ys.append(sig.y)
    labels = pa.array([e[0] for e in entries], pa.string())
    codes = np.concatenate(names) if names else np.empty(0, np.int32)
    meta = {
        "format": OVERVIEW_FORMAT,
        "buckets": overview.buckets,
        "fingerprint": [list(s) for s in fingerprint],
        "spans": {k: list(v) for k, v in overview.spans.items()},
        "signals": entries,
    }
    table = pa.table(
        {
            "signal": pa.DictionaryArray.from_arrays(pa.array(codes, pa.int32()), labels),
            "t": np.concatenate(ts) if ts else np.empty(0),
            "y": np.concatenate(ys) if ys else np.empty(0),
        }
    )
    return table.replace_schema_metadata({_META_KEY: json.dumps(meta).encode()})


def write_overview(
    archive: RunSource,
    run_id: str,
    overview: RunOverview,
    fingerprint: Fingerprint,
    folder: Path | None = None,
) -> Path | Location:
    """Write the overview atomically; return its path.

    Parameters
    ----------
    archive : RunSource
        The run archive.
    run_id : str
        The run.
    overview : RunOverview
        What to store.
    fingerprint : Fingerprint
        :func:`overview_fingerprint` of the files it was built from, taken before
        they were read.
    folder : Path, optional
        Write into this folder (staging) instead of the run's folder.
    """
    target = (folder or archive.root / "runs" / run_id) / OVERVIEW_FILE
    if isinstance(target, Location):  # object store: one upload, whole or nothing
        target.write_parquet(_to_table(overview, fingerprint))
        overview.fingerprint = fingerprint
        return target
    tmp = target.with_name(f".{OVERVIEW_FILE}.{secrets.token_hex(4)}.tmp")
    try:
        pq.write_table(_to_table(overview, fingerprint), tmp, compression="zstd")
        os.replace(tmp, target)
    finally:
        tmp.unlink(missing_ok=True)
    overview.fingerprint = fingerprint
    return target


def place_overview(staging: Path, run_dir: Path) -> None:
    """Move an overview written into ``staging`` into the run's folder (a rename).

    Called once the results it was built from are in place. If the rename
    fails, the stored overview no longer matches the results and is rebuilt on
    first use, so the analysis still counts as stored.
    """
    try:
        os.replace(staging / OVERVIEW_FILE, run_dir / OVERVIEW_FILE)
    except OSError as exc:
        log.warning("The chart overview of %s cannot be put in place (%s).", run_dir.name, exc)


def _as_fingerprint(value: Any) -> Fingerprint:
    return tuple(tuple(s) for s in value)


def read_overview(archive: RunSource, run_id: str) -> RunOverview | None:
    """The stored overview if it is there, readable and built from the files now on disk.

    Returns None (the caller rebuilds it) when the file is missing, unreadable,
    of another format, or stale.
    """
    path = archive.root / "runs" / run_id / OVERVIEW_FILE
    now = overview_fingerprint(archive, run_id)
    if not path.is_file():
        return None
    try:
        file = pq.ParquetFile(
            path.fs.open_input_file(path.path) if isinstance(path, Location) else path
        )
        meta = json.loads((file.schema_arrow.metadata or {})[_META_KEY])
        if meta.get("format") != OVERVIEW_FORMAT:
            return None
        stored = _as_fingerprint(meta["fingerprint"])
        if stored != now:
            return None
        table = file.read(columns=["t", "y"])
        t = table.column("t").to_numpy()
        y = table.column("y").to_numpy()
        signals = {}
        for name, source, samples, start, stop in meta["signals"]:
            if source not in (FRAME, DERIVED) or not 0 <= start <= stop <= t.size:
                raise ValueError(f"signal {name!r} has a bad row range or source")
            signals[str(name)] = SignalOverview(source, t[start:stop], y[start:stop], int(samples))
        spans = {str(k): (float(v[0]), float(v[1])) for k, v in meta["spans"].items()}
        return RunOverview(int(meta["buckets"]), spans, signals, stored)
    except (OSError, ValueError, KeyError, TypeError, IndexError, pa.ArrowException) as exc:
        log.warning("The chart overview %s is unreadable (%s); it is rebuilt.", path, exc)
        return None


#: Rows of the run read at once when its overview is built from the archive (about 11
#: minutes at 400 Hz; whole row groups). [-]
BUILD_WINDOW_ROWS = 1 << 18


def build_overview_in_windows(archive: RunSource, run_id: str) -> RunOverview:
    """:func:`analysis.overview.build_overview` of a stored run, read a window at a time.

    Every column of the frame and of the derived series, fed in time order to the
    builder the chunked analysis uses (:class:`analysis.overview_builder.OverviewBuilder`,
    checked against ``build_overview`` in ``tests/analysis/detect/test_overview_builder.py``).
    Memory: one window of every column (:data:`BUILD_WINDOW_ROWS` rows), the kept
    extremes, and the run's time axis once (8 bytes a row) for its median step.
    The derived series are taken to lie on the frame's rows, as an analysis writes them.
    """
    from analysis.archive.files import RowGroupCache

    analysed = archive.series_location(run_id) is not None
    t_all = archive.load_frame(run_id, columns=[])[T].to_numpy(dtype=float)
    if t_all.size < 3:  # no median step to speak of: the whole-run function as it is
        series = archive.read_result_series(run_id) if analysed else None
        return build_overview(archive.load_frame(run_id), series)
    t_first, t_last = float(t_all[0]), float(t_all[-1])
    median_dt = float(np.median(np.diff(t_all), overwrite_input=True))  # as time_gaps
    windows, _ = archive.windows(run_id, BUILD_WINDOW_ROWS, times=t_all)  # not read again
    del t_all
    # the bucket count read at call time, as build_overview does
    builder = OverviewBuilder(t_first, t_last, median_dt, overview_module.OVERVIEW_BUCKETS)
    frames, derived = RowGroupCache(), RowGroupCache()
    for i, (lo, hi) in enumerate(windows):
        builder.add(archive.load_frame(run_id, t0=lo, t1=hi, cache=frames), FRAME)
        if i == 0:
            builder.freeze_frame_names()
        if analysed:
            builder.add(archive.read_result_series(run_id, t0=lo, t1=hi, cache=derived), DERIVED)
    return builder.finish()


def ensure_overview(archive: RunSource, run_id: str) -> RunOverview:
    """The run's overview: the stored one when current, else built now and stored.

    A run stored before overviews existed, or whose overview is stale or
    unreadable, gets one here (:func:`build_overview_in_windows`: the run read once,
    a window at a time). When it cannot be stored (read-only archive, full disk) the
    built overview is still returned.
    """
    found = read_overview(archive, run_id)
    if found is not None:
        return found
    fingerprint = overview_fingerprint(archive, run_id)  # before reading: a change is seen
    overview = build_overview_in_windows(archive, run_id)
    try:
        write_overview(archive, run_id, overview, fingerprint)
    except OSError as exc:
        log.warning("The chart overview of run %s cannot be stored (%s).", run_id, exc)
        overview.fingerprint = fingerprint
    return overview
