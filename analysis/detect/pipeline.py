"""Run every detector on one run and keep the results with their provenance.

The analysis of a run is a pure function of its analysis frame, its robot
profile and the thresholds (:func:`analyse_frame`), so a batch re-analysis can
map it over runs on any engine. :func:`analyse_run` adds the archive around it:
load the frame, analyse, store events, derived series and KPIs atomically in the
run's folder together with the analysis version and every threshold used.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from analysis import __version__, catalogue
from analysis.archive.courses import course_start_line
from analysis.archive.files import FrameWriter, RowGroupCache
from analysis.archive.fleet import (
    delete_fleet_rows,
    fleet_run_ids,
    fleet_stamp,
    results_stamp,
    write_fleet_rows,
)
from analysis.detect.balance import detect_balance
from analysis.detect.chunked import CHUNK_S, ChunkedAnalysis, NotChunkableError, analyse_in_chunks
from analysis.detect.limits import headline_kpis
from analysis.detect.roll import detect_roll_tracking
from analysis.detect.saturation import detect_saturation
from analysis.detect.slip import detect_slip
from analysis.detect.tipover import detect_tip_margin
from analysis.events import DetectorResult, Event, events_frame, run_median_period
from analysis.lap_kpis import lap_report
from analysis.laps import find_laps
from analysis.overview import build_overview
from analysis.profile import RobotProfile, Thresholds

__all__ = [
    "ANALYSIS_VERSION",
    "DETECTORS",
    "AnalysisResult",
    "analyse_frame",
    "analyse_run",
    "headline_kpis",
    "load_analysis",
]

if TYPE_CHECKING:
    from analysis.archive.store import Archive

#: Bumped whenever a detector's definition changes, so stored results say what made them.
ANALYSIS_VERSION = f"{__version__}+detectors.4+laps.1"

Detector = Callable[[pd.DataFrame, RobotProfile, Thresholds | None], DetectorResult]

#: The detectors, in the order they run and are reported.
DETECTORS: tuple[tuple[str, Detector], ...] = (
    ("saturation", detect_saturation),
    ("slip", detect_slip),
    ("tip", detect_tip_margin),
    ("roll", detect_roll_tracking),
    ("balance", detect_balance),
)

Progress = Callable[[float, str], None]


@dataclass
class AnalysisResult:
    """Everything one analysis produced.

    Attributes
    ----------
    events : list of Event
        All detectors' events, sorted by start time.
    kpis : dict
        KPIs by detector name.
    series : DataFrame
        Column ``t`` plus every detector's derived series.
    skipped : list of dict
        ``{"detector", "reason"}`` for each detector that could not run.
    notes : dict
        Remarks by detector (fallbacks used and the like).
    thresholds : dict
        Every threshold used, as file keys in file units.
    version : str
        :data:`ANALYSIS_VERSION`.
    """

    events: list[Event]
    kpis: dict[str, Any]
    series: pd.DataFrame
    skipped: list[dict[str, str]]
    notes: dict[str, list[str]]
    thresholds: dict[str, float]
    laps: dict[str, Any] = field(default_factory=dict)
    version: str = ANALYSIS_VERSION
    analysed_at: str = field(
        default_factory=lambda: datetime.now(UTC).isoformat(timespec="seconds")
    )

    def summary(self, run_id: str | None = None) -> dict[str, Any]:
        """JSON-serialisable summary (everything but the events and series)."""
        return _clean_json(
            {
                "run": run_id,
                "kpis": self.kpis,
                "skipped": self.skipped,
                "notes": self.notes,
                "thresholds": self.thresholds,
                "analysis_version": self.version,
                "analysed_at": self.analysed_at,
                "event_counts": _count_events(self.events),
                "laps": self.laps,
            }
        )

    def to_json(self, run_id: str | None = None) -> dict[str, Any]:
        """The JSON shape of ``outrigger analyse --json`` and the API."""
        out = self.summary(run_id)
        out["events"] = [_clean_json(e.to_dict()) for e in self.events]
        return out


def _count_events(events: list[Event]) -> dict[str, int]:
    counts = dict.fromkeys(catalogue.EVENT_KINDS, 0)
    for e in events:
        counts[e.kind] = counts.get(e.kind, 0) + 1
    return counts


def _clean_json(value: Any) -> Any:
    """Make a value JSON-safe: numpy scalars to Python, NaN/inf to None."""
    if isinstance(value, dict):
        return {str(k): _clean_json(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean_json(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def analyse_frame(
    frame: pd.DataFrame,
    profile: RobotProfile,
    thresholds: Thresholds | None = None,
    progress: Progress | None = None,
    lap_start_m: float | None = None,
    *,
    laps: bool = True,
) -> AnalysisResult:
    """Run every detector on one analysis frame.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s] plus canonical SI signals (see ``analysis.catalogue``).
    profile : RobotProfile
        The robot the run was driven with.
    thresholds : Thresholds, optional
        Overrides ``profile.thresholds``.
    progress : callable, optional
        Called with (fraction done [-], message).
    lap_start_m : float, optional
        Start line of the laps, from the run's start (stored for its course). [m]
    laps : bool
        Look for laps (False for a chunk of a longer run, whose laps are found once
        the whole run is done).

    Returns
    -------
    AnalysisResult
        A detector that lacks a signal is listed in ``skipped`` with the reason;
        the others still run.
    """
    th = thresholds or profile.thresholds
    events: list[Event] = []
    kpis: dict[str, Any] = {}
    skipped: list[dict[str, str]] = []
    notes: dict[str, list[str]] = {}
    base = pd.DataFrame({catalogue.T: frame[catalogue.T].to_numpy(dtype=float)})
    parts: list[pd.DataFrame] = []  # joined once at the end, not copied detector by detector
    names = {catalogue.T}
    for i, (name, detect) in enumerate(DETECTORS):
        if progress:
            progress(i / len(DETECTORS), f"running detector {name}")
        result = detect(frame, profile, th)
        if result.notes:
            notes[name] = list(result.notes)
        if result.skipped:
            skipped.append({"detector": name, "reason": result.skipped})
            continue
        events.extend(result.events)
        kpis[name] = result.kpis
        if not result.series.empty:
            extra = result.series.drop(columns=[catalogue.T], errors="ignore")
            if len(extra) != len(base):
                raise ValueError(
                    f"Detector {name} returned {len(extra)} series rows for a frame of "
                    f"{len(base)}; derived series must share the frame's time base."
                )
            extra = extra.loc[:, [c for c in extra.columns if c not in names]]
            names.update(extra.columns)
            parts.append(extra.reset_index(drop=True))
    series = pd.concat([base, *parts], axis=1) if parts else base
    events.sort(key=lambda e: (e.start_s, e.kind, e.channel or ""))
    if progress:
        progress(0.98, "finding laps")
    lap_result: dict[str, Any] = {}
    if laps:
        lap_result = lap_report(
            frame,
            series,
            events,
            profile,
            find_laps(frame, profile, lap_start_m),
            [s["detector"] for s in skipped],
        )
    if progress:
        progress(1.0, "analysis done")
    return AnalysisResult(
        events=events,
        kpis=kpis,
        series=series,
        skipped=skipped,
        notes=notes,
        thresholds=th.to_file_dict(),
        laps=lap_result,
    )


def analyse_run(
    archive: Archive,
    run_id: str,
    thresholds: Thresholds | None = None,
    progress: Progress | None = None,
    *,
    chunk_s: float | None = None,
) -> AnalysisResult:
    """Analyse a stored run and replace its stored results atomically.

    A run longer than two chunks (:data:`analysis.detect.chunked.CHUNK_S`) is read
    and analysed in time chunks, in memory that does not grow with its length; the
    results are those of one whole-run pass (see :mod:`analysis.detect.chunked`).

    Parameters
    ----------
    archive : Archive
        The run archive.
    run_id : str
        Id of a stored run.
    thresholds : Thresholds, optional
        Overrides the thresholds of the profile stored with the run.
    progress : callable, optional
        Called with (fraction done [-], message).
    chunk_s : float, optional
        Core length of a chunk; :data:`~analysis.detect.chunked.CHUNK_S` when None. [s]

    Returns
    -------
    AnalysisResult
        After a chunked analysis ``series`` holds the column names only (no rows):
        the series went to the archive chunk by chunk.
    """
    profile = archive.load_profile(run_id)
    size = CHUNK_S if chunk_s is None else float(chunk_s)
    t_all = archive.load_frame(run_id, columns=[])[catalogue.T].to_numpy(dtype=float)
    span = float(t_all[-1] - t_all[0]) if t_all.size else 0.0
    fallback = None
    if span > 2.0 * size:
        try:
            return _analyse_run_chunked(archive, run_id, profile, thresholds, progress, t_all, size)
        except NotChunkableError as why:
            fallback = (
                f"Analysed as one whole-run pass instead of in time chunks: {why}. This needs "
                f"memory in proportion to the run's length."
            )
    del t_all
    frame = archive.load_frame(run_id)
    start = course_start_line(archive.root, archive.get_meta(run_id).get("course"))
    result = analyse_frame(frame, profile, thresholds, progress, lap_start_m=start)
    if fallback:
        result.notes.setdefault("pipeline", []).append(fallback)
    events = events_frame(result.events)
    overview = build_overview(frame, result.series)  # the Run page's first draw
    summary = result.summary(run_id)
    archive.write_results(run_id, events, result.series, summary, overview)
    write_fleet_rows(
        archive.root, run_id, archive.get_meta(run_id), events, result.kpis, results_stamp(summary)
    )
    return result


def _analyse_run_chunked(
    archive: Archive,
    run_id: str,
    profile: RobotProfile,
    thresholds: Thresholds | None,
    progress: Progress | None,
    t_all: np.ndarray,
    chunk_s: float,
) -> AnalysisResult:
    """:func:`analyse_run` in time chunks (see :mod:`analysis.detect.chunked`)."""
    th = thresholds or profile.thresholds
    staging = archive.new_staging()
    try:
        path = staging / "series.parquet"
        writer = FrameWriter(path, background=True)  # written while the next chunk runs
        cache = RowGroupCache()  # each row group decoded once as the chunks move on
        # The laps' columns (and the roll lag's) are kept as the chunks pass when the run
        # is short enough for its laps to be found; the laps are then found on a thread
        # while the roll lag is.
        lapped = t_all.size <= MAX_LAP_SAMPLES
        try:
            done = analyse_in_chunks(
                lambda t0, t1: archive.load_frame(run_id, t0=t0, t1=t1, cache=cache),
                t_all,
                profile,
                th,
                lambda frame: analyse_frame(frame, profile, th, laps=False),
                writer.write,
                load_columns=lambda names, t0, t1: archive.load_frame(
                    run_id, columns=names, t0=t0, t1=t1
                ),
                chunk_s=chunk_s,
                progress=progress,
                keep=(
                    [*lap_frame_columns(profile), catalogue.ROLL_REF, catalogue.ROLL]
                    if lapped
                    else None
                ),
                keep_series=lap_series_columns(profile) if lapped else None,
                alongside=(
                    (lambda done: _laps_of_chunked_run(archive, run_id, profile, done))
                    if lapped
                    else None
                ),
            )
        finally:
            writer.close()  # also on an error: no thread left writing into the staging
        if progress:
            progress(1.0, "analysis done")
        laps = done.alongside or {}
        if not lapped:
            done.notes.setdefault("laps", []).append(
                f"Laps were not looked for: the run has {t_all.size:,} samples, more than "
                f"the {MAX_LAP_SAMPLES:,} the lap KPIs can hold in memory at once."
            )
        result = AnalysisResult(
            events=done.events,
            kpis=done.kpis,
            series=pd.DataFrame(columns=done.series_columns),
            skipped=done.skipped,
            notes=done.notes,
            thresholds=th.to_file_dict(),
            laps=laps,
        )
        events = events_frame(result.events)
        summary = result.summary(run_id)
        archive.write_results(run_id, events, path, summary, done.overview)
    finally:
        archive.discard_staging(staging)
    write_fleet_rows(
        archive.root, run_id, archive.get_meta(run_id), events, result.kpis, results_stamp(summary)
    )
    return result


#: Most samples a chunked run may have for its laps to be found (the lap KPIs need the
#: whole run's frame and derived series at once: about 1.4 h at 400 Hz). [-]
MAX_LAP_SAMPLES = 2_000_000


def lap_frame_columns(profile: RobotProfile) -> list[str]:
    """The frame columns that finding laps and their KPIs read (:mod:`analysis.laps`,
    :mod:`analysis.lap_kpis`): speed and yaw rate for the course shape, pitch rate for
    wheel odometry against the leg, each actuator's velocity and torque for the energy."""
    names = [catalogue.T, catalogue.YAW_RATE, catalogue.VEL_X, catalogue.PITCH_RATE]
    for a in profile.actuators:
        names += [
            catalogue.actuator_signal(a.name, q)
            for q in (catalogue.VEL, catalogue.TORQUE, catalogue.TORQUE_CMD)
        ]
    return names


