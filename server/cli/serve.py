"""``outrigger serve`` and ``outrigger demo``: run the dashboard with uvicorn."""

from __future__ import annotations

import argparse
import errno
import ipaddress
import socket
import sys
from pathlib import Path
from typing import Any

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


def check_port(host: str, port: int) -> None:
    """Refuse, saying so, a port that another program already listens on.

    Raises
    ------
    ArchiveError
        When ``host:port`` cannot be bound, with how to pick another port.
    """
    from analysis.errors import ArchiveError

    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    with socket.socket(family, socket.SOCK_STREAM) as probe:
        probe.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            probe.bind((host, port))
        except OSError as exc:
            if exc.errno == errno.EADDRINUSE:
                raise ArchiveError(
                    f"Port {port} on {host} is already in use (another Outrigger or another "
                    f"program). Pick another port: --port 8400, or `make demo PORT=8400`."
                ) from exc
            raise ArchiveError(f"Cannot listen on {host}:{port}: {exc.strerror}.") from exc


def store_demo_configs(archive: Any, folder: Path) -> list[str]:
    """Store the demo runs' channel map and robot profile as named configs (once).

    The Upload page then offers them in its stored-map and stored-profile lists.
    Returns the ``kind/name`` of each config stored now (none when already there).
    """
    from analysis.demo.load import read_demo_index

    index = read_demo_index(folder)
    stored = []
    for kind, key in (("map", "map"), ("profile", "profile")):
        path = folder / index[key]
        name = f"demo-{path.stem}"
        if name not in archive.list_configs(kind):
            archive.save_config(kind, name, path.read_text(encoding="utf-8"))
            stored.append(f"{kind}/{name}")
    return stored


def build_app(args: argparse.Namespace) -> Any:
    """The dashboard app for ``serve``/``demo`` options: served hosts from ``--host`` and
    ``--allow-host``, the token and the upload limit."""
    from server.app import create_app
    from server.security import served_hosts

    return create_app(
        data_dir(args),
        token=args.token,
        max_upload_mb=args.max_upload_mb,
        allowed_hosts=served_hosts(args.host, args.allow_host),
        analyse_pending=True,
    )


def _serve(args: argparse.Namespace) -> int:  # pragma: no cover - runs until interrupted
    import uvicorn

    host, port = args.host, args.port
    check_port(host, port)
    app = build_app(args)
    if not is_loopback(host):
        print(open_host_caution(host, args.token), file=sys.stderr)
        if not args.allow_host:
            print(
                "Note: only the host names 127.0.0.1, localhost and the --host address are "
                "answered; add --allow-host NAME for each name other machines use to reach "
                "this one.",
                file=sys.stderr,
            )
    shown = f"[{host}]" if ":" in host else host
    print(
        f"Outrigger dashboard on http://{shown}:{port}/  (archive: {data_dir(args)}; Ctrl+C stops)"
    )
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
        "--allow-host",
        action="append",
        default=[],
        metavar="NAME",
        help="another host name the dashboard answers to, e.g. the machine's name on the "
        "network (repeatable; 127.0.0.1, localhost and --host always are)",
    )
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
    return _serve(args)


def cmd_demo(args: argparse.Namespace) -> int:
    """Load the bundled demo runs into the archive (once), then serve."""
    from analysis.archive.objstore import open_archive
    from analysis.demo.load import load_demo_runs
    from analysis.resources import demo_folder

    data = data_dir(args)
    archive = open_archive(data)
    print(f"Loading the bundled demo runs into {data} ...")
    run_ids = load_demo_runs(archive, demo_folder())
    print(f"{len(run_ids)} demo run(s) ready: {', '.join(run_ids)}")
    for name in store_demo_configs(archive, demo_folder()):
        print(f"stored {name} for the Upload page")
    if args.no_serve:
        return 0
    return _serve(args)


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
