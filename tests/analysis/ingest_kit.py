"""Small generated logs for the ingest and archive tests (invented robot Marram-2).

Logs are built as lists of text lines so that a test can break one on purpose
(duplicate, swap, truncate, garble) and know the file line number it broke:
``lines[k]`` is file line ``k + 1``.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

DATA = Path(__file__).resolve().parent.parent / "data" / "ingest"
PROFILE = DATA / "marram2_profile.toml"
MAP = DATA / "marram2_map.toml"

START_US = 1_795_858_260_000_000  # 2026-11-28T09:31:00Z in µs since the Unix epoch
STATE_PERIOD_US = 2_500  # 400 Hz
TORQUE_PERIOD_MS = 10.0  # 100 Hz

STATE_HEADER = "stamp_us,roll_deg,pitch_deg,gyro_x_dps,acc_z_g,speed,leg_l_mm,whl_l_rpm,mode,seq"


def state_row(i: int, start_us: int = START_US, sep: str = ",") -> str:
    """One state line; values are simple functions of the row index."""
    values = [
        str(start_us + i * STATE_PERIOD_US),
        f"{10 * math.sin(i / 50):.4f}",
        f"{2 + 0.001 * i:.4f}",
        f"{30 + i % 5:.1f}",
        f"{1 + 0.01 * (i % 3):.2f}",
        f"{1.5 + 0.001 * i:.4f}",
        f"{250 + i % 7}",
        f"{60 + i % 11}",
        "drive" if i % 2 else "stand",
        str(i),
    ]
    return sep.join(values)


def state_lines(n: int = 1000, start_us: int = START_US, sep: str = ",") -> list[str]:
    """A comment line, the header and ``n`` rows (file line of row i is i + 3)."""
    return ["# Marram-2 state log, gullhaven-loop", STATE_HEADER.replace(",", sep)] + [
        state_row(i, start_us, sep) for i in range(n)
    ]


def torque_lines(
    n: int = 250, start_ms: float = START_US / 1000 + 1.0, sep: str = ","
) -> list[str]:
    """Header and ``n`` torque rows at 100 Hz (file line of row i is i + 2)."""
    rows = [sep.join(["t_ms", "tq_l_cmd", "tq_l_req"])]
    for i in range(n):
        rows.append(
            sep.join(
                [f"{start_ms + i * TORQUE_PERIOD_MS:.1f}", f"{0.01 * i:.3f}", f"{0.012 * i:.3f}"]
            )
        )
    return rows


def write(path: Path, lines: list[str], newline: str = "\n", final_newline: bool = True) -> Path:
    """Write lines with the given line ending."""
    text = newline.join(lines) + (newline if final_newline else "")
    path.write_bytes(text.encode())
    return path


def map_text(
    time_column: str = "stamp_us",
    time_unit: str = "us",
    time_origin: str = "epoch",
    files: str = "*_state.*",
    extra: str = "",
) -> str:
    """A one-source state map with the given time settings."""
    return f"""
[[source]]
name = "state"
files = "{files}"
kind = "state"
time_column = "{time_column}"
time_unit = "{time_unit}"
time_origin = "{time_origin}"

[source.columns]
roll_deg = {{ signal = "roll", unit = "deg" }}
speed = {{ signal = "vel_x", unit = "m/s" }}
{extra}
"""


@pytest.fixture()
def short_runs_allowed(monkeypatch: pytest.MonkeyPatch) -> None:
    """Let ingest store runs shorter than its 2 s / 10-sample minimum.

    Many ingest and archive tests use logs of a few hundred rows (under 2 s at
    400 Hz) to check other things; the minimum itself is tested in
    ``tests/server/test_odd_input.py``, where this fixture is not used.
    """
    import analysis.ingest.stream as stream

    monkeypatch.setattr(stream, "MIN_DURATION_S", 0.0)
    monkeypatch.setattr(stream, "MIN_SAMPLES", 1)
