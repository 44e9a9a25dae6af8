"""``outrigger course-marks``: stored marks split every comparison on that course."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from analysis.archive.store import Archive
from analysis.ingest.stream import ingest_files
from server.cli.main import main

DEMO = Path(__file__).resolve().parents[3] / "demo_logs"


@pytest.fixture(scope="module")
def two_versions(tmp_path_factory):
    root = tmp_path_factory.mktemp("marks")
    ids = []
    for name, controller in (("loop-lean14-a", "lean-ctl 1.4"), ("loop-lean20-a", "lean-ctl 2.0")):
        ids.append(
            ingest_files(
                Archive(root),
                [DEMO / f"{name}_state.csv.gz", DEMO / f"{name}_torque.csv.gz"],
                DEMO / "channel-map.toml",
                DEMO / "marram-2.toml",
                course="gullhaven-loop",
                controller=controller,
            ).run_id
        )
    return root, ids


def _segments(root, ids, capsys):
    assert main(["compare", *ids, "--json", "--n-boot", "200", "--data", str(root)]) == 0
    out = json.loads(capsys.readouterr().out)
    return out["segments"], out["settings"]["segments_from"]


def test_stored_marks_split_the_comparison(two_versions, capsys):
    root, ids = two_versions
    _, source = _segments(root, ids, capsys)
    assert source == "curvature"
    assert main(["course-marks", "gullhaven-loop", "30,80", "--data", str(root)]) == 0
    capsys.readouterr()
    segments, source = _segments(root, ids, capsys)
    assert source == "distance marks"
    inner = sorted({round(s["start_m"], 6) for s in segments} - {round(segments[0]["start_m"], 6)})
    assert inner == [30.0, 80.0]
    assert main(["course-marks", "gullhaven-loop", "--clear", "--data", str(root)]) == 0


def test_bad_marks_exit_2_with_the_reason(two_versions, capsys):
    root, _ = two_versions
    assert main(["course-marks", "gullhaven-loop", "80,30", "--data", str(root)]) == 2
    assert "must increase" in capsys.readouterr().err
