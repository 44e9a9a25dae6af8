"""Child side of :mod:`tests.reliability.measure`: run the CLI, then print peak RSS."""

from __future__ import annotations

import re
import sys
from pathlib import Path

from server.cli.main import main


def peak_rss_bytes() -> int:
    """``VmHWM`` of this process (proc(5)). [bytes]"""
    text = Path("/proc/self/status").read_text()
    m = re.search(r"^VmHWM:\s+(\d+) kB", text, re.MULTILINE)
    return int(m.group(1)) * 1024 if m else 0


if __name__ == "__main__":
    try:
        code = main(sys.argv[1:])
    finally:
        print(f"peak_rss_bytes {peak_rss_bytes()}", file=sys.stderr)
    sys.exit(code)
