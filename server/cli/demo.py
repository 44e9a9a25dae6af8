"""``outrigger demo-logs``: write the bundled invented demo runs.

The generator (``analysis.demo.bundle``) returns every file's bytes; this command
only writes them, each through a temporary name and a rename, so an interrupted
run leaves no half-written file.
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path

from analysis.demo.bundle import demo_files
from analysis.errors import OutriggerError


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``demo-logs`` command."""
    p = subparsers.add_parser(
        "demo-logs",
        help="write the invented demo runs (logs, channel map, profile, run list)",
        description=(
            "Simulate the invented robot Marram-2 on the Gullhaven courses and write the "
            "bundled demo files (deterministic: the same files every time)."
        ),
    )
    p.add_argument("--out", required=True, metavar="DIR", help="folder to write into")
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write every demo file into ``--out``."""
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise OutriggerError(f"--out {out} is a file, not a folder. Give a folder path.")
    out.mkdir(parents=True, exist_ok=True)
    files = demo_files()
    for name, data in files.items():
        tmp = out / f".{name}.tmp"
        tmp.write_bytes(data)
        os.replace(tmp, out / name)
    if not args.quiet:
        total = sum(len(d) for d in files.values())
        print(f"wrote {len(files)} files ({total / 1e6:.2f} MB) to {out}")
    return 0
