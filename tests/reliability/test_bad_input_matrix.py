"""Bad inputs through the CLI and the API in one child process, its memory bounded.

Every case must end in a clear refusal (CLI exit 2 with a message; API 4xx, or an
upload job that fails with our own error type and message), or be stored with the
bad rows reported, never in a crash; and the child's peak RSS (``VmHWM``, read
from ``/proc/self/status``; proc(5)) stays under 1 GiB over all of them (issue 11).
"""

from __future__ import annotations

import gzip
import json
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

from tests.analysis.ingest_kit import PROFILE, map_text, state_lines, write
from tests.reliability.measure import ROOT, RSS_LIMIT_BYTES
from tests.reliability.test_bounded_memory import HEADER, _gzip_stream

#: The app's upload limit in the child; its decompressed-text cap is 20x that. [MiB]
UPLOAD_MB = 2


def _cases(d: Path) -> list[dict[str, Any]]:
    good_map = d / "map.toml"
    good_map.write_text(map_text())
    deep_map = d / "deep.toml"
    deep_map.write_text("a = " + "[" * 5000 + "]" * 5000 + "\n")
    nan_map = d / "nan.toml"
    nan_map.write_text(map_text().replace('unit = "deg" }', 'unit = "deg", scale = nan }'))
    lines = state_lines(3000)
    far = list(lines)
    far[1500] = "9000000000000000000," + far[1500].split(",", 1)[1]
    only_far = [*lines[:2], *("9000000000000000000," + r.split(",", 1)[1] for r in lines[2:60])]
    long_plain = list(lines)
    long_plain[700] = "1" * (3 << 19)  # 1.5 MiB
    files: dict[str, Path] = {
        # ~0.75 MB on disk, 768 MiB of "0" with no line break once decompressed
        "bomb_line": _gzip_stream(d / "bomb_state.csv.gz", HEADER, b"0", 768 << 20),
        "far_row": write(d / "far_state.csv", far),
        "only_far_rows": write(d / "onlyfar_state.csv", only_far),
        "long_plain_line": write(d / "longline_state.csv", long_plain),
        "binary": d / "bin_state.csv",
        "empty": d / "empty_state.csv",
        "long_json_line": d / "long_state.jsonl",
        "too_much_text": d / "big_state.csv.gz",
    }
    files["binary"].write_bytes(os.urandom(4096) + b"\x00")
    files["empty"].write_bytes(b"")
    files["long_json_line"].write_text(
        json.dumps({"stamp_us": 1, "roll_deg": 0, "speed": 0, "note": "x" * (3 << 19)}) + "\n"
    )
    row = b"1795858260000000,0.1,1.5\n"
    files["too_much_text"].write_bytes(gzip.compress(HEADER + row * ((45 << 20) // len(row)), 9))
    cases = []
    for name, path in files.items():
        cmap = good_map
        cases.append(_case(name, path, cmap))
    cases.append(_case("deep_map", files["far_row"], deep_map))
    cases.append(_case("nan_scale", files["far_row"], nan_map))
    return cases


def _case(name: str, log: Path, cmap: Path) -> dict[str, Any]:
    return {
        "name": name,
        "cli": ["ingest", str(log), "--map", str(cmap), "--profile", str(PROFILE),
                "--max-text-mb", str(20 * UPLOAD_MB)],
        "upload": {"files": [str(log)], "map": str(cmap), "profile": str(PROFILE)},
    }  # fmt: skip


#: name -> (CLI exit code, words in every message, stored?)
EXPECTED = {
    "bomb_line": (2, "longer than 1 MiB", False),
    "far_row": (0, "", True),
    "only_far_rows": (2, "outside the plausible range", False),
    "long_plain_line": (2, "longer than 1 MiB", False),
    "binary": (2, "binary", False),
    "empty": (2, "empty", False),
    "long_json_line": (2, "longer than 1 MiB", False),
    "too_much_text": (2, "decompressed", False),
    "deep_map": (2, "nested too deeply", False),
    "nan_scale": (2, "scale", False),
}


@pytest.fixture(scope="module")
def matrix(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    d = tmp_path_factory.mktemp("matrix")
    spec = {"cases": _cases(d), "data": str(d / "data"), "max_upload_mb": UPLOAD_MB}
    (d / "spec.json").write_text(json.dumps(spec))
    done = subprocess.run(
        [sys.executable, "-m", "tests.reliability.matrix_child", str(d / "spec.json")],
        cwd=ROOT, env=dict(os.environ, PYTHONPATH=str(ROOT)),
        capture_output=True, text=True, timeout=600, check=False,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr[-3000:]
    out: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return out


def test_peak_memory_over_the_whole_matrix_stays_under_1_gib(matrix):
    assert matrix["peak_rss_bytes"] < RSS_LIMIT_BYTES, matrix["peak_rss_bytes"] / 2**20


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_bad_input_is_refused_clearly_through_cli_and_api(matrix, name):
    code, words, stored = EXPECTED[name]
    got = matrix["results"][name]
    assert got["cli_code"] == code, got["cli_message"]
    assert "Traceback" not in got["cli_message"]
    assert words in got["cli_message"]
    if got["status"] == 202:
        job = got["job"]
        assert job["state"] == ("done" if stored else "failed"), job
        if not stored:
            assert job["error"]["type"] != "InternalError"
            assert words in job["error"]["message"]
            assert "/tmp/" not in job["error"]["message"]
    else:
        assert not stored and got["status"] in (400, 413), got
        assert words in got["body"]["error"]["message"] or got["status"] == 413
