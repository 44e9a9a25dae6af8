"""Decompression bombs and endless lines: refused with the limit named, memory bounded.

Each input runs through the real command line in a child process whose peak RSS
(``VmHWM``) is read from ``/proc`` (see :mod:`tests.reliability.measure`). The bound,
1 GiB for any input, is the one issue 11 sets; the limits themselves are the
documented ones (README, "Limits").
"""

from __future__ import annotations

import gzip
import zlib
from pathlib import Path

import pytest

from analysis.ingest.read import MAX_LINE_BYTES
from tests.analysis.ingest_kit import PROFILE, map_text, state_lines, write
from tests.reliability.measure import RSS_LIMIT_BYTES, run_cli

HEADER = b"stamp_us,roll_deg,speed\n"


def _gzip_stream(path: Path, head: bytes, filler: bytes, total: int) -> Path:
    """Write ``head`` then ``total`` bytes of ``filler`` repeated, gzip level 1, in chunks."""
    comp = zlib.compressobj(1, zlib.DEFLATED, 31)  # wbits 31: gzip wrapper (zlib docs)
    chunk = filler * ((8 << 20) // len(filler))
    with path.open("wb") as fh:
        fh.write(comp.compress(head))
        left = total
        while left > 0:
            piece = chunk[: min(len(chunk), left)]
            fh.write(comp.compress(piece))
            left -= len(piece)
        fh.write(comp.flush())
    return path


@pytest.fixture
def map_file(tmp_path):
    path = tmp_path / "map.toml"
    path.write_text(map_text())
    return path


def _ingest(tmp_path, map_file, log, *extra):
    return run_cli(
        ["ingest", str(log), "--map", str(map_file), "--profile", str(PROFILE),
         "--data", str(tmp_path / "data"), "--no-analyse", *extra]
    )  # fmt: skip


def test_gzip_bomb_of_one_endless_line_is_refused_within_the_memory_bound(tmp_path, map_file):
    # Issue 11, item 1: a ~10 MB .csv.gz holding a header and 2 GiB of "0" with no newline.
    bomb = _gzip_stream(tmp_path / "bomb_state.csv.gz", HEADER, b"0", 2 << 30)
    assert bomb.stat().st_size < 16 << 20
    got = _ingest(tmp_path, map_file, bomb)
    assert not got.killed, f"child passed the watchdog: peak {got.peak_bytes / 2**20:.0f} MiB"
    assert got.code == 2, got.stderr
    assert "longer than" in got.stderr and "1 MiB" in got.stderr
    assert "line 2" in got.stderr
    assert got.peak_bytes < RSS_LIMIT_BYTES, f"peak {got.peak_bytes / 2**20:.0f} MiB"
    assert not any((tmp_path / "data" / "runs").iterdir())


def test_plain_csv_with_one_50_mb_line_is_refused(tmp_path, map_file):
    # Issue 11: "a single 50 MB line costs about 1 GiB"; here it is refused at the limit.
    lines = state_lines(2000)
    path = tmp_path / "long_state.csv"
    text = "\n".join(lines[:500]) + "\n" + "1" * (50 << 20) + "\n" + "\n".join(lines[500:]) + "\n"
    path.write_text(text)
    got = _ingest(tmp_path, map_file, path)
    assert got.code == 2, got.stderr
    assert f"{MAX_LINE_BYTES // 2**20} MiB" in got.stderr and "line 501" in got.stderr
    assert got.peak_bytes < RSS_LIMIT_BYTES


def test_decompressed_size_is_capped_while_streaming(tmp_path, map_file):
    # A well-formed log whose text passes the decompressed-size cap: refused, cap named.
    lines = state_lines(60_000)  # ~4 MB of text, 150 s at 400 Hz
    path = tmp_path / "big_state.csv.gz"
    path.write_bytes(gzip.compress(("\n".join(lines) + "\n").encode(), 1))
    got = _ingest(tmp_path, map_file, path, "--max-text-mb", "2")
    assert got.code == 2, got.stderr
    assert "2 MiB" in got.stderr and "decompressed" in got.stderr
    assert not any((tmp_path / "data" / "runs").iterdir())
    ok = _ingest(tmp_path, map_file, path, "--max-text-mb", "8")
    assert ok.code == 0, ok.stderr


def test_a_log_within_the_limits_still_ingests(tmp_path, map_file):
    path = write(tmp_path / "fine_state.csv", state_lines(2000))
    got = _ingest(tmp_path, map_file, path)
    assert got.code == 0, got.stderr
    assert got.peak_bytes < RSS_LIMIT_BYTES
