"""A small, bounded, thread-safe in-memory cache of the chart columns of recent runs.

Reading Parquet is what made the Run page slow: every series request read whole
row groups of about a million rows, even for a 10 s zoom window. The cache keeps
the columns a chart asked for (frame columns and derived series) as float64
numpy arrays, one entry per run, so a zoom is a binary search on the time
axis and a slice. It is plumbing, not physics: it holds exactly what the
archive returns.

Bounds: at most :data:`MAX_RUNS` runs and ``max_bytes`` of arrays, least
recently used first out. A run whose asked columns alone pass the byte bound
(an eight-hour 400 Hz run's 34 chart columns take about 3 GB) is found so from
its row count before anything is read (:meth:`RunCache.fits`): it is never
loaded whole, never warmed, and its windows are read from the archive, whose
row groups a window's time bounds prune.

Never stale: each entry remembers a fingerprint of the run's files (inode,
size and modification time of ``meta.json`` and of the stored results) taken
*before* its arrays were read, and every lookup compares it with the files on
disk, so a re-analysis by any process (the page, the command line) is seen at
the next request. The routes that write (re-analyse, edit, delete, upload) also
drop the run's entry at once with :meth:`RunCache.invalidate`; a load that was
in flight at that moment is not stored.

The whole run's first draw comes from the run's stored chart overview
(:mod:`analysis.archive.overview_store`), kept here once read, so it is fast whether
the columns are cached or not. After such a draw :meth:`RunCache.warm_later`
loads the columns in a background thread (one per run at a time; a failure is
logged, never raised) so that the first zoom finds them.
"""

from __future__ import annotations

import logging
import os
import threading
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from analysis import catalogue as cat
from analysis.archive.location import Location
from analysis.archive.overview_store import ensure_overview, overview_fingerprint, read_overview
from analysis.archive.store import Archive
from analysis.overview import DERIVED, FRAME, RunOverview
from server.downsample import Reduced, TimeBase, time_base

__all__ = ["DERIVED", "FRAME", "Columns", "RunCache", "fingerprint"]

log = logging.getLogger("outrigger.server")

#: Runs kept at most.
MAX_RUNS = 4
#: Whole-run reductions kept per run (one per signal and point budget).
MAX_OVERVIEWS = 512
#: Default bound on the bytes of cached arrays (a one-hour 400 Hz run's 34 chart
#: columns take about 0.4 GB). [MiB]
DEFAULT_CACHE_MB = 1024

Fingerprint = tuple[tuple[Any, ...] | None, ...]


def _stat(path: Path | Location) -> tuple[Any, ...] | None:
    if isinstance(path, Location):  # an object-store archive (see Location.stamp)
        return path.stamp()
    try:
        st = os.stat(path)
    except OSError:
        return None
    return (st.st_ino, st.st_size, st.st_mtime_ns)


def fingerprint(archive: Archive, run_id: str) -> Fingerprint:
    """What changes on disk when a run is edited, re-analysed, deleted or replaced."""
    run_dir = archive.root / "runs" / run_id
    results = run_dir / "results"
    return (
        _stat(run_dir / "meta.json"),
        _stat(results / "summary.json"),
        _stat(results / "series.parquet"),
    )


@dataclass
class Columns:
    """The columns of one source of one run, on one time axis.

    Attributes
    ----------
    t : ndarray
        Sample times of the whole run. [s]
    base : TimeBase
        Data gaps of ``t``, found once.
    values : dict of str to ndarray
        Values by signal name, float64, NaN where missing.
    """

    t: np.ndarray
    base: TimeBase
    values: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def nbytes(self) -> int:
        return int(self.t.nbytes + self.base.gaps.nbytes) + sum(
            int(v.nbytes) for v in self.values.values()
        )


@dataclass
class _Entry:
    fingerprint: Fingerprint
    generation: int
    names: tuple[list[str], list[str]] | None = None
    sources: dict[str, Columns] = field(default_factory=dict)
    overviews: dict[tuple[str, str, int], Reduced] = field(default_factory=dict)
    stored: RunOverview | None = None
    load_lock: threading.Lock = field(default_factory=threading.Lock)

    @property
    def nbytes(self) -> int:
        views = sum(int(r.t.nbytes + r.y.nbytes) for r in self.overviews.values())
        stored = self.stored.nbytes if self.stored is not None else 0
        return sum(c.nbytes for c in self.sources.values()) + views + stored


#: Most bytes a whole-run request of a run without a current overview reads from the
#: samples (float64 values of the asked signals and two time axes): a larger run (an
#: eight-hour run: 3 GB for the Run page) has its overview built first, a window at a
#: time, and is answered from it. [B]
WHOLE_READ_MAX_BYTES = 1 << 30

