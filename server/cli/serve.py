"""``outrigger serve`` and ``outrigger demo``: run the dashboard with uvicorn."""

from __future__ import annotations

import argparse
import ipaddress
import sys
from pathlib import Path

from server.cli.main import add_data_option, data_dir

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8321


def is_loopback(host: str) -> bool:
    """True when ``host`` only accepts connections from this machine."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def open_host_caution(host: str, token: str | None) -> str:
    """The caution printed when the server listens beyond this machine."""
    guard = (
        "Write endpoints need the token you gave."
        if token
        else "Anyone who can reach it may upload, edit and delete runs: add --token."
    )
    return (
        f"Caution: serving on {host}, reachable from other machines. "
        f"The dashboard has no user accounts and no TLS. {guard} "
        "Prefer 127.0.0.1 with an SSH tunnel on shared networks."
    )


def _serve(
    data: str, host: str, port: int, token: str | None, max_upload_mb: int
) -> int:  # pragma: no cover - runs until interrupted; the app is tested in-process
    import uvicorn

    from server.app import create_app

    app = create_app(data, token=token, max_upload_mb=max_upload_mb)
    if not is_loopback(host):
        print(open_host_caution(host, token), file=sys.stderr)
    shown = f"[{host}]" if ":" in host else host
    print(f"Outrigger dashboard on http://{shown}:{port}/  (archive: {data}; Ctrl+C stops)")
    uvicorn.run(app, host=host, port=port, log_level="warning")
    return 0


def _add_server_options(parser: argparse.ArgumentParser) -> None:
    add_data_option(parser)
    parser.add_argument(
        "--host",
        default=DEFAULT_HOST,
        help=f"address to listen on (default {DEFAULT_HOST}: this machine only)",
    )
    parser.add_argument("--port", type=int, default=DEFAULT_PORT, help=f"default {DEFAULT_PORT}")
    parser.add_argument(
        "--token", default=None, help="require 'Authorization: Bearer TOKEN' on write requests"
    )
    parser.add_argument(
        "--max-upload-mb",
        type=int,
        default=2048,
        metavar="N",
        help="largest upload accepted, all files together, in MiB (default 2048)",
    )


def cmd_serve(args: argparse.Namespace) -> int:
    """Serve the dashboard on the archive."""
    return _serve(data_dir(args), args.host, args.port, args.token, args.max_upload_mb)


def cmd_demo(args: argparse.Namespace) -> int:
    """Load the bundled demo runs into the archive (once), then serve."""
    from analysis.archive.store import Archive
    from analysis.demo.load import load_demo_runs
    from analysis.resources import demo_folder

    data = data_dir(args)
    archive = Archive(Path(data))
    print(f"Loading the bundled demo runs into {data} ...")
    run_ids = load_demo_runs(archive, demo_folder())
    print(f"{len(run_ids)} demo run(s) ready: {', '.join(run_ids)}")
    if args.no_serve:
        return 0
    return _serve(data, args.host, args.port, args.token, args.max_upload_mb)


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``serve`` and ``demo``."""
    serve = subparsers.add_parser(
        "serve", help="serve the browser dashboard", description=cmd_serve.__doc__
    )
    _add_server_options(serve)
    serve.set_defaults(func=cmd_serve)

    demo = subparsers.add_parser(
        "demo",
        help="load the bundled demo runs and serve the dashboard",
        description=cmd_demo.__doc__,
    )
    _add_server_options(demo)
    demo.add_argument(
        "--no-serve", action="store_true", help="only load the demo runs, do not serve"
    )
    demo.set_defaults(func=cmd_demo)
