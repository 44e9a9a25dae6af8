"""Upload refuses a decompression bomb or an endless line with 400, as the bytes arrive.

Issue 11, item 1: ``--max-upload-mb`` counted only compressed bytes. Now every log
part is inflated in steps while it is received and checked against the documented
limits (README, "Limits"): longest line 1 MiB, decompressed text 20x the upload limit.
"""

from __future__ import annotations

import gzip
from pathlib import Path

from tests.reliability.test_bounded_memory import HEADER, _gzip_stream
from tests.server.dashboard_fixtures import RunInputs, fresh_app, upload_form


def _with_log(inputs: RunInputs, name: str, data: bytes):
    parts, fields = upload_form(inputs)
    parts = [p for p in parts if p[0] != "files"] + [("files", (name, data))]
    return parts, fields


def _refused(tmp_path: Path, inputs: RunInputs, name: str, data: bytes) -> str:
    with fresh_app(tmp_path / "archive", max_upload_mb=2) as c:
        parts, fields = _with_log(inputs, name, data)
        response = c.post("/api/upload", files=parts, data=fields)
        assert response.status_code == 400, response.text
        assert c.get("/api/jobs").json()["jobs"] == []
        assert list(c.app.state.upload_root.iterdir()) == []  # type: ignore[attr-defined]
        message: str = response.json()["detail"]
        return message


def test_gzip_bomb_upload_is_refused_at_once(tmp_path, planted_inputs):
    # ~0.75 MB holding a header and 768 MiB of "0" with no line break.
    bomb = _gzip_stream(tmp_path / "b.csv.gz", HEADER, b"0", 768 << 20, level=9).read_bytes()
    assert len(bomb) < 1 << 20
    message = _refused(tmp_path, planted_inputs, "bomb_state.csv.gz", bomb)
    assert "bomb_state.csv.gz: line 2 is longer than 1 MiB" in message


def test_upload_whose_text_passes_20x_the_limit_is_refused(tmp_path, planted_inputs):
    row = b"1795858260000000,0.1,1.5\n"
    data = gzip.compress(HEADER + row * ((45 << 20) // len(row)), 9)
    assert len(data) < 2 << 20  # within the 2 MiB upload limit as sent
    message = _refused(tmp_path, planted_inputs, "big_state.csv.gz", data)
    assert "passes 40 MiB once decompressed" in message


def test_plain_upload_with_one_long_line_is_refused(tmp_path, planted_inputs):
    data = HEADER + b"1,2,3\n" * 10 + b"9" * (3 << 19) + b"\n1,2,3\n"
    message = _refused(tmp_path, planted_inputs, "long_state.csv", data)
    assert "line 12 is longer than 1 MiB" in message


def test_two_gzip_members_and_ordinary_logs_pass_the_guard(tmp_path, planted_inputs):
    text = planted_inputs.logs[0].read_bytes()
    half = text.rfind(b"\n", 0, len(text) // 2) + 1
    data = gzip.compress(text[:half]) + gzip.compress(text[half:])  # RFC 1952 members
    with fresh_app(tmp_path / "archive") as c:
        parts, fields = _with_log(planted_inputs, "plant_state.csv.gz", data)
        assert c.post("/api/upload", files=parts, data=fields).status_code == 202
