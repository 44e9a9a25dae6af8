"""A real server under 20 concurrent uploads plus CLI ingests of the same files.

Issue 11: two ingests of one log stored it twice. Here 20 uploads start together
against ``outrigger serve`` on 127.0.0.1 (15 of the same run, 5 of other runs) while
two CLI ingests of the same run run beside them: the archive ends with one run per
log, every upload of the shared run reports the same run id, and every answer of
the live server carries the security headers. The server is then killed with
SIGKILL mid-upload and its upload folder is gone after the next start.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import httpx
import pytest

from analysis.archive.store import Archive
from tests.analysis.ingest_kit import MAP, PROFILE, state_lines, torque_lines, write
from tests.reliability.measure import ROOT


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
        return port


class Served:
    """``outrigger serve`` in a child process on 127.0.0.1."""

    def __init__(self, data: Path) -> None:
        self.port = _free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "server.cli.main", "serve", "--data", str(data),
             "--host", "127.0.0.1", "--port", str(self.port)],
            cwd=ROOT, env=dict(os.environ, PYTHONPATH=str(ROOT)),
            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip
        deadline = time.monotonic() + 60
        while True:
            try:
                httpx.get(f"{self.url}/api/meta", timeout=1)
                return
            except httpx.HTTPError as exc:
                if self.proc.poll() is not None or time.monotonic() > deadline:
                    err = self.proc.stderr.read() if self.proc.stderr else ""
                    raise RuntimeError(f"server did not start: {err}") from exc
                time.sleep(0.1)

    def stop(self, sig: int = signal.SIGTERM) -> None:
        self.proc.send_signal(sig)
        self.proc.wait(timeout=30)


def _form(files: list[Path]) -> list[tuple[str, tuple[str, bytes]]]:
    parts = [("files", (p.name, p.read_bytes())) for p in files]
    parts.append(("map_file", ("map.toml", MAP.read_bytes())))
    parts.append(("profile_file", ("profile.toml", PROFILE.read_bytes())))
    return parts


def _upload_and_wait(url: str, files: list[Path]) -> dict:
    with httpx.Client(base_url=url, timeout=120) as c:
        r = c.post("/api/upload", files=_form(files))
        assert r.status_code == 202, r.text
        job_id = r.json()["job"]["id"]
        deadline = time.monotonic() + 300
        while time.monotonic() < deadline:
            job = c.get(f"/api/jobs/{job_id}").json()["job"]
            if job["state"] in ("done", "failed"):
                return job
            time.sleep(0.2)
    raise TimeoutError(job_id)


@pytest.fixture()
def served(tmp_path: Path) -> Iterator[Served]:
    server = Served(tmp_path / "data")
    yield server
    if server.proc.poll() is None:
        server.stop()


def test_20_concurrent_uploads_and_two_cli_ingests_store_one_run_per_log(tmp_path, served):
    shared = [
        write(tmp_path / "shared_state.csv", state_lines(1000)),
        write(tmp_path / "shared_torque.csv", torque_lines(250)),
    ]
    others = [[write(tmp_path / f"o{k}_state.csv", state_lines(1000 + 10 * k))] for k in range(5)]
    cli = ["ingest", *map(str, shared), "--map", str(MAP), "--profile", str(PROFILE),
           "--data", str(tmp_path / "data"), "--no-analyse"]  # fmt: skip
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    ingests = [
        subprocess.Popen([sys.executable, "-m", "server.cli.main", *cli], cwd=ROOT, env=env,
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        for _ in range(2)
    ]  # fmt: skip
    with ThreadPoolExecutor(20) as pool:
        jobs = list(pool.map(lambda f: _upload_and_wait(served.url, f), [shared] * 15 + others))
    for p in ingests:
        _, err = p.communicate(timeout=300)
        assert p.returncode == 0, err
    assert all(j["state"] == "done" for j in jobs), [j["error"] for j in jobs if j["error"]]
    shared_ids = {j["run_id"] for j in jobs[:15]}
    assert len(shared_ids) == 1
    runs = httpx.get(f"{served.url}/api/runs").json()["runs"]
    assert len(runs) == 6 and len({r["run_id"] for r in runs}) == 6
    assert len(list((tmp_path / "data" / "runs").iterdir())) == 6
    # headers on the live server's answers, pages and API alike (OWASP headers cheat sheet)
    for path in ("/", "/run.html", "/api/runs", "/api/nothing", "/vendor/plotly.min.js"):
        h = httpx.get(f"{served.url}{path}").headers
        assert "default-src 'self'" in h["content-security-policy"], path
        assert h["x-content-type-options"] == "nosniff" and h["x-frame-options"] == "DENY"
        assert h["referrer-policy"] == "no-referrer"
    rebind = httpx.get(f"{served.url}/api/runs", headers={"Host": "rebind.evil.example"})
    assert rebind.status_code == 400


def test_kill_9_of_the_server_mid_upload_leaves_no_upload_folder(tmp_path, served):
    big = write(tmp_path / "big_state.csv", state_lines(200_000))  # ~13 MB, a slow upload
    staging = tmp_path / "data" / "staging"

    def send() -> None:
        try:
            with httpx.Client(base_url=served.url, timeout=60) as c:
                c.post("/api/upload", files=_form([big]))
        except httpx.HTTPError:
            pass  # the server died under it

    with ThreadPoolExecutor(1) as pool:
        pending = pool.submit(send)
        deadline = time.monotonic() + 60
        while not any(staging.glob("*-upload-*/run-*")) and time.monotonic() < deadline:
            time.sleep(0.02)
        assert any(staging.glob("*-upload-*/run-*")), "the upload never reached the disk"
        served.stop(signal.SIGKILL)
        pending.result()
    assert any(staging.glob("*-upload-*"))  # what the killed server left
    Archive(tmp_path / "data")  # the next start (serve opens the archive first)
    assert list(staging.iterdir()) == []
