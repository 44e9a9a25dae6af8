"""Run the ``outrigger`` command line in a child process and measure its peak memory.

The child runs :mod:`tests.reliability.rss_child`, which calls the CLI in-process
and prints its own peak resident set size (``VmHWM`` from ``/proc/self/status``,
the kernel's high-water mark of the process's RSS; proc(5)) as its last line on
stderr. The parent also watches ``VmRSS`` of the child every 20 ms and kills it
when it passes :data:`KILL_AT_BYTES`, so a test that regresses fails without
taking the shared machine's memory.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
#: The bound the issue sets on any input. [bytes]
RSS_LIMIT_BYTES = 1 << 30
#: The watchdog kills a child past this (it failed the bound by then). [bytes]
KILL_AT_BYTES = 3 << 29  # 1.5 GiB


@dataclass
class ChildResult:
    """Exit code, output and peak memory of one child run."""

    code: int
    stdout: str
    stderr: str
    peak_bytes: int
    killed: bool


def _vm(pid: int, key: str) -> int | None:
    try:
        text = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return None
    m = re.search(rf"^{key}:\s+(\d+) kB", text, re.MULTILINE)
    return int(m.group(1)) * 1024 if m else None


def run_cli(args: list[str], *, cwd: Path | None = None, timeout: float = 120) -> ChildResult:
    """Run ``outrigger ARGS`` in a child; return its exit code, output and peak RSS."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with subprocess.Popen(
        [sys.executable, "-m", "tests.reliability.rss_child", *args],
        cwd=cwd or ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    ) as proc:
        killed = False
        seen = 0
        deadline = time.monotonic() + timeout
        while proc.poll() is None:
            rss = _vm(proc.pid, "VmHWM") or 0
            seen = max(seen, rss)
            if rss > KILL_AT_BYTES or time.monotonic() > deadline:
                proc.kill()
                killed = True
                break
            time.sleep(0.02)
        out, err = proc.communicate()
    m = re.search(r"^peak_rss_bytes (\d+)$", err, re.MULTILINE)
    peak = max(seen, int(m.group(1)) if m else 0)
    return ChildResult(proc.returncode, out, err, peak, killed)
