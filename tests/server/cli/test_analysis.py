"""``outrigger analyse`` and ``outrigger check`` on a bundled demo run."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from analysis.archive.store import Archive
from analysis.ingest.stream import ingest_files
from server.cli.main import main

DEMO = Path(__file__).resolve().parents[3] / "demo_logs"


@pytest.fixture(scope="module")
def archive_with_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("archive")
    outcome = ingest_files(
        Archive(root),
        [DEMO / "loop-lean14-a_state.csv.gz", DEMO / "loop-lean14-a_torque.csv.gz"],
        DEMO / "channel-map.toml",
        DEMO / "marram-2.toml",
        name="loop-lean14-a",
        course="gullhaven-loop",
        controller="lean-ctl 1.4",
    )
    return root, outcome.run_id


def test_analyse_json(archive_with_run, capsys):
    root, run_id = archive_with_run
    assert main(["analyse", run_id, "--json", "--data", str(root)]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["run"] == run_id
    assert {e["kind"] for e in out["events"]} >= {"saturation", "slip", "low_tip_margin"}
    assert out["skipped"] == []

    # --json keeps full precision rounded to 6 significant digits (issue 13, item 4).
    def floats(x):
        if isinstance(x, float):
            yield x
        elif isinstance(x, dict):
            for v in x.values():
                yield from floats(v)
        elif isinstance(x, list):
            for v in x:
                yield from floats(v)

    values = list(floats(out))
    assert values and all(float(f"{v:.6g}") == v for v in values)


def test_analyse_with_thresholds_replaces_results(archive_with_run, tmp_path, capsys):
    root, run_id = archive_with_run
    th = tmp_path / "th.toml"
    th.write_text("[thresholds]\ntip_margin_on = 0.05\ntip_margin_off = 0.1\n")
    assert main(["analyse", run_id, "--json", "--thresholds", str(th), "--data", str(root)]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["thresholds"]["tip_margin_on"] == pytest.approx(0.05)
    stored = Archive(root).read_results(run_id)
    assert stored is not None and stored[1]["thresholds"]["tip_margin_on"] == pytest.approx(0.05)
    # Back to the profile's thresholds for the other tests.
    assert main(["analyse", run_id, "--data", str(root)]) == 0


def test_check_passes_and_fails(archive_with_run, tmp_path, capsys):
    root, run_id = archive_with_run
    loose = tmp_path / "loose.toml"
    loose.write_text("[limits]\nfalls_max = 0\ntip_margin_min = -1.0\n")
    assert main(["check", run_id, "--limits", str(loose), "--data", str(root)]) == 0
    assert "every limit" in capsys.readouterr().out
    strict = tmp_path / "strict.toml"
    # The 1.4 demo run dips below 0.3 in the fast curve (planted), so 0.3 must break.
    strict.write_text("[limits]\ntip_margin_min = 0.3\nfalls_max = 0\n")
    assert main(["check", run_id, "--limits", str(strict), "--data", str(root)]) == 1
    out = capsys.readouterr().out
    assert "BROKEN tip_margin_min" in out
    # The limits that held are listed too (issue 13, item 10).
    assert "held   falls_max: falls is 0, at most 0." in out
    assert "1 limit(s) broken, 1 held" in out
    assert main(["check", run_id, "--limits", str(strict), "--data", str(root), "--json"]) == 1
    data = json.loads(capsys.readouterr().out)
    assert [c["held"] for c in data["checks"]] == [False, True]
    assert data["held"] == ["falls_max: falls is 0, at most 0."]


def test_check_bad_limits_file_exits_2(archive_with_run, tmp_path, capsys):
    root, run_id = archive_with_run
    bad = tmp_path / "bad.toml"
    bad.write_text("[limits]\nspeed = 3\n")
    assert main(["check", run_id, "--limits", str(bad), "--data", str(root)]) == 2
    assert "Unknown limit key" in capsys.readouterr().err


def test_analyse_unknown_run_exits_2(archive_with_run, capsys):
    root, _ = archive_with_run
    assert main(["analyse", "no-such-run", "--data", str(root)]) == 2
    assert "no-such-run" in capsys.readouterr().err


def test_fleet_tables_follow_analysis_and_cli_filters(archive_with_run, capsys):
    root, run_id = archive_with_run
    assert main(["analyse-all", "--data", str(root)]) == 0
    assert run_id in capsys.readouterr().out
    assert main(["fleet", "events", "--kind", "saturation", "--csv", "--data", str(root)]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].startswith("kind,") and len(lines) > 1
    assert all(line.startswith("saturation,") for line in lines[1:])
    assert main(["fleet", "events", "--kind", "wobble", "--data", str(root)]) == 2
    assert "Unknown event kind" in capsys.readouterr().err
