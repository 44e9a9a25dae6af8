"""Security of every answer: Host allow-list, same-origin writes, and response headers.

One pure ASGI middleware (:class:`SecurityMiddleware`) wraps the whole app:

- **Host allow-list.** A request whose ``Host`` header names a host the server
  does not serve is refused (400) before any route runs, so a DNS-rebinding page
  (a foreign name that resolves to this machine) cannot read the API. The served
  names are ``127.0.0.1``, ``localhost``, ``::1``, the ``--host`` given and every
  ``--allow-host``.
- **Same-origin writes.** A state-changing request (POST, PUT, PATCH, DELETE)
  that carries an ``Origin`` header other than the server's own (scheme, host and
  port of the request) is refused with 403: a form on another web site cannot
  store, change or delete runs, even when the server has no token. Requests
  without ``Origin`` (curl, scripts) are not browser cross-site requests and pass.
- **Headers on every answer.** ``Content-Security-Policy`` (``default-src 'self'``;
  scripts only from the server or inline ones whose SHA-256 is listed),
  ``X-Content-Type-Options: nosniff``, ``X-Frame-Options: DENY`` with
  ``frame-ancestors 'none'``, and ``Referrer-Policy: no-referrer``, as the OWASP
  HTTP Headers Cheat Sheet recommends.
"""

from __future__ import annotations

import base64
import hashlib
import json
import re
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from starlette.types import ASGIApp, Message, Receive, Scope, Send

#: Host names every server answers to (this machine).
LOCAL_HOSTS = ("127.0.0.1", "localhost", "::1")
#: Methods that change state; they must come from the server's own pages (or no page).
WRITE_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})

_INLINE_SCRIPT = re.compile(
    rb"<script(?![^>]*\bsrc\s*=)[^>]*>(.*?)</script\s*>", re.IGNORECASE | re.DOTALL
)


def script_hashes(html: bytes | str) -> list[str]:
    """CSP source expressions (``'sha256-...'``) of every inline script of an HTML text.

    The hash is over the script element's text exactly as written, as the CSP
    Level 3 specification defines hash sources (W3C, Content Security Policy
    Level 3, section "hash-source").
    """
    data = html.encode("utf-8") if isinstance(html, str) else html
    out = []
    for match in _INLINE_SCRIPT.finditer(data):
        digest = base64.b64encode(hashlib.sha256(match.group(1)).digest()).decode()
        out.append(f"'sha256-{digest}'")
    return list(dict.fromkeys(out))


def content_security_policy(hashes: Iterable[str] = ()) -> str:
    """The Content-Security-Policy of an answer whose inline scripts have ``hashes``.

    ``default-src 'self'``; scripts from the server plus the listed inline ones;
    styles from the server and inline (plotly.js and the charts set styles);
    images also from ``data:`` and ``blob:`` URLs (chart downloads); no plugins,
    no framing, no ``<base>`` change, forms only to the server.
    """
    script = " ".join(["'self'", *hashes])
    return (
        f"default-src 'self'; script-src {script}; style-src 'self' 'unsafe-inline'; "
        "img-src 'self' data: blob:; object-src 'none'; base-uri 'none'; "
        "form-action 'self'; frame-ancestors 'none'"
    )


def page_script_hashes(web_dir: Path) -> list[str]:
    """Hashes of the inline scripts of every HTML page shipped in ``web_dir``."""
    hashes: list[str] = []
    for page in sorted(web_dir.rglob("*.html")):
        hashes += script_hashes(page.read_bytes())
    return list(dict.fromkeys(hashes))


def host_name(host_header: str) -> str:
    """The host name of a ``Host`` header, without port or IPv6 brackets, lower case."""
    h = host_header.strip().lower()
    if h.startswith("["):
        return h[1 : h.find("]")] if "]" in h else h[1:]
    if h.count(":") == 1:
        return h.split(":", 1)[0]
    return h


def served_hosts(host: str | None, allow: Sequence[str] = ()) -> frozenset[str]:
    """Host names the server answers to: this machine, the listen address, and ``allow``."""
    names = {*LOCAL_HOSTS, *(host_name(a) for a in allow if a.strip())}
    if host and host not in ("0.0.0.0", "::"):
        names.add(host_name(host) if not host.count(":") > 1 else host.lower())
    return frozenset(names)


ErrorFactory = Any  # (kind, message, status) -> an ASGI app (a Response)


class SecurityMiddleware:
    """Host allow-list, same-origin writes, and security headers (see the module notes).

    Parameters
    ----------
    app : ASGI app
        The wrapped application.
    hosts : frozenset of str or None
        Host names answered; None answers any (an app built in-process for tests
        or embedding; ``outrigger serve`` always passes the list).
    csp : str
        Content-Security-Policy added to an answer that does not set its own.
    error : callable
        ``error(kind, message, status)`` -> the Response of a refusal, in the
        project's one error shape.
    """

    def __init__(
        self, app: ASGIApp, *, hosts: frozenset[str] | None, csp: str, error: ErrorFactory
    ) -> None:
        self.app = app
        self.hosts = hosts
        self.error = error
        self.headers = [
            (b"content-security-policy", csp.encode()),
            (b"x-content-type-options", b"nosniff"),
            (b"x-frame-options", b"DENY"),
            (b"referrer-policy", b"no-referrer"),
        ]

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = {k.decode("latin-1").lower(): v.decode("latin-1") for k, v in scope["headers"]}
        refusal = self._refusal(scope, headers)

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                present = {k.lower() for k, _ in message.get("headers", [])}
                extra = [(k, v) for k, v in self.headers if k not in present]
                message = {**message, "headers": [*message.get("headers", []), *extra]}
            await send(message)

        if refusal is not None:
            status, kind, text = refusal
            await self.error(kind, text, status)(scope, receive, send_with_headers)
            return
        await self.app(scope, receive, send_with_headers)

    def _refusal(self, scope: Scope, headers: dict[str, str]) -> tuple[int, str, str] | None:
        host_header = headers.get("host", "")
        if self.hosts is not None and host_name(host_header) not in self.hosts:
            shown = json.dumps(host_header[:100])
            return (
                400,
                "HostError",
                f"This server does not answer to the host name {shown}. It serves "
                f"{', '.join(sorted(self.hosts))}. To reach it under another name, restart it "
                "with --allow-host NAME.",
            )
        origin = headers.get("origin")
        if scope["method"] in WRITE_METHODS and origin is not None:
            own = f"{scope.get('scheme', 'http')}://{host_header}".lower()
            if origin.strip().lower() != own:
                shown = json.dumps(origin[:100])
                return (
                    403,
                    "OriginError",
                    f"A change from the page at {shown} was refused: only this server's own "
                    f"pages ({own}) may store, change or delete runs. Use the dashboard itself, "
                    "or a script (which sends no Origin header).",
                )
        return None


#: An absolute path on this server (under a usual top folder), up to its file name.
_ABS_PATH = re.compile(
    r"(?<![\w.:/])/(?:tmp|var|home|root|srv|work|mnt|opt|usr|data|run|media|Users|private)"
    r"(?:/[\w.+@-]+)*/([\w.+@-]+)"
)


def scrub_paths(message: str, places: dict[str, str]) -> str:
    """An error message without this server's paths, for an API answer.

    Each of ``places`` (path -> words, e.g. the archive root -> "the archive") is
    replaced first; any other absolute path is cut to its file name. The command
    line keeps full paths: there they are the user's own.
    """
    for path, words in sorted(places.items(), key=lambda kv: -len(kv[0])):
        message = message.replace(path, words)
    return _ABS_PATH.sub(lambda m: m.group(1), message)
