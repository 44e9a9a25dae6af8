"""Hostile timestamps: implausible or far-off rows are bad lines, never a crash or a huge run.

Issue 11, item 3. Rows are built with :mod:`tests.analysis.ingest_kit`; row ``i`` of
``state_lines`` is file line ``i + 3``. The plausible ranges are the documented ones
(README, "Limits"): 1990..2100 UTC for epoch clocks, within 30 days for boot clocks.
"""

from __future__ import annotations

import pytest

from analysis.archive.store import Archive
from analysis.errors import IngestError
from analysis.ingest.stream import ingest_files
from tests.analysis.ingest_kit import (
    MAP,
    PROFILE,
    START_US,
    STATE_PERIOD_US,
    map_text,
    state_lines,
    write,
)

N = 3000
#: The real span of N rows at 400 Hz. [s]
SPAN_S = (N - 1) * STATE_PERIOD_US * 1e-6


def _with_time(lines: list[str], row: int, stamp: str) -> list[str]:
    out = list(lines)
    parts = out[row + 2].split(",")
    parts[0] = stamp
    out[row + 2] = ",".join(parts)
    return out


def _ingest(tmp_path, lines, cmap=MAP):
    archive = Archive(tmp_path / "data")
    path = write(tmp_path / "t_state.csv", lines)
    return archive, ingest_files(archive, [path], cmap, PROFILE)


def _skipped(report):
    return report["state"]["skipped_lines"]


@pytest.mark.parametrize("stamp", ["9000000000000000000", "100000000000000000", "-5"])
def test_one_implausible_epoch_row_is_skipped_and_the_duration_is_real(tmp_path, stamp):
    # 9e18 µs (year ~287,000) and 1e17 µs (year ~5138) are the two cases.
    lines = _with_time(state_lines(N), 1500, stamp)
    archive, out = _ingest(tmp_path, lines)
    skipped = _skipped(out.report)
    assert skipped["count"] == 1
    assert skipped["lines"][0]["line"] == 1503
    assert "outside the plausible range 1990-01-01 .. 2100-01-01" in skipped["lines"][0]["reason"]
    # Duration from the real rows: N - 2 steps of 2.5 ms survive around the gap row.
    # Exact up to float rounding of µs -> s (1e-9 s).
    assert out.report["state"]["duration_s"] == pytest.approx(SPAN_S, abs=1e-6)
    assert archive.get_meta(out.run_id)["duration_s"] == pytest.approx(SPAN_S, abs=1e-6)


def test_a_far_off_row_inside_the_range_is_skipped_as_a_spike(tmp_path):
    # One row a day later (2026-11-29, plausible on its own) between two rows 5 ms apart.
    lines = _with_time(state_lines(N), 1000, str(START_US + 86_400_000_000))
    _, out = _ingest(tmp_path, lines)
    skipped = _skipped(out.report)
    assert skipped["count"] == 1 and skipped["lines"][0]["line"] == 1003
    assert "far from its neighbours" in skipped["lines"][0]["reason"]
    assert out.report["state"]["duration_s"] == pytest.approx(SPAN_S, abs=1e-6)


def test_a_real_logging_gap_is_kept(tmp_path):
    # A pause of 60 s is one jump that never comes back: a gap, not a spike.
    lines = state_lines(N) + [
        ",".join([str(START_US + N * STATE_PERIOD_US + 60_000_000 + i * STATE_PERIOD_US)]
                 + lines_tail.split(",")[1:])
        for i, lines_tail in enumerate(state_lines(400)[2:])
    ]  # fmt: skip
    _, out = _ingest(tmp_path, lines)
    assert _skipped(out.report)["count"] == 0
    assert out.report["state"]["gaps"]["count"] == 1


def test_boot_clock_row_beyond_30_days_is_skipped(tmp_path):
    cmap = tmp_path / "map.toml"
    cmap.write_text(map_text(time_origin="boot"))
    lines = _with_time(state_lines(N, start_us=5_000_000), 10, str(40 * 86400 * 10**6))
    archive = Archive(tmp_path / "data")
    path = write(tmp_path / "b_state.csv", lines)
    out = ingest_files(archive, [path], cmap, PROFILE, date="2026-11-28T09:31:00Z")
    skipped = _skipped(out.report)
    assert skipped["count"] == 1 and skipped["lines"][0]["line"] == 13
    assert "within 30 days" in skipped["lines"][0]["reason"]
    assert out.report["state"]["duration_s"] == pytest.approx(SPAN_S, abs=1e-6)


def test_a_log_of_only_implausible_times_is_refused_with_the_reason(tmp_path):
    lines = state_lines(50)
    for row in range(50):
        lines = _with_time(lines, row, str(9 * 10**18 + row))
    archive = Archive(tmp_path / "data")
    path = write(tmp_path / "x_state.csv", lines)
    with pytest.raises(IngestError, match="outside the plausible range"):
        ingest_files(archive, [path], MAP, PROFILE)
    assert archive.list_runs() == []


def test_nan_and_inf_values_are_counted_per_column_in_the_report(tmp_path):
    # Issue 11, item 10: NaN / inf values in a log are kept (not invented away) and counted.
    lines = state_lines(N)
    for row, (roll, speed) in {
        10: ("nan", "inf"),
        11: ("NaN", "1.5"),
        12: ("-inf", "-inf"),
    }.items():
        parts = lines[row + 2].split(",")
        parts[1], parts[5] = roll, speed
        lines[row + 2] = ",".join(parts)
    _, out = _ingest(tmp_path, lines)
    # CSV "nan"/"NaN" cells are read as missing, like empty cells (pyarrow's null values).
    assert out.report["state"]["non_finite"] == {
        "roll": {"missing": 2, "nan": 0, "inf": 1},
        "vel_x": {"missing": 0, "nan": 0, "inf": 2},
    }
    assert _skipped(out.report)["count"] == 0
