"""Build the wheel and sdist, install the wheel in a fresh venv outside the checkout, try it.

Run by ``make test`` (target ``wheel-smoke``) before pytest. It catches what an
editable install hides: pages, scripts or demo runs that the wheel does not carry,
or code that finds them relative to the source tree. Steps:

1. ``python -m build`` writes the sdist and the wheel into a temporary folder;
2. a new virtual environment there gets the wheel (not editable, no source tree on
   its path; the commands run with that folder as the working directory);
3. ``outrigger --version`` names the version of the package metadata;
4. ``outrigger demo --no-serve`` loads the bundled demo runs and ``outrigger runs
   --json`` lists every run named in the source's ``demo_logs/runs.toml``;
5. ``outrigger serve`` on 127.0.0.1 answers ``/``, a page script and ``/api/runs``.

Prints one line per check and exits 1 on the first failure, 0 when all hold.
Usage: ``python tests/wheel_smoke.py [--keep]`` (``--keep`` leaves the folder).
"""

from __future__ import annotations

import json
import os
import shutil
import socket
import subprocess
import sys
import tempfile
import time
import tomllib
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


class SmokeError(Exception):
    """A check of the installed wheel did not hold."""


def _run(cmd: list[str], cwd: Path, timeout: float = 900) -> str:
    done = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=timeout)
    if done.returncode != 0:
        raise SmokeError(
            f"`{' '.join(cmd)}` exited {done.returncode}:\n{done.stdout[-2000:]}\n{done.stderr[-4000:]}"
        )
    return done.stdout


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _get(url: str) -> tuple[int, bytes]:
    with urllib.request.urlopen(url, timeout=10) as resp:  # noqa: S310 (loopback only)
        return resp.status, resp.read()


def smoke(work: Path) -> list[str]:
    """Run every check in ``work``; return the lines that passed."""
    passed: list[str] = []
    dist = work / "dist"
    _run([sys.executable, "-m", "build", "--outdir", str(dist), str(ROOT)], cwd=work)
    wheels = sorted(dist.glob("outrigger-*-py3-none-any.whl"))
    sdists = sorted(dist.glob("outrigger-*.tar.gz"))
    if len(wheels) != 1 or len(sdists) != 1:
        raise SmokeError(f"expected one wheel and one sdist in {dist}, found {os.listdir(dist)}")
    passed.append(f"built {wheels[0].name} and {sdists[0].name}")

    venv = work / "venv"
    _run([sys.executable, "-m", "venv", str(venv)], cwd=work)
    py = venv / "bin" / "python"
    _run([str(py), "-m", "pip", "install", "-q", str(wheels[0])], cwd=work)
    exe = str(venv / "bin" / "outrigger")
    where = _run([str(py), "-c", "import server, analysis; print(server.__file__)"], cwd=work)
    if str(ROOT) in where:
        raise SmokeError(f"the venv imports the source tree, not the wheel: {where}")
    passed.append("wheel installed in a fresh venv, imported from site-packages")

    version = wheels[0].name.split("-")[1]
    said = _run([exe, "--version"], cwd=work).strip()
    if said != f"outrigger {version}":
        raise SmokeError(f"`outrigger --version` said {said!r}, expected 'outrigger {version}'")
    passed.append(f"`outrigger --version` says {said!r}")

    data = work / "data"
    _run([exe, "demo", "--no-serve", "--data", str(data)], cwd=work)
    runs = json.loads(_run([exe, "runs", "--json", "--data", str(data)], cwd=work))
    index = tomllib.loads((ROOT / "demo_logs" / "runs.toml").read_text(encoding="utf-8"))
    expected = len(index.get("run", []))
    if expected == 0 or len(runs) != expected:
        raise SmokeError(f"`outrigger runs --json` listed {len(runs)} runs, expected {expected}")
    passed.append(f"`outrigger demo --no-serve` stored the {expected} demo runs")

    port = _free_port()
    server = subprocess.Popen(
        [exe, "serve", "--data", str(data), "--host", "127.0.0.1", "--port", str(port)],
        cwd=work,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                status, page = _get(base + "/")
                break
            except OSError:
                if server.poll() is not None or time.monotonic() > deadline:
                    err = server.stderr.read().decode() if server.stderr else ""
                    raise SmokeError(f"`outrigger serve` did not answer: {err[-2000:]}") from None
                time.sleep(0.3)
        if status != 200 or b"<html" not in page.lower():
            raise SmokeError(f"/ answered {status} without a page")
        status, script = _get(base + "/js/run.js")
        if status != 200 or len(script) < 1000:
            raise SmokeError(f"/js/run.js answered {status} with {len(script)} bytes")
        status, body = _get(base + "/api/runs")
        listed = json.loads(body)
        listed = listed.get("runs", listed) if isinstance(listed, dict) else listed
        if status != 200 or len(listed) != expected:
            raise SmokeError(f"/api/runs answered {status} with {len(listed)} runs")
        passed.append("`outrigger serve` answers /, /js/run.js and /api/runs")
    finally:
        server.terminate()
        server.wait(timeout=20)
    return passed


def main(argv: list[str]) -> int:
    work = Path(tempfile.mkdtemp(prefix="outrigger-wheel-"))
    try:
        for line in smoke(work):
            print(f"wheel smoke: ok: {line}")
        return 0
    except (SmokeError, subprocess.TimeoutExpired) as exc:
        print(f"wheel smoke: FAILED: {exc}", file=sys.stderr)
        return 1
    finally:
        if "--keep" in argv:
            print(f"wheel smoke: left {work}")
        else:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
