"""Refused inputs: each gives a clear error and leaves the archive exactly as it was."""

from __future__ import annotations

import sqlite3

import pytest

from analysis.archive.store import Archive
from analysis.errors import ChannelMapError, IngestError, ProfileError
from analysis.ingest.stream import ingest_files
from tests.analysis.ingest_kit import MAP, PROFILE, map_text, state_lines, torque_lines, write


def _snapshot(archive: Archive) -> tuple[list[str], list[tuple]]:
    files = sorted(str(p.relative_to(archive.root)) for p in archive.root.rglob("*"))
    with sqlite3.connect(archive.root / "catalog.sqlite") as con:
        rows = con.execute("SELECT * FROM runs ORDER BY run_id").fetchall()
    return files, rows


@pytest.fixture
def archive(tmp_path):
    return Archive(tmp_path / "data")


def _refused(archive, files, cmap, profile, error, match):
    before = _snapshot(archive)
    with pytest.raises(error, match=match):
        ingest_files(archive, files, cmap, profile)
    assert _snapshot(archive) == before


def test_missing_time_column(tmp_path, archive):
    lines = state_lines(50)
    lines[1] = lines[1].replace("stamp_us", "stamp")
    path = write(tmp_path / "a_state.csv", lines)
    _refused(
        archive,
        [path],
        MAP,
        PROFILE,
        ChannelMapError,
        r"time column 'stamp_us'.*columns found: stamp, roll_deg",
    )


def test_map_names_absent_column(tmp_path, archive):
    lines = state_lines(50)
    lines[1] = lines[1].replace("whl_l_rpm", "wheel_rpm")
    path = write(tmp_path / "a_state.csv", lines)
    _refused(
        archive,
        [path],
        MAP,
        PROFILE,
        ChannelMapError,
        r"'whl_l_rpm' absent from the file \(columns found: .*wheel_rpm",
    )


def test_unknown_unit(tmp_path, archive):
    cmap = tmp_path / "m.toml"
    cmap.write_text(map_text(extra='gyro_x_dps = { signal = "roll_rate", unit = "degs_per_sec" }'))
    path = write(tmp_path / "a_state.csv", state_lines(50))
    _refused(
        archive,
        [path],
        cmap,
        PROFILE,
        ChannelMapError,
        r"'degs_per_sec' is unknown to the units library",
    )


def test_wrong_dimension_names_expected_unit(tmp_path, archive):
    cmap = tmp_path / "m.toml"
    cmap.write_text(map_text(extra='whl_l_rpm = { signal = "wheel_l.torque", unit = "deg" }'))
    path = write(tmp_path / "a_state.csv", state_lines(50))
    _refused(
        archive,
        [path],
        cmap,
        PROFILE,
        ChannelMapError,
        r"'deg' has the wrong dimension for 'wheel_l.torque', which expects 'N\*m'",
    )


def test_unknown_signal_lists_valid_names(tmp_path, archive):
    cmap = tmp_path / "m.toml"
    cmap.write_text(map_text(extra='whl_l_rpm = { signal = "wheel_left.vel", unit = "rpm" }'))
    path = write(tmp_path / "a_state.csv", state_lines(50))
    _refused(
        archive,
        [path],
        cmap,
        PROFILE,
        ChannelMapError,
        r"unknown signal 'wheel_left.vel'. Valid signals: roll, pitch.*wheel_l.vel",
    )


def test_profile_missing_field(tmp_path, archive):
    profile = tmp_path / "p.toml"
    profile.write_text(PROFILE.read_text().replace("track_width_m = 0.42\n", ""))
    path = write(tmp_path / "a_state.csv", state_lines(50))
    _refused(archive, [path], MAP, profile, ProfileError, r"missing robot.track_width_m")


def test_not_a_log_format(tmp_path, archive):
    path = tmp_path / "a_state.bin"
    path.write_bytes(bytes(range(256)) * 4)
    _refused(archive, [path], MAP, PROFILE, IngestError, r"neither CSV, Parquet nor JSON Lines")


def test_empty_file(tmp_path, archive):
    path = tmp_path / "a_state.csv"
    path.write_bytes(b"")
    _refused(archive, [path], MAP, PROFILE, IngestError, r"a_state.csv is empty")


def test_header_without_rows(tmp_path, archive):
    path = write(tmp_path / "a_state.csv", state_lines(0))
    _refused(archive, [path], MAP, PROFILE, IngestError, r"empty: a header but no data rows")


def test_too_many_bad_lines_named(tmp_path, archive):
    lines = state_lines(200)
    lines[10] = lines[10].replace(",", ";")  # wrong delimiter: 1 field
    lines[20] = lines[20].replace(lines[20].split(",")[2], "abc", 1)
    lines[30] = lines[30][:15]
    path = write(tmp_path / "a_state.csv", lines)
    # 3 bad lines of 200 = 1.5% > 1%
    _refused(
        archive,
        [path],
        MAP,
        PROFILE,
        IngestError,
        r"3 of 200 lines do not parse \(1\.5%.*line 11: expected 10 fields, found 1.*line 21: 'abc' in column 'pitch_deg'.*line 31",
    )


def test_file_matching_no_source(tmp_path, archive):
    path = write(tmp_path / "a_imu.csv", state_lines(50))
    _refused(
        archive,
        [path],
        MAP,
        PROFILE,
        ChannelMapError,
        r"'a_imu.csv' matches no source.*state: '\*_state\.\*'",
    )


def test_file_matching_two_sources(tmp_path, archive):
    cmap = tmp_path / "m.toml"
    cmap.write_text(MAP.read_text().replace('files = "*_torque.*"', 'files = "*.csv"'))
    path = write(tmp_path / "a_state.csv", state_lines(50))
    _refused(archive, [path], cmap, PROFILE, ChannelMapError, r"matches 2 sources")


def test_bad_second_file_stores_nothing(tmp_path, archive):
    # The state file is fine and fully streamed before the torque file is refused.
    s = write(tmp_path / "a_state.csv", state_lines(300))
    lines = torque_lines(100)
    for k in (5, 6, 7):
        lines[k] = "garbage,"
    q = write(tmp_path / "a_torque.csv", lines)
    _refused(archive, [s, q], MAP, PROFILE, IngestError, r"a_torque.csv: 3 of 100 lines")
    assert list((archive.root / "staging").iterdir()) == []


def test_bad_date_refused(tmp_path, archive):
    path = write(tmp_path / "a_state.csv", state_lines(50))
    with pytest.raises(IngestError, match="not ISO 8601"):
        ingest_files(archive, [path], MAP, PROFILE, date="28/11/2026")
