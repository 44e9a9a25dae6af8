"""Analysis in time chunks gives the whole-run results: events, KPIs, series, overview.

The reference is the project's own whole-run pass (``analyse_frame`` and
``build_overview`` on the whole frame), which is what the chunked pass must
reproduce; the chunk lengths are odd (17.3 s, 23.9 s) so that window edges fall
inside turns and events, and a check asserts that events do straddle them.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import scipy.signal as sps

from analysis import catalogue as cat
from analysis.archive.store import Archive
from analysis.demo.logs import demo_profile, simulate_run
from analysis.detect import chunked
from analysis.detect.chunk_lag import lag_in_chunks
from analysis.detect.chunked import analyse_in_chunks, chunk_margin_s, filter_settle_s
from analysis.detect.pipeline import analyse_frame, analyse_run, load_analysis
from analysis.ingest.stream import ingest_files
from analysis.metrics import lag_by_xcorr
from analysis.overview import build_overview

#: KPIs are sums and extremes over the chunks instead of over the run at once; only
#: the order of the floating-point additions differs, so they agree to a few ulp of
#: each addend; 1e-9 relative is far above that and far below any rounding a person
#: reads (common practice, no source).
KPI_REL = 1e-9
#: The sliding RMS torque is a difference of two cumulative sums started at the
#: chunk's first sample instead of the run's: the same window, a different
#: rounding, of the order of eps times (run energy / window energy) < 1e-12 N*m here.
RMS_ABS = 1e-12


def _compare(whole, part, path=""):
    """Assert two KPI trees equal, floats to KPI_REL."""
    if isinstance(whole, dict):
        assert set(whole) == set(part), f"{path}: keys differ {set(whole) ^ set(part)}"
        for k in whole:
            _compare(whole[k], part[k], f"{path}/{k}")
    elif isinstance(whole, float) and isinstance(part, float):
        if math.isnan(whole):
            assert math.isnan(part), path
        else:
            assert part == pytest.approx(whole, rel=KPI_REL, abs=1e-300), path
    else:
        assert whole == part, path


@pytest.fixture(scope="module")
def demo_frames():
    profile = demo_profile()
    runs = [simulate_run("lean-ctl 2.0", seed=3, fall=True), simulate_run("lean-ctl 1.4", seed=1)]
    return profile, [(r.frame, analyse_frame(r.frame, profile)) for r in runs]


def _chunked(frame, profile, chunk_s):
    parts: list[pd.DataFrame] = []

    def load(t0, t1):
        return frame[(frame[cat.T] >= t0) & (frame[cat.T] <= t1)].reset_index(drop=True)

    out = analyse_in_chunks(
        load,
        frame[cat.T].to_numpy(),
        profile,
        profile.thresholds,
        lambda f: analyse_frame(f, profile),
        parts.append,
        load_columns=lambda names, t0, t1: load(t0, t1)[[cat.T, *names]],
        chunk_s=chunk_s,
    )
    return out, pd.concat(parts, ignore_index=True)


def _awkward_chunk(frame, events, margin):
    """A chunk length whose first window ends inside the longest event that allows it."""
    t0, t1 = float(frame[cat.T].iloc[0]), float(frame[cat.T].iloc[-1])
    mid = [0.5 * (e.start_s + e.end_s) for e in events]
    fit = [
        (e.duration_s, m)
        for e, m in zip(events, mid, strict=True)
        if t0 + 2 * margin < m < t1 - margin - 1
    ]
    return max(fit)[1] - t0 - margin


@pytest.mark.parametrize("chunk_s", [17.3, 23.9, "awkward"])
def test_chunked_equals_whole_run(demo_frames, chunk_s):
    profile, cases = demo_frames
    straddled = 0
    for frame, whole in cases:
        size = chunk_s
        if size == "awkward":
            size = _awkward_chunk(frame, whole.events, chunk_margin_s(profile.thresholds))
        part, series = _chunked(frame, profile, size)
        assert part.chunks >= 2
        # Event by event: same kind, channel, sample times, peak and details.
        assert [e.to_dict() for e in part.events] == [e.to_dict() for e in whole.events]
        _compare(whole.kpis, part.kpis)
        assert part.skipped == whole.skipped
        assert part.notes == whole.notes
        # Derived series: every sample, same time base.
        assert list(series.columns) == list(whole.series.columns)
        for name in series.columns:
            a = whole.series[name].to_numpy(dtype=float)
            b = series[name].to_numpy(dtype=float)
            if name.endswith(cat.TORQUE_RMS):
                np.testing.assert_allclose(b, a, rtol=0, atol=RMS_ABS, err_msg=name)
            else:
                np.testing.assert_array_equal(b, a, err_msg=name)
        # Overview: same signals, spans and sample counts; same points except where
        # the RMS torque's rounding (above) picks another of two equal bucket extremes.
        ov, ref = part.overview, build_overview(frame, whole.series)
        assert list(ov.signals) == list(ref.signals)
        assert ov.spans == ref.spans
        for name, sig in ref.signals.items():
            got = ov.signals[name]
            assert (got.source, got.samples) == (sig.source, sig.samples), name
            if not name.endswith(cat.TORQUE_RMS):
                np.testing.assert_array_equal(got.t, sig.t, err_msg=name)
                np.testing.assert_array_equal(got.y, sig.y, err_msg=name)
        # Where a window's end cut an event, the stitching had to defer it.
        ends = [hi for _, hi, cut in part.windows if math.isfinite(cut)]
        straddled += sum(any(e.start_s < x < e.end_s for x in ends) for e in whole.events)
    if chunk_s == "awkward":
        assert straddled >= len(cases)


def test_filter_settle_time_matches_scipy_impulse_response():
    # scipy.signal: the impulse response of butter(2, 5 Hz) at 400 Hz decays to
    # below 1e-16 of its peak within the settle time (40 time constants of the
    # slowest pole, 2 pi f_c sin(pi/4) rad/s).
    fs, fc = 400.0, 5.0
    settle = filter_settle_s(fc)
    assert settle == pytest.approx(40.0 / (2 * math.pi * fc * math.sin(math.pi / 4)), rel=1e-12)
    sos = sps.butter(2, fc, fs=fs, output="sos")
    n = int(round(2 * settle * fs))
    x = np.zeros(n)
    x[0] = 1.0
    h = np.abs(sps.sosfilt(sos, x))
    after = h[int(round(settle * fs)) :]
    assert after.max() < 1e-16 * h.max()


def test_margin_covers_every_window(demo_frames):
    profile, _ = demo_frames
    th = profile.thresholds
    margin = chunk_margin_s(th)
    assert margin >= th.thermal_window_s + th.merge_gap_s + th.min_duration_s
    assert margin >= th.fall_end_window_s
    assert margin >= filter_settle_s(th.accel_cutoff)


def test_quiet_time_steps_back_over_events():
    ev = [
        chunked.Event("slip", "wheel_l", 9.0, 10.0, 0.0),
        chunked.Event("slip", "wheel_l", 10.2, 11.0, 0.0),
    ]
    # guard 0.25: spans 8.75..10.25 and 9.95..11.25 join; the cut lands just before 8.75
    assert chunked._quiet_time(ev, 5.0, 10.5, 0.25, 0.001) == pytest.approx(8.749)
    assert chunked._quiet_time(ev, 9.0, 10.5, 0.25, 0.001) is None
    assert chunked._quiet_time(ev, 5.0, 12.0, 0.25, 0.001) == 12.0


@pytest.fixture(scope="module")
def archived_run(tmp_path_factory):
    """One demo run of demo_logs/ in a scratch archive."""
    from pathlib import Path

    root = Path(__file__).resolve().parents[3] / "demo_logs"
    archive = Archive(tmp_path_factory.mktemp("chunked") / "archive")
    files = [root / "loop-lean20-a_state.csv.gz", root / "loop-lean20-a_torque.csv.gz"]
    run_id = ingest_files(archive, files, root / "channel-map.toml", root / "marram-2.toml").run_id
    return archive, run_id


def test_analyse_run_in_chunks_stores_whole_run_results(archived_run):
    archive, run_id = archived_run
    whole = analyse_run(archive, run_id)  # the demo run is short: one pass
    whole_stored = load_analysis(archive, run_id)
    whole_series = archive.read_result_series(run_id)
    part = analyse_run(archive, run_id, chunk_s=19.7)
    assert part.series.empty and list(part.series.columns) == list(whole.series.columns)
    stored = load_analysis(archive, run_id)
    assert "pipeline" not in stored["notes"]  # no fallback to one pass
    assert stored["events"] == whole_stored["events"]
    _compare(whole_stored["kpis"], stored["kpis"])
    series = archive.read_result_series(run_id)
    assert list(series.columns) == list(whole_series.columns)
    assert len(series) == len(whole_series)
    for name in series.columns:  # stored sample by sample (RMS torque: see RMS_ABS)
        a, b = whole_series[name].to_numpy(dtype=float), series[name].to_numpy(dtype=float)
        if name.endswith(cat.TORQUE_RMS):
            np.testing.assert_allclose(b, a, rtol=0, atol=RMS_ABS, err_msg=name)
        else:
            np.testing.assert_array_equal(b, a, err_msg=name)


def test_laps_of_a_chunked_run_equal_those_of_one_pass(tmp_path):
    """Laps of a chunked run come from the lap columns alone (pipeline.lap_frame_columns and
    lap_series_columns, kept as the chunks pass),
    not the whole frame: the same laps and per-lap KPIs as the one pass."""
    from tests.server.lap_archive import store_lap_run

    archive = Archive(tmp_path / "archive")
    run_id = store_lap_run(archive, tmp_path / "in", "lean-ctl 2.0", 52, 0.015)  # one pass
    whole = load_analysis(archive, run_id)
    assert len(whole["laps"]["kpis"]) >= 8, "the ring run should have laps to compare"
    part = analyse_run(archive, run_id, chunk_s=23.9)
    assert part.series.empty  # analysed in chunks
    stored = load_analysis(archive, run_id)
    assert "pipeline" not in stored["notes"]
    assert json.dumps(stored["laps"], sort_keys=True) == json.dumps(whole["laps"], sort_keys=True)


@pytest.mark.parametrize("jitter", [False, True])
def test_roll_lag_in_chunks_equals_one_pass(jitter):
    # Reference: analysis.metrics.lag_by_xcorr on the whole arrays (one pass).
    rng = np.random.default_rng(5)
    n = 40_000
    t = np.arange(n) * 0.0025
    if jitter:  # uneven stamps, two data gaps and NaN runs: the interpolated branch
        t = t + rng.uniform(-2e-4, 2e-4, n)
        t[15_000:] += 0.3
        t[31_000:] += 1.1
    ref = np.sin(2 * np.pi * 0.3 * t) + 0.2 * np.sin(2 * np.pi * 1.7 * t)
    y = np.interp(t - 0.042, t, ref) + rng.normal(0, 0.01, n)
    ref[5_000:5_010] = np.nan
    y[22_000:22_600] = np.nan
    y[:30] = np.nan

    def read(t0, t1):
        m = (t >= t0) & (t <= t1)
        return t[m], ref[m], y[m]

    ok_r, ok_y = np.isfinite(ref), np.isfinite(y)
    span = (t[ok_r][0], t[ok_r][-1], t[ok_y][0], t[ok_y][-1])
    med = float(np.median(np.diff(t)))
    whole = lag_by_xcorr(t, ref, y, 1.0)
    part = lag_in_chunks(read, t, lambda: span, 1.0, 7.3, med)
    assert whole.reason is None and part.reason is None
    # sums in another order: the same peak lag, agreeing to rounding (KPI_REL)
    assert part.lag_s == pytest.approx(whole.lag_s, rel=KPI_REL)
    assert part.correlation == pytest.approx(whole.correlation, rel=KPI_REL)
    assert part.at_bound == whole.at_bound


def test_row_group_cache_reads_as_read_table(tmp_path):
    # Reference: pyarrow.parquet.read_table with the same t filters.
    import pyarrow as pa
    import pyarrow.parquet as pq

    from analysis.archive.files import RowGroupCache

    n = 300_000
    t = np.arange(n) * 0.0025
    path = tmp_path / "s.parquet"
    pq.write_table(pa.table({"t": t, "x": np.sin(t)}), path, row_group_size=70_000)
    cache = RowGroupCache()
    # forward windows, a grown window, one going back, open bounds
    for lo, hi in [(10.0, 100.0), (90.0, 250.0), (90.0, 400.0), (380.0, 749.0), (5.0, 20.0),
                   (None, 3.0), (700.0, None)]:  # fmt: skip
        filters = [f for f in (("t", ">=", lo), ("t", "<=", hi)) if f[2] is not None]
        ref = pq.read_table(path, filters=filters or None)
        got = cache.read(path, ["t", "x"], lo, hi)
        assert got.equals(ref.select(["t", "x"])), (lo, hi)


def test_a_chunk_that_runs_other_detectors_is_refused(demo_frames):
    # The roll reference missing for a whole chunk: the roll detector is "not run"
    # there but runs elsewhere, which no chunked pass can stitch into a whole-run one.
    profile, cases = demo_frames
    frame = cases[1][0].copy()
    t = frame[cat.T].to_numpy()
    assert t[-1] > 80.0  # room for a whole chunk window (17.3 s + 2 margins) inside the hole
    frame.loc[(t > 12.0) & (t < t[-1] - 12.0), cat.ROLL_REF] = np.nan
    with pytest.raises(chunked.NotChunkableError, match="other detectors or methods"):
        _chunked(frame, profile, 17.3)


def test_an_error_on_the_tail_thread_reaches_the_caller(demo_frames, monkeypatch):
    """A chunk's KPI sums and overview run on a thread; its error is the caller's."""
    import threading

    from analysis.detect import chunked

    profile, cases = demo_frames
    frame = cases[0][0]
    calls = {"n": 0}
    real_add = chunked.OverviewBuilder.add

    def failing_add(self, table, source):
        calls["n"] += 1
        if calls["n"] == 3:  # the second chunk's frame rows
            raise RuntimeError("overview broke")
        return real_add(self, table, source)

    monkeypatch.setattr(chunked.OverviewBuilder, "add", failing_add)
    with pytest.raises(RuntimeError, match="overview broke"):
        _chunked(frame, profile, 17.3)
    assert calls["n"] == 3
    assert not [t for t in threading.enumerate() if t.name.startswith("chunk-tail")]
