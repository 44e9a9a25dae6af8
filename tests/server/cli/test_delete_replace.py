"""`outrigger delete`, `ingest --replace`, and the map and profile in the duplicate check."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from analysis.archive.store import Archive
from analysis.ingest.identity import default_run_name, not_applied
from server.cli import main as cli
from tests.server.cli.test_archive import MAP, PROFILE, _state


@pytest.fixture(autouse=True)
def data_dir_from_env(monkeypatch, tmp_path):
    monkeypatch.setenv(cli.DATA_ENV, str(tmp_path / "env-data"))


def _ingest(tmp_path: Path, map_path: Path = MAP, *extra: str) -> dict:
    code = cli.main(["ingest", str(_state(tmp_path)), "--map", str(map_path), "--profile",
                     str(PROFILE), "--data", str(tmp_path / "d"), "--no-analyse", "--json",
                     *extra])  # fmt: skip
    assert code == 0
    return code


def _fixed_map(tmp_path: Path) -> Path:
    # The same files read with a corrected map: pitch no longer sign-flipped.
    text = MAP.read_text(encoding="utf-8").replace(
        'pitch_deg = { signal = "pitch", unit = "deg", scale = -1 }',
        'pitch_deg = { signal = "pitch", unit = "deg" }',
    )
    assert text != MAP.read_text(encoding="utf-8")
    path = tmp_path / "fixed_map.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _out(capsys) -> dict:
    return json.loads(capsys.readouterr().out)


def test_same_files_with_another_map_are_a_new_run_that_names_the_old(tmp_path, capsys):
    _ingest(tmp_path)
    first = _out(capsys)
    # Same map with other comments and layout: the same run (a duplicate).
    relaid = tmp_path / "relaid.toml"
    relaid.write_text("# moved\n" + MAP.read_text(encoding="utf-8"), encoding="utf-8")
    _ingest(tmp_path, relaid)
    assert _out(capsys)["duplicate_of"] == first["run_id"]
    _ingest(tmp_path, _fixed_map(tmp_path))
    second = _out(capsys)
    assert second["duplicate_of"] is None
    assert second["differs_from"] == first["run_id"]
    assert second["run_id"] != first["run_id"]
    assert len(Archive(tmp_path / "d").list_runs()) == 2


def test_duplicate_says_what_was_not_applied(tmp_path, capsys):
    _ingest(tmp_path, MAP, "--name", "first name")
    capsys.readouterr()
    code = cli.main(["ingest", str(_state(tmp_path)), "--map", str(MAP), "--profile",
                     str(PROFILE), "--data", str(tmp_path / "d"), "--no-analyse",
                     "--name", "new name", "--tag", "wet"])  # fmt: skip
    assert code == 0
    out = capsys.readouterr().out
    assert "nothing new stored" in out and "--replace" in out
    assert "Not applied" in out and "name 'new name' (stored: 'first name')" in out
    assert "tags wet (stored: none)" in out


def test_replace_stores_the_new_run_and_deletes_the_old(tmp_path, capsys):
    _ingest(tmp_path)
    old = _out(capsys)["run_id"]
    _ingest(tmp_path, _fixed_map(tmp_path), "--replace", old)
    new = _out(capsys)
    assert new["replaced"] == old and new["differs_from"] is None
    ids = [r["run_id"] for r in Archive(tmp_path / "d").list_runs()]
    assert ids == [new["run_id"]]
    # An identical ingest with --replace stores the run again instead of a duplicate.
    _ingest(tmp_path, _fixed_map(tmp_path), "--replace", new["run_id"])
    again = _out(capsys)
    assert again["duplicate_of"] is None and again["replaced"] == new["run_id"]
    assert len(Archive(tmp_path / "d").list_runs()) == 1


def test_replace_of_an_unknown_run_exits_2_before_any_work(tmp_path, capsys):
    code = cli.main(["ingest", str(_state(tmp_path)), "--map", str(MAP), "--profile",
                     str(PROFILE), "--data", str(tmp_path / "d"), "--replace", "nope"])  # fmt: skip
    assert code == 2
    assert "nope" in capsys.readouterr().err
    assert Archive(tmp_path / "d").list_runs() == []


def test_delete_asks_for_the_id_again(tmp_path, capsys, monkeypatch):
    _ingest(tmp_path)
    run_id = _out(capsys)["run_id"]
    data = ["--data", str(tmp_path / "d")]
    monkeypatch.setattr("builtins.input", lambda prompt: "wrong")
    assert cli.main(["delete", run_id, *data]) == 2
    assert "was not deleted" in capsys.readouterr().err
    assert len(Archive(tmp_path / "d").list_runs()) == 1
    monkeypatch.setattr("builtins.input", lambda prompt: run_id)
    assert cli.main(["delete", run_id, *data]) == 0
    assert f"deleted run {run_id}" in capsys.readouterr().out
    assert Archive(tmp_path / "d").list_runs() == []


def test_delete_yes_and_unknown_run(tmp_path, capsys):
    _ingest(tmp_path)
    run_id = _out(capsys)["run_id"]
    data = ["--data", str(tmp_path / "d")]
    assert cli.main(["delete", run_id, "--yes", *data]) == 0
    assert cli.main(["delete", run_id, "--yes", *data]) == 2
    assert run_id in capsys.readouterr().err


def test_default_name_and_not_applied() -> None:
    assert default_run_name(["t7_state.csv", "t7_torque.csv"]) == "t7"
    assert default_run_name(["imu.csv.gz"]) == "imu"
    assert default_run_name(["a.csv", "b.csv"]) == "a"
    meta = {"name": "x", "course": "loop", "tags": ["a"]}
    assert not_applied(meta, {"name": "x", "course": None, "tags": ["a"]}) == []
    assert not_applied(meta, {"course": "hill"}) == ["course 'hill' (stored: 'loop')"]