def lap_series_columns(profile: RobotProfile) -> list[str]:
    """The derived series that the lap KPIs read (:mod:`analysis.lap_kpis`, as float)."""
    names = [catalogue.T, catalogue.TIP_MARGIN, catalogue.ROLL_ERROR]
    return names + [f"{a.name}.{catalogue.SATURATED}" for a in profile.actuators]


def _laps_of_chunked_run(
    archive: Archive, run_id: str, profile: RobotProfile, done: ChunkedAnalysis
) -> dict[str, Any]:
    """Laps and per-lap KPIs of a run analysed in chunks, from its kept columns."""
    frame, series = done.kept, done.kept_series
    assert frame is not None and series is not None
    start = course_start_line(archive.root, archive.get_meta(run_id).get("course"))
    with run_median_period(done.median_dt):  # that of frame["t"], known already
        return lap_report(
            frame,
            series,
            done.events,
            profile,
            find_laps(frame, profile, start),
            [s["detector"] for s in done.skipped],
        )


def sync_fleet(archive: Archive) -> list[str]:
    """Bring the fleet tables in line with the stored results (the truth).

    Rows of a run whose stamp differs from its results (an analysis stopped
    between storing its results and writing its fleet rows, or rows written by an
    older version) are rewritten from the stored events and KPIs; rows of runs
    that are gone or not analysed are removed. Returns the runs whose rows changed.
    """
    changed = []
    analysed = set()
    for run in archive.list_runs():
        stored = archive.read_results(run["run_id"]) if run["analysed"] else None
        if stored is None:
            continue
        run_id = run["run_id"]
        analysed.add(run_id)
        events, summary = stored
        stamp = results_stamp(summary)
        if fleet_stamp(archive.root, run_id) != stamp:
            meta = archive.get_meta(run_id)
            write_fleet_rows(archive.root, run_id, meta, events, summary.get("kpis", {}), stamp)
            changed.append(run_id)
    for run_id in sorted(fleet_run_ids(archive.root) - analysed):
        delete_fleet_rows(archive.root, run_id)
        changed.append(run_id)
    return changed


def load_analysis(archive: Archive, run_id: str) -> dict[str, Any] | None:
    """Return the stored analysis of a run in the JSON shape of :meth:`AnalysisResult.to_json`.

    None if the run was never analysed.
    """
    stored = archive.read_results(run_id)
    if stored is None:
        return None
    events_df, summary = stored
    out = dict(summary)
    out["run"] = run_id
    out["events"] = events_records(events_df)
    return out


def events_records(events_df: pd.DataFrame) -> list[dict[str, Any]]:
    """Stored events table -> list of event dicts (detail parsed back from JSON text)."""
    records = []
    for row in events_df.to_dict(orient="records"):
        detail = row.get("detail")
        row["detail"] = json.loads(detail) if isinstance(detail, str) and detail else {}
        ch = row.get("channel")
        row["channel"] = None if ch is None or (isinstance(ch, float) and math.isnan(ch)) else ch
        records.append(_clean_json(row))
    return records
