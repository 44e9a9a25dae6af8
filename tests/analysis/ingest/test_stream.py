"""Ingest: units, time, round trip and the messy-file matrix (small generated logs)."""

from __future__ import annotations

import gzip
import json
import math
from datetime import UTC, datetime, timedelta, timezone

import numpy as np
import pandas as pd
import pint
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import analysis.ingest.read as ingest_read
from analysis.archive.store import Archive
from analysis.ingest.stream import ingest_files
from tests.analysis.ingest_kit import (
    MAP,
    PROFILE,
    START_US,
    STATE_PERIOD_US,
    map_text,
    state_lines,
    state_row,
    torque_lines,
    write,
)

UREG = pint.UnitRegistry()  # an independent registry as the reference library


def _stream(archive: Archive, run_id: str, name: str = "state") -> pd.DataFrame:
    return pq.read_table(archive.root / "runs" / run_id / "streams" / f"{name}.parquet").to_pandas()


def _ingest(tmp_path, lines, fname="run_state.csv", cmap=MAP, **kw):
    archive = Archive(tmp_path / "data")
    path = write(tmp_path / fname, lines, **kw)
    out = ingest_files(archive, [path], cmap, PROFILE)
    return archive, out


def _map(tmp_path, **kw):
    path = tmp_path / "map.toml"
    path.write_text(map_text(**kw))
    return path


def test_round_trip_units_against_pint_and_definitions(tmp_path):
    archive = Archive(tmp_path / "data")
    s = write(tmp_path / "r1_state.csv", state_lines(400))
    q = write(tmp_path / "r1_torque.csv", torque_lines(100))
    out = ingest_files(archive, [s, q], MAP, PROFILE, name="round trip")
    st = _stream(archive, out.run_id)
    raw = pd.read_csv(s, comment="#")
    # pint (reference library): deg -> rad, deg/s -> rad/s, g0 -> m/s², mm -> m, rpm -> rad/s
    ref = {
        "roll": UREG.Quantity(raw.roll_deg.to_numpy(), "deg").to("rad").magnitude,
        "roll_rate": UREG.Quantity(raw.gyro_x_dps.to_numpy(), "deg/s").to("rad/s").magnitude,
        "accel_z": UREG.Quantity(raw.acc_z_g.to_numpy(), "g0").to("m/s**2").magnitude,
        "leg_l.length": UREG.Quantity(raw.leg_l_mm.to_numpy(), "mm").to("m").magnitude,
        "wheel_l.vel": UREG.Quantity(raw.whl_l_rpm.to_numpy(), "rpm").to("rad/s").magnitude,
        "vel_x": raw.speed.to_numpy(),
        # scale = -1 in the map flips the sign
        "pitch": -UREG.Quantity(raw.pitch_deg.to_numpy(), "deg").to("rad").magnitude,
    }
    for name, expected in ref.items():
        # 1e-12 relative: one multiplication in float64 either way
        np.testing.assert_allclose(st[name].to_numpy(), expected, rtol=1e-12, err_msg=name)
    # Definitions, independent of pint: 1 g0 = 9.80665 m/s² (ISO 80000-3); 60 rpm = 2π rad/s;
    # 180 deg = π rad (common practice, no source)
    g = st["accel_z"].to_numpy()[raw.acc_z_g.to_numpy() == 1.0]
    assert g == pytest.approx(9.80665, rel=1e-15)
    w = st["wheel_l.vel"].to_numpy()[raw.whl_l_rpm.to_numpy() == 60]
    assert w == pytest.approx(2 * math.pi, rel=1e-15)
    assert st["roll"].to_numpy() == pytest.approx(np.radians(raw.roll_deg.to_numpy()), rel=1e-14)
    # Time: µs since the epoch -> s since the first sample; exact to float64 rounding
    expected_t = (raw.stamp_us.to_numpy() - START_US) * 1e-6
    np.testing.assert_allclose(st["t"].to_numpy(), expected_t, rtol=0, atol=1e-12)
    assert list(st["extra.mode"][:2]) == ["stand", "drive"]
    assert st["extra.seq"].to_numpy() == pytest.approx(np.arange(400))
    tq = _stream(archive, out.run_id, "torque")
    # The torque log starts 1 ms after the state log: both share the run's origin.
    assert tq["t"].iloc[0] == pytest.approx(0.001, abs=1e-9)
    meta = archive.get_meta(out.run_id)
    assert meta["date"] == "2026-11-28T09:31:00Z"
    assert out.report["state"]["rate_hz"] == pytest.approx(400.0, rel=1e-9)
    assert out.report["torque"]["rate_hz"] == pytest.approx(100.0, rel=1e-6)


