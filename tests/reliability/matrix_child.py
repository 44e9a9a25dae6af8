"""Child side of the bad-input matrix: every input through the CLI and the API, one process.

Reads a JSON list of cases from argv[1] (each ``{"name", "cli": [...], "upload": {...}}``),
runs each through :func:`server.cli.main.main` and through ``POST /api/upload`` of an
in-process app, and prints one JSON object: per case the CLI exit code and message,
the upload's HTTP status, the job's state and error, and this process's peak RSS
(``VmHWM``, proc(5)) after all of them.
"""

from __future__ import annotations

import contextlib
import io
import json
import sys
import time
from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient

from server.app import create_app
from server.cli.main import main
from tests.reliability.rss_child import peak_rss_bytes


def _upload(client: TestClient, case: dict[str, Any]) -> dict[str, Any]:
    spec = case["upload"]
    parts = [("files", (Path(f).name, Path(f).read_bytes())) for f in spec["files"]]
    parts.append(("map_file", ("map.toml", Path(spec["map"]).read_bytes())))
    parts.append(("profile_file", ("profile.toml", Path(spec["profile"]).read_bytes())))
    r = client.post("/api/upload", files=parts)
    out: dict[str, Any] = {"status": r.status_code, "body": r.json()}
    if r.status_code == 202:
        job_id = r.json()["job"]["id"]
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            job = client.get(f"/api/jobs/{job_id}").json()["job"]
            if job["state"] in ("done", "failed"):
                out["job"] = job
                break
            time.sleep(0.05)
    return out


def run(cases: list[dict[str, Any]], data: str, max_upload_mb: int) -> dict[str, Any]:
    results: dict[str, Any] = {}
    client = TestClient(create_app(data, max_upload_mb=max_upload_mb))
    with client:
        for case in cases:
            err = io.StringIO()
            with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
                code = main([*case["cli"], "--data", data, "--no-analyse"])
            got = {"cli_code": code, "cli_message": err.getvalue()}
            if "upload" in case:
                got.update(_upload(client, case))
            results[case["name"]] = got
    return {"results": results, "peak_rss_bytes": peak_rss_bytes()}


if __name__ == "__main__":
    spec = json.loads(Path(sys.argv[1]).read_text())
    print(json.dumps(run(spec["cases"], spec["data"], spec["max_upload_mb"])))
