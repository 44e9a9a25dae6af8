"""API errors as RFC 9457 problem details (``application/problem+json``).

Every error the server answers with, and every failed background job, carries
one JSON object with the members of RFC 9457 section 3.1: ``type`` (a URI
reference naming the kind of problem; ours point at the API reference page,
``/api.html#problem-<name>``, which explains each), ``title`` (a short
sentence for people, the same for every problem of that type), ``status`` (the
HTTP status code) and ``detail`` (what is wrong in this case, the value found
and what to do), plus ``instance`` (the request path) where there is one.
Titles are plain words: the browser never shows an internal class name; the
server's folders are taken out of the detail (:func:`server.security.scrub_paths`).

References
----------
.. [1] M. Nottingham, E. Wilde and S. Dalal, "Problem Details for HTTP APIs",
   RFC 9457, IETF, 2023. doi:10.17487/RFC9457
"""

from __future__ import annotations

from http import HTTPStatus
from typing import Any

#: Media type of a problem details body (RFC 9457 section 3).
PROBLEM_JSON = "application/problem+json"

#: Where the problem types are documented (a fragment per type).
TYPE_BASE = "/api.html#problem-"

#: Error class name -> (type name, title). Unknown classes fall back on their status.
PROBLEMS: dict[str, tuple[str, str]] = {
    "ProfileError": ("robot-profile", "The robot profile has a problem"),
    "ThresholdsError": ("thresholds", "A threshold or limit is not accepted"),
    "ChannelMapError": ("channel-map", "The channel map has a problem"),
    "IngestError": ("log-file", "A log file cannot be ingested"),
    "RunNotFoundError": ("run-not-found", "No such run"),
    "ArchiveError": ("archive", "The archive cannot be used"),
    "CompareError": ("comparison", "The runs cannot be compared as asked"),
    "ApiError": ("request-refused", "The request was refused"),
    "UnauthorizedError": ("write-token", "A write token is needed"),
    "HostError": ("host-name", "This server does not answer to that host name"),
    "OriginError": ("other-site", "A change from another site's page was refused"),
    "RequestError": ("bad-request", "The request is not valid"),
    "NotFound": ("not-found", "Nothing at this address"),
    "InternalError": ("internal", "The server hit an internal error"),
}


def problem(kind: str, status: int, detail: str, instance: str | None = None) -> dict[str, Any]:
    """The problem details object of one error.

    Parameters
    ----------
    kind : str
        Error class name (a key of :data:`PROBLEMS`); any other name gets the
        standard ``about:blank`` type and the HTTP reason phrase as title.
    status : int
        HTTP status code.
    detail : str
        The message for this case.
    instance : str, optional
        The request path.
    """
    known = PROBLEMS.get(kind)
    if known is None:
        try:
            title = HTTPStatus(status).phrase
        except ValueError:
            title = "Error"
        body: dict[str, Any] = {"type": "about:blank", "title": title}
    else:
        body = {"type": TYPE_BASE + known[0], "title": known[1]}
    body["status"] = int(status)
    body["detail"] = detail
    if instance:
        body["instance"] = instance
    return body