def test_origin_is_earliest_sample_of_any_file(tmp_path):
    archive = Archive(tmp_path / "data")
    s = write(tmp_path / "r_state.csv", state_lines(200))
    q = write(tmp_path / "r_torque.csv", torque_lines(50, start_ms=START_US / 1000 - 250.0))
    out = ingest_files(archive, [s, q], MAP, PROFILE)
    assert _stream(archive, out.run_id, "torque")["t"].iloc[0] == 0.0
    assert _stream(archive, out.run_id)["t"].iloc[0] == pytest.approx(0.25, abs=1e-9)
    assert archive.get_meta(out.run_id)["date"] == "2026-11-28T09:30:59.750000Z"


def test_iso8601_times_against_standard_library(tmp_path):
    stamps = [
        "2026-11-28T09:31:00+01:00",
        "2026-11-28T08:31:00.0025Z",
        "2026-11-28T03:01:00.005-05:30",
        "2026-11-28T08:31:00.0075+00:00",
    ]
    lines = ["time,roll_deg,speed"] + [f"{s},1.0,2.0" for s in stamps]
    cmap = _map(tmp_path, time_column="time", time_unit="iso8601")
    archive, out = _ingest(tmp_path, lines, cmap=cmap)
    # Standard library as the reference parser (3.11 accepts Z and fractional seconds)
    parsed = [datetime.fromisoformat(s) for s in stamps]
    expected = [(p - min(parsed)).total_seconds() for p in parsed]
    assert _stream(archive, out.run_id)["t"].tolist() == pytest.approx(expected, abs=1e-9)
    assert archive.get_meta(out.run_id)["date"] == "2026-11-28T08:31:00Z"


def test_boot_time_has_no_date_unless_given(tmp_path):
    lines = ["t_s,roll_deg,speed"] + [f"{12.5 + 0.01 * i:.2f},1,2" for i in range(50)]
    cmap = _map(tmp_path, time_column="t_s", time_unit="s", time_origin="boot")
    archive = Archive(tmp_path / "data")
    path = write(tmp_path / "b_state.csv", lines)
    out = ingest_files(archive, [path], cmap, PROFILE)
    assert archive.get_meta(out.run_id)["date"] is None
    assert _stream(archive, out.run_id)["t"].iloc[-1] == pytest.approx(0.49, abs=1e-9)
    archive.delete_run(out.run_id)
    out = ingest_files(archive, [path], cmap, PROFILE, date="2026-11-28T10:00:00+01:00")
    assert archive.get_meta(out.run_id)["date"] == "2026-11-28T09:00:00Z"
    assert out.run_id.startswith("20261128-0900-")


# --- the messy-file matrix --------------------------------------------------------------


def test_duplicates_exact_and_conflicting(tmp_path):
    lines = state_lines(300)
    row10 = lines[2 + 10]
    conflicting = row10.replace(row10.split(",")[1], "99.0", 1)
    lines = lines[:13] + [row10, conflicting] + lines[13:]
    archive, out = _ingest(tmp_path, lines)
    r = out.report["state"]
    assert (r["rows"], r["duplicates_dropped"], r["conflicting_timestamps_dropped"]) == (300, 1, 1)
    st = _stream(archive, out.run_id)
    # the first of the duplicated timestamps is kept
    assert st["roll"].iloc[10] == pytest.approx(math.radians(float(row10.split(",")[1])))


def test_out_of_order_rows_are_sorted_and_counted(tmp_path):
    lines = state_lines(300)
    lines[50], lines[51] = lines[51], lines[50]
    lines[200], lines[260] = lines[260], lines[200]
    archive, out = _ingest(tmp_path, lines)
    st = _stream(archive, out.run_id)
    assert np.all(np.diff(st["t"].to_numpy()) > 0)
    assert st["extra.seq"].to_numpy() == pytest.approx(np.arange(300))
    assert out.report["state"]["reordered_rows"] > 0
    assert out.report["state"]["rows"] == 300


