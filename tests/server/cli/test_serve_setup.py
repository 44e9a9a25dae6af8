"""Before serving: a port in use is said in words; the demo's map and profile are stored."""

from __future__ import annotations

import socket
from pathlib import Path

import pytest

from analysis.archive.store import Archive
from analysis.errors import ArchiveError
from server.cli.serve import check_port, store_demo_configs

DEMO = Path(__file__).resolve().parents[3] / "demo_logs"


def test_a_port_in_use_is_said_with_how_to_pick_another() -> None:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen(1)
        port = busy.getsockname()[1]
        with pytest.raises(ArchiveError) as err:
            check_port("127.0.0.1", port)
    text = str(err.value)
    assert f"Port {port} on 127.0.0.1 is already in use" in text
    assert "make demo PORT=8400" in text and "--port" in text
    check_port("127.0.0.1", port)  # free again: no error


def test_demo_map_and_profile_are_stored_once(tmp_path: Path) -> None:
    archive = Archive(tmp_path / "archive")
    assert store_demo_configs(archive, DEMO) == ["map/demo-channel-map", "profile/demo-marram-2"]
    assert archive.list_configs("map") == ["demo-channel-map"]
    assert archive.list_configs("profile") == ["demo-marram-2"]
    assert store_demo_configs(archive, DEMO) == []  # kept, never overwritten