#: One overview built in a request at a time: a second request for the same run then
#: finds it stored, instead of both reading the run. [-]
_BUILDING = threading.Lock()


def _run_rows(archive: Archive, run_id: str) -> int:
    """Rows of the run's largest stream (an upper bound of its frame's rows). [-]"""
    streams = archive.get_meta(run_id).get("streams", [])
    return max((int(s.get("rows") or 0) for s in streams), default=0)


def _as_float(values: object) -> np.ndarray:
    """A column as contiguous float64 with NaN for missing values (bool as 0/1)."""
    import pandas as pd

    series = values if isinstance(values, pd.Series) else pd.Series(values)
    return np.ascontiguousarray(series.to_numpy(dtype=np.float64, na_value=np.nan))


class RunCache:
    """LRU cache of the chart columns of recent runs; safe to share between threads.

    Parameters
    ----------
    max_bytes : int
        Bound on the bytes of cached arrays; 0 turns the cache off. [B]
    max_runs : int
        Runs kept at most. [-]
    """

    def __init__(self, max_bytes: int, max_runs: int = MAX_RUNS) -> None:
        self.max_bytes = int(max_bytes)
        self.max_runs = int(max_runs)
        self._lock = threading.Lock()
        self._entries: OrderedDict[str, _Entry] = OrderedDict()
        self._generations: dict[str, int] = {}
        self._oversized: dict[str, Fingerprint] = {}
        self._warming: dict[str, threading.Thread] = {}
        self.hits = 0
        self.loads = 0

    # --- bookkeeping ------------------------------------------------------------

    @property
    def nbytes(self) -> int:
        """Bytes of arrays held now. [B]"""
        with self._lock:
            return sum(e.nbytes for e in self._entries.values())

    def runs(self) -> list[str]:
        """Cached run ids, least recently used first."""
        with self._lock:
            return list(self._entries)

    def usable(self, archive: Archive, run_id: str) -> bool:
        """False when the cache is off or the run's chart columns did not fit its bound
        (the caller then reads the window from the archive)."""
        if self.max_bytes <= 0:
            return False
        with self._lock:
            marked = self._oversized.get(run_id)
        return marked is None or marked != fingerprint(archive, run_id)

    def fits(self, archive: Archive, run_id: str, want: dict[str, list[str]]) -> bool:
        """Whether the whole-run columns ``want`` (source -> names) fit the byte bound.

        Judged before anything is read, from the run's row count in its metadata (the
        largest stream's rows: the frame has at most as many, and the derived series
        are on the frame's time base) times 8 bytes per value and per time axis. A run
        that does not fit is marked as :meth:`usable` reports, so its windows are read
        from the archive instead of the whole run being loaded and then dropped.
        """
        if not self.usable(archive, run_id):
            return False
        values = sum(len(names) + 1 for names in want.values() if names)  # + t per source
        if _run_rows(archive, run_id) * values * 8 <= self.max_bytes:
            return True
        with self._lock:
            self._oversized[run_id] = fingerprint(archive, run_id)
        return False

    def invalidate(self, run_id: str) -> None:
        """Forget a run at once (after it was re-analysed, edited, deleted or replaced)."""
        with self._lock:
            self._entries.pop(run_id, None)
            self._oversized.pop(run_id, None)
            self._generations[run_id] = self._generations.get(run_id, 0) + 1

    def clear(self) -> None:
        """Forget every run."""
        with self._lock:
            for run_id in list(self._entries):
                self._generations[run_id] = self._generations.get(run_id, 0) + 1
            self._entries.clear()
            self._oversized.clear()

    def _entry(self, archive: Archive, run_id: str) -> _Entry:
        """The run's current entry, a fresh one when the files changed since it was made."""
        now = fingerprint(archive, run_id)
        with self._lock:
            entry = self._entries.get(run_id)
            if entry is not None and entry.fingerprint != now:
                del self._entries[run_id]
                entry = None
            if entry is None:
                entry = _Entry(now, self._generations.get(run_id, 0))
                self._entries[run_id] = entry
            self._entries.move_to_end(run_id)
            return entry

    def _current(self, run_id: str, entry: _Entry) -> bool:
        return (
            self._entries.get(run_id) is entry
            and self._generations.get(run_id, 0) == entry.generation
        )

    def _fit(self, keep: str) -> bool:
        """Evict least recently used runs until the bounds hold; False if ``keep`` alone is
        too large (it is then dropped too). Call with ``self._lock`` held."""
        total = sum(e.nbytes for e in self._entries.values())
        for run_id in list(self._entries):
            if total <= self.max_bytes and len(self._entries) <= self.max_runs:
                break
            if run_id == keep:
                continue
            total -= self._entries.pop(run_id).nbytes
        if total > self.max_bytes or len(self._entries) > self.max_runs:
            entry = self._entries.pop(keep, None)
            if entry is not None:
                self._oversized[keep] = entry.fingerprint
            return False
        return True

    # --- reads ------------------------------------------------------------------

    def signal_names(self, archive: Archive, run_id: str) -> tuple[list[str], list[str]]:
        """Names of the run's frame columns and of its derived series (without ``t``)."""
        return self._names_of(self._entry(archive, run_id), archive, run_id)

    def _names_of(
        self, entry: _Entry, archive: Archive, run_id: str
    ) -> tuple[list[str], list[str]]:
        if entry.names is not None:
            return entry.names
        raw = [c for c in archive.columns(run_id) if c != cat.T]
        derived: list[str] = []
        if archive.read_results(run_id) is not None:
            derived = [c for c in archive.series_columns(run_id) if c != cat.T and c not in raw]
        with self._lock:
            if self._current(run_id, entry):
                entry.names = (raw, derived)
        return raw, derived

    def columns(self, archive: Archive, run_id: str, source: str, names: list[str]) -> Columns:
        """The whole-run columns ``names`` of one source (``FRAME`` or ``DERIVED``).

        Names the source does not hold are left out. What is missing is read from
        the archive once; other runs are served meanwhile.
        """
        return self._columns_of(self._entry(archive, run_id), archive, run_id, source, names)

    def _columns_of(
        self, entry: _Entry, archive: Archive, run_id: str, source: str, names: list[str]
    ) -> Columns:
        with entry.load_lock:  # one load per run at a time; other runs go on
            with self._lock:
                have = entry.sources.get(source)
                missing = [n for n in names if have is None or n not in have.values]
                if have is not None and not missing:
                    self.hits += 1
                    return Columns(have.t, have.base, {n: have.values[n] for n in names})
            self.loads += 1
            loaded = self._read(archive, run_id, source, missing, have)
            if have is not None and loaded.t is have.t:
                values = {**have.values, **loaded.values}
            else:
                values = dict(loaded.values)
            merged = Columns(loaded.t, loaded.base, values)
            with self._lock:
                if self.max_bytes > 0 and self._current(run_id, entry):
                    entry.sources[source] = merged
                    self._fit(run_id)  # a run too large to keep is served from this read only
            return Columns(merged.t, merged.base, {n: values[n] for n in names if n in values})

    def overview(
        self,
        archive: Archive,
        run_id: str,
        key: tuple[str, str, int],
        compute: Callable[[], Reduced],
    ) -> Reduced:
        """The whole-run reduction ``key`` = (source, signal, points), computed once.

        The first draw of a Run page always asks for the whole run at the same
        budget; its reductions are kept with the run's arrays and dropped with them.
        """
        entry = self._entry(archive, run_id)
        with self._lock:
            found = entry.overviews.get(key)
        if found is not None:
            self.hits += 1
            return found
        reduced = compute()
        with self._lock:
            if self.max_bytes > 0 and self._current(run_id, entry):
                if len(entry.overviews) >= MAX_OVERVIEWS:
                    entry.overviews.clear()
                entry.overviews[key] = reduced
                self._fit(run_id)
        return reduced

    def stored_overview(self, archive: Archive, run_id: str) -> RunOverview | None:
        """The run's whole-run chart overview, from memory or its file; None when missing.

        Checked against the run's files at every call (:func:`overview_fingerprint`),
        so a re-analysis by any process is seen. A missing, stale or unreadable
        overview (a run stored before overviews existed) is not built here: None is
        returned, and the caller has it built in the background
        (:meth:`build_overview_later`) once its own read is done.
        """
        found = self._held_overview(archive, run_id)
        if found is None:
            found = read_overview(archive, run_id)
            if found is None:
                return None
        return self._keep_overview(archive, run_id, found)

    def _held_overview(self, archive: Archive, run_id: str) -> RunOverview | None:
        with self._lock:
            entry = self._entries.get(run_id)
            have = entry.stored if entry is not None else None
        if have is not None and have.fingerprint == overview_fingerprint(archive, run_id):
            self.hits += 1
            return have
        return None

    def _keep_overview(self, archive: Archive, run_id: str, overview: RunOverview) -> RunOverview:
        if self.max_bytes > 0:
            entry = self._entry(archive, run_id)
            with self._lock:
                if self._current(run_id, entry):
                    entry.stored = overview
                    self._fit(run_id)
        return overview

    def overview_now_if_large(
        self, archive: Archive, run_id: str, signals: int
    ) -> RunOverview | None:
        """For a whole-run request of ``signals`` signals of a run without a current overview.

        None when the run is small enough to be reduced from its samples
        (:data:`WHOLE_READ_MAX_BYTES`; the caller then has the overview built in the
        background). Else the overview, built now a window at a time
        (:func:`ensure_overview`), stored and kept: reading every asked column of a long
        run whole would take gigabytes.
        """
        if _run_rows(archive, run_id) * (signals + 2) * 8 <= WHOLE_READ_MAX_BYTES:
            return None
        with _BUILDING:
            found = self.stored_overview(archive, run_id)  # built meanwhile by another
            if found is not None:
                return found
            return self._keep_overview(archive, run_id, ensure_overview(archive, run_id))

    def build_overview_later(self, archive: Archive, run_id: str) -> None:
        """Build, store and keep the run's overview in a background thread (one per run)."""
        key = f"overview:{run_id}"

        def build() -> None:
            try:
                if self._held_overview(archive, run_id) is None:
                    self._keep_overview(archive, run_id, ensure_overview(archive, run_id))
            except Exception:  # an optimisation: log, never raise
                log.warning("Building the chart overview of run %s failed.", run_id, exc_info=True)
            finally:
                with self._lock:
                    if self._warming.get(key) is threading.current_thread():
                        del self._warming[key]

        with self._lock:
            running = self._warming.get(key)
            if running is not None and running.is_alive():
                return
            thread = threading.Thread(target=build, name=f"overview-{run_id}", daemon=True)
            self._warming[key] = thread
        thread.start()

    def has_columns(self, run_id: str, source: str, names: list[str]) -> bool:
        """True when the columns ``names`` of the run are held (no read needed)."""
        with self._lock:
            entry = self._entries.get(run_id)
            have = entry.sources.get(source) if entry is not None else None
            return have is not None and all(n in have.values for n in names)

    def warm_later(self, archive: Archive, run_id: str, want: dict[str, list[str]]) -> bool:
        """Load the run's columns ``want`` (source -> names) in a background thread.

        Does nothing (returns False) when the cache is off, the run does not fit
        it (:meth:`fits`: nothing is read then), the columns are held, a warm-up of the run is running, or the run has
        no entry. A warm-up never outlives a change of the run: it loads into the
        entry it started from and stores nothing once that entry is dropped.
        """
        if all(self.has_columns(run_id, s, n) for s, n in want.items()):
            return False
        if not self.fits(archive, run_id, want):
            return False
        with self._lock:
            entry = self._entries.get(run_id)
            running = self._warming.get(run_id)
            if entry is None or (running is not None and running.is_alive()):
                return False
            thread = threading.Thread(
                target=self._warm,
                args=(entry, archive, run_id, {s: list(n) for s, n in want.items()}),
                name=f"warm-{run_id}",
                daemon=True,
            )
            self._warming[run_id] = thread
        thread.start()
        return True

    def _warm(
        self, entry: _Entry, archive: Archive, run_id: str, want: dict[str, list[str]]
    ) -> None:
        try:
            for source, names in want.items():
                with self._lock:
                    if not self._current(run_id, entry):
                        return
                if entry.fingerprint != fingerprint(archive, run_id):
                    return
                self._names_of(entry, archive, run_id)  # a zoom checks the names first
                self._columns_of(entry, archive, run_id, source, names)
        except Exception:  # a warm-up is an optimisation: log, never raise
            log.warning("Loading the chart columns of run %s failed.", run_id, exc_info=True)
        finally:
            with self._lock:
                if self._warming.get(run_id) is threading.current_thread():
                    del self._warming[run_id]

    def wait_warm(self, timeout: float | None = None) -> None:
        """Wait for the running warm-ups to end (tests and benchmarks). [s]"""
        with self._lock:
            threads = list(self._warming.values())
        for thread in threads:
            thread.join(timeout)

    def _read(
        self, archive: Archive, run_id: str, source: str, names: list[str], have: Columns | None
    ) -> Columns:
        if source == FRAME:
            frame = archive.load_frame(run_id, columns=names)
        else:
            frame = archive.read_result_series(run_id, columns=names)
        t = np.ascontiguousarray(frame[cat.T].to_numpy(dtype=np.float64))
        if have is not None and have.t.shape == t.shape and np.array_equal(have.t, t):
            t, base = have.t, have.base  # same time axis: share it
        else:
            base = time_base(t)
        values = {n: _as_float(frame[n]) for n in frame.columns if n != cat.T}
        return Columns(t, base, values)