def test_out_of_order_with_duplicates_across_blocks(tmp_path, monkeypatch):
    # Small blocks so that rows, duplicates and swaps straddle block boundaries.
    monkeypatch.setattr(ingest_read, "BLOCK_BYTES", 700)
    lines = state_lines(400)
    lines.insert(100, lines[99])  # exact duplicate of the row before
    lines[300], lines[150] = lines[150], lines[300]
    archive, out = _ingest(tmp_path, lines)
    st = _stream(archive, out.run_id)
    assert st["extra.seq"].to_numpy() == pytest.approx(np.arange(400))
    assert out.report["state"]["duplicates_dropped"] == 1


def test_nulls_kept_as_missing_not_skipped(tmp_path):
    lines = state_lines(300)
    cells = lines[20].split(",")
    cells[1] = ""
    cells[5] = ""
    lines[20] = ",".join(cells)
    archive, out = _ingest(tmp_path, lines)
    st = _stream(archive, out.run_id)
    assert out.report["state"]["skipped_lines"]["count"] == 0
    assert np.isnan(st["roll"].iloc[18]) and np.isnan(st["vel_x"].iloc[18])
    assert st["roll"].notna().sum() == 299


def test_garbage_and_truncated_lines_skipped_with_line_numbers(tmp_path, monkeypatch):
    monkeypatch.setattr(ingest_read, "BLOCK_BYTES", 4096)
    lines = state_lines(600)
    lines[100] = lines[100].replace(lines[100].split(",")[1], "n/a?", 1)
    lines.insert(400, "# operator note, not data")
    lines.append(state_row(600)[:20])  # truncated last line, no newline
    archive, out = _ingest(tmp_path, lines, final_newline=False)
    skipped = out.report["state"]["skipped_lines"]
    assert skipped["count"] == 2
    got = {(s["line"], s["reason"].split(" ")[0]) for s in skipped["lines"]}
    # lines[k] is file line k + 1
    assert got == {(101, "'n/a?'"), (len(lines), "expected")}
    assert out.report["state"]["rows"] == 599


@pytest.mark.parametrize("garbage", [False, True], ids=["fast-path", "slow-path"])
def test_quoted_fields_with_delimiters_and_quotes(tmp_path, monkeypatch, garbage):
    monkeypatch.setattr(ingest_read, "BLOCK_BYTES", 4096)
    lines = state_lines(300)
    # RFC 4180, section 2: a field in double quotes may hold the delimiter, and a double
    # quote inside it is written twice.
    lines[10] = lines[10].replace(",stand,", ',"stand, tethered",')
    lines[11] = lines[11].replace(",drive,", ',"drive ""slow""",')
    lines[12] = lines[12].replace(",stand,", ',"stand",')
    if garbage:  # a bad value in the same block sends it through the line-by-line path
        lines[20] = lines[20].replace(lines[20].split(",")[2], "??", 1)
    archive, out = _ingest(tmp_path, lines)
    st = _stream(archive, out.run_id)
    modes = st["extra.mode"].tolist()
    # lines[k] is file line k + 1 and row k - 2 (a comment line and the header come first)
    assert modes[8:11] == ["stand, tethered", 'drive "slow"', "stand"]
    assert st["leg_l.length"].iloc[8] == pytest.approx(0.250 + (8 % 7) / 1000)
    skipped = out.report["state"]["skipped_lines"]
    assert [s["line"] for s in skipped["lines"]] == ([21] if garbage else [])
    assert out.report["state"]["rows"] == 300 - garbage


def test_a_line_break_inside_quotes_is_reported_not_misread(tmp_path, monkeypatch):
    monkeypatch.setattr(ingest_read, "BLOCK_BYTES", 4096)
    lines = state_lines(300)
    head, tail = lines[50].split(",stand,")
    lines[50] = f'{head},"stand'
    lines.insert(51, f'by",{tail}')  # one record over file lines 51 and 52
    archive, out = _ingest(tmp_path, lines)
    skipped = out.report["state"]["skipped_lines"]
    assert {s["line"] for s in skipped["lines"]} == {51, 52}
    assert all("quote" in s["reason"] for s in skipped["lines"])
    assert out.report["state"]["rows"] == 299
    st = _stream(archive, out.run_id)
    assert not st["extra.mode"].str.contains("by").any()


