"""The ``outrigger`` command line.

Each group of subcommands lives in its own module with a ``register(subparsers)``
function that adds its parsers and sets ``func`` on them. Commands call
``analysis`` functions; they compute no physics themselves.

Exit codes: 0 success, 1 a check or gate failed, 2 bad input (message on stderr).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence

from analysis.errors import OutriggerError
from analysis.resources import package_version

#: Modules that contribute subcommands, in help order.
COMMAND_MODULES = (
    "server.cli.archive",
    "server.cli.analysis",
    "server.cli.compare",
    "server.cli.serve",
    "server.cli.demo",
    "server.cli.calibrate",
)

DEFAULT_DATA_DIR = "outrigger-data"
DATA_ENV = "OUTRIGGER_DATA"


def default_data_dir() -> str:
    """Archive root: $OUTRIGGER_DATA, else ./outrigger-data."""
    return os.environ.get(DATA_ENV, DEFAULT_DATA_DIR)


def add_data_option(parser: argparse.ArgumentParser) -> None:
    """Add the shared ``--data DIR`` option (a folder, or ``s3://BUCKET/PREFIX``)."""
    parser.add_argument(
        "--data",
        default=None,
        metavar="DIR",
        help=f"archive root: a folder or s3://BUCKET/PREFIX "
        f"(default: ${DATA_ENV} or ./{DEFAULT_DATA_DIR})",
    )


def data_dir(args: argparse.Namespace) -> str:
    """The archive root chosen by ``--data`` or the environment."""
    return args.data or default_data_dir()


def build_parser() -> argparse.ArgumentParser:
    """Build the full parser from every command module."""
    parser = argparse.ArgumentParser(
        prog="outrigger",
        description="Field-test log analysis for wheel-legged balancing robots.",
    )
    parser.add_argument("--version", action="version", version=f"outrigger {package_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        code = args.func(args)
    except OutriggerError as exc:
        print(f"outrigger: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("outrigger: interrupted; nothing half-written was kept.", file=sys.stderr)
        return 130
    return int(code or 0)


if __name__ == "__main__":
    raise SystemExit(main())