@pytest.mark.parametrize(
    ("sep", "newline", "suffix"),
    [(";", "\n", ".csv"), ("\t", "\n", ".csv"), (",", "\r\n", ".csv"), (",", "\n", ".csv.gz")],
)
def test_delimiters_crlf_and_gzip(tmp_path, sep, newline, suffix):
    lines = state_lines(250, sep=sep)
    path = tmp_path / f"x_state{suffix}"
    text = (newline.join(lines) + newline).encode()
    path.write_bytes(gzip.compress(text) if suffix.endswith(".gz") else text)
    archive = Archive(tmp_path / "data")
    out = ingest_files(archive, [path], MAP, PROFILE)
    st = _stream(archive, out.run_id)
    assert len(st) == 250
    assert st["leg_l.length"].iloc[3] == pytest.approx(0.253)  # 253 mm
    assert st["extra.mode"].iloc[0] == "stand"


def test_json_lines_with_a_bad_line(tmp_path):
    rows = [
        json.dumps({"stamp_us": START_US + i * STATE_PERIOD_US, "roll_deg": 0.5 * i, "speed": 1.0})
        for i in range(200)
    ]
    rows.insert(50, '{"stamp_us": 17958582, "roll_deg": ')  # truncated line
    cmap = _map(tmp_path)
    archive = Archive(tmp_path / "data")
    path = write(tmp_path / "j_state.jsonl", rows)
    out = ingest_files(archive, [path], cmap, PROFILE)
    st = _stream(archive, out.run_id)
    assert len(st) == 200
    assert st["roll"].iloc[100] == pytest.approx(math.radians(50.0))
    assert out.report["state"]["skipped_lines"]["lines"][0]["line"] == 51


def test_parquet_input(tmp_path):
    n = 300
    table = pa.table(
        {
            "stamp_us": pa.array(START_US + np.arange(n) * STATE_PERIOD_US),
            "roll_deg": pa.array(np.linspace(-5, 5, n)),
            "speed": pa.array(np.full(n, 2.0)),
            "note": pa.array(["ok"] * n),
        }
    )
    path = tmp_path / "p_state.parquet"
    pq.write_table(table, path)
    archive = Archive(tmp_path / "data")
    out = ingest_files(archive, [path], _map(tmp_path), PROFILE)
    st = _stream(archive, out.run_id)
    assert st["roll"].to_numpy() == pytest.approx(np.radians(np.linspace(-5, 5, n)), rel=1e-14)
    assert out.report["state"]["extra_columns"] == ["extra.note"]
    # 300 samples at 400 Hz span 299 periods of 2.5 ms
    assert out.report["state"]["duration_s"] == pytest.approx(0.7475, abs=1e-9)


@pytest.mark.parametrize("group_rows", [None, 70, 1])
def test_parquet_input_in_row_groups_keeps_every_row_and_its_number(tmp_path, group_rows):
    """Read one row group at a time: rows in order, and a bad row named by its number."""
    n = 300
    stamps = (START_US + np.arange(n) * STATE_PERIOD_US).astype(float)
    stamps[149] = np.nan  # row 150 (rows numbered from 1): an empty time cell
    table = pa.table(
        {
            "stamp_us": pa.array(stamps, mask=np.isnan(stamps)).cast(pa.int64()),
            "roll_deg": pa.array(np.linspace(-5, 5, n)),
            "speed": pa.array(np.full(n, 2.0)),
        }
    )
    path = tmp_path / "g_state.parquet"
    pq.write_table(table, path, row_group_size=group_rows)
    assert pq.ParquetFile(path).num_row_groups == (1 if group_rows is None else -(-n // group_rows))
    archive = Archive(tmp_path / "data")
    out = ingest_files(archive, [path], _map(tmp_path), PROFILE)
    roll = np.delete(np.radians(np.linspace(-5, 5, n)), 149)
    assert _stream(archive, out.run_id)["roll"].to_numpy() == pytest.approx(roll, rel=1e-14)
    assert out.report["state"]["skipped_lines"]["count"] == 1
    assert out.report["state"]["skipped_lines"]["lines"][0]["row"] == 150


def test_gaps_are_found_never_filled(tmp_path):
    lines = state_lines(600)
    del lines[2 + 200 : 2 + 260]  # 60 missing samples = 150 ms at 400 Hz
    archive, out = _ingest(tmp_path, lines)
    gaps = out.report["state"]["gaps"]
    assert gaps["count"] == 1
    # row 199 at 0.4975 s, row 260 at 0.65 s (2.5 ms period)
    assert gaps["list"][0] == pytest.approx([0.4975, 0.65], abs=1e-9)
    assert out.report["state"]["rows"] == 540


def test_progress_reports_fractions(tmp_path):
    seen = []
    archive = Archive(tmp_path / "data")
    path = write(tmp_path / "g_state.csv", state_lines(100))
    ingest_files(archive, [path], MAP, PROFILE, progress=lambda f, m: seen.append(f))
    assert seen[0] == 0.0 and seen[-1] == 1.0
    assert all(0.0 <= f <= 1.0 for f in seen)


def test_time_zone_offsets_match_timedelta(tmp_path):
    # Same instant written in two zones must give t = 0 for both rows -> duplicate dropped.
    base = datetime(2026, 11, 28, 9, 31, tzinfo=UTC)
    other = base.astimezone(timezone(timedelta(hours=-3)))
    lines = ["time,roll_deg,speed", f"{base.isoformat()},1,2", f"{other.isoformat()},1,2"]
    lines += [f"{(base + timedelta(seconds=0.01 * i)).isoformat()},1,2" for i in range(1, 50)]
    cmap = _map(tmp_path, time_column="time", time_unit="iso8601")
    archive, out = _ingest(tmp_path, lines, cmap=cmap)
    assert out.report["state"]["duplicates_dropped"] == 1


def test_skipped_first_row_does_not_set_the_origin(tmp_path):
    lines = state_lines(300)
    lines[2] = lines[2].replace(lines[2].split(",")[1], "ERR", 1)  # the earliest row is bad
    archive, out = _ingest(tmp_path, lines)
    assert _stream(archive, out.run_id)["t"].iloc[0] == 0.0
    # the second row, 2.5 ms after 09:31:00, is the run's first sample
    assert archive.get_meta(out.run_id)["date"] == "2026-11-28T09:31:00.002500Z"


def test_a_ten_second_window_touches_at_most_two_row_groups(tmp_path):
    """The dashboard's zoom decodes every row group its window touches (pyarrow prunes
    the others by their ``t`` statistics): row groups must stay small on a long run."""
    # 400 Hz for 800 s: 320,000 rows, three row groups.
    n = 320_000
    table = pa.table(
        {
            "stamp_us": pa.array(START_US + np.arange(n) * STATE_PERIOD_US),
            "roll_deg": pa.array(np.sin(np.arange(n) / 400.0)),
            "speed": pa.array(np.full(n, 2.0)),
        }
    )
    path = tmp_path / "long_state.parquet"
    pq.write_table(table, path)
    archive = Archive(tmp_path / "data")
    run_id = ingest_files(archive, [path], _map(tmp_path), PROFILE).run_id
    meta = pq.ParquetFile(archive.root / "runs" / run_id / "streams" / "state.parquet").metadata
    groups = [meta.row_group(i) for i in range(meta.num_row_groups)]
    spans = [(g.column(0).statistics.min, g.column(0).statistics.max, g.num_rows) for g in groups]
    assert len(spans) >= 3 and sum(rows for *_, rows in spans) == n
    for t0 in (0.0, 300.0, 325.0, 655.0, 789.0):
        touched = [rows for lo, hi, rows in spans if hi >= t0 and lo <= t0 + 10.0]
        # At most two row groups of 2**17 rows (328 s at 400 Hz) per stream: about 20 ms
        # for a 10 s zoom of 22 columns (benchmarks/bench_dashboard.py, eight-hour run),
        # where groups of 2**20 rows took 100 ms of the 200 ms zoom budget.
        assert len(touched) <= 2 and sum(touched) <= 2 * 131_072
        window = archive.load_frame(run_id, ["roll"], t0, t0 + 10.0)
        # 10 s at 2.5 ms: 4,001 samples, both ends included.
        assert len(window) == 4001
