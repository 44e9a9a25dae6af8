"""Upload: log files plus a channel map and a robot profile, ingested and analysed as a job.

The multipart body is parsed as it arrives and each file part is written to a
fresh temporary folder in chunks; nothing is held whole in memory. The size
limit counts every byte of the body and answers 413 as soon as it is passed.
File names are checked before a byte is written: a name with a path in it
(``../x.csv``, ``a/b.csv``) is refused with 400. The profile and map are parsed
before the job starts, so their errors answer 400 at once; ingestion errors
(a map that does not fit the files, a garbage file) fail the job with the
ingest message, which ``GET /api/jobs/{id}`` returns.
"""

from __future__ import annotations

import re
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, TYPE_CHECKING, Annotated, Any

from fastapi import APIRouter, Depends, Request
from python_multipart.multipart import MultipartParser, parse_options_header

from analysis.archive.store import Archive
from analysis.detect.pipeline import analyse_run
from analysis.ingest.channel_map import load_channel_map
from analysis.ingest.read import MAX_TEXT_RATIO
from analysis.ingest.stream import ingest_files
from analysis.profile import load_profile
from server.deps import ApiError, forget_run, get_archive, get_jobs, require_write
from server.jobs import JobManager, Progress

if TYPE_CHECKING:
    from python_multipart.multipart import MultipartCallbacks

router = APIRouter(prefix="/api", tags=["upload"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]
JobsDep = Annotated[JobManager, Depends(get_jobs)]

#: File fields of the form.
LOG_FIELD, MAP_FIELD, PROFILE_FIELD = "files", "map_file", "profile_file"
#: Text fields of the form.
TEXT_FIELDS = ("map_name", "profile_name", "name", "course", "controller", "tags", "notes", "date")
#: Largest text field accepted. [bytes]
MAX_TEXT = 64 * 1024
#: Share of the job's progress bar given to ingestion; analysis takes the rest. [-]
INGEST_SHARE = 0.6

_SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._+\- ]{0,200}$")

#: The form as OpenAPI describes it (the body is parsed by hand, so FastAPI cannot infer it).
UPLOAD_BODY: dict[str, Any] = {
    "required": True,
    "content": {
        "multipart/form-data": {
            "schema": {
                "type": "object",
                "required": [LOG_FIELD],
                "properties": {
                    LOG_FIELD: {"type": "array", "items": {"type": "string", "format": "binary"}},
                    MAP_FIELD: {"type": "string", "format": "binary"},
                    PROFILE_FIELD: {"type": "string", "format": "binary"},
                    **{name: {"type": "string"} for name in TEXT_FIELDS},
                },
            }
        }
    },
}


def check_file_name(raw: str) -> str:
    """Return an uploaded file's name if it is a plain file name, else raise ApiError (400)."""
    if (
        not raw
        or "/" in raw
        or "\\" in raw
        or raw in (".", "..")
        or ".." in raw
        or not _SAFE_NAME.match(raw)
    ):
        raise ApiError(
            f"File name {raw!r} is not allowed: give a plain file name of letters, digits, "
            "'.', '_', '-', '+' or spaces, starting with a letter or digit, without any folder "
            "part or '..'. Rename the file and upload it again."
        )
    return raw


@dataclass
class _Received:
    """What the form carried."""

    folder: Path
    logs: list[Path] = field(default_factory=list)
    map_file: Path | None = None
    profile_file: Path | None = None
    text: dict[str, str] = field(default_factory=dict)


class _Receiver:
    """Callbacks of the streaming multipart parser: route each part to disk or a text field."""

    def __init__(self, received: _Received) -> None:
        self.r = received
        self.header_field = b""
        self.header_value = b""
        self.headers: dict[bytes, bytes] = {}
        self.sink: IO[bytes] | None = None
        self.text_name: str | None = None
        self.text: bytearray = bytearray()

    def callbacks(self) -> MultipartCallbacks:
        return {
            "on_part_begin": self.part_begin,
            "on_header_field": self.header_field_data,
            "on_header_value": self.header_value_data,
            "on_header_end": self.header_end,
            "on_headers_finished": self.headers_finished,
            "on_part_data": self.part_data,
            "on_part_end": self.part_end,
        }

    def part_begin(self) -> None:
        self.headers = {}
        self.sink, self.text_name, self.text = None, None, bytearray()

    def header_field_data(self, data: bytes, start: int, end: int) -> None:
        self.header_field += data[start:end]

    def header_value_data(self, data: bytes, start: int, end: int) -> None:
        self.header_value += data[start:end]

    def header_end(self) -> None:
        self.headers[self.header_field.lower()] = self.header_value
        self.header_field, self.header_value = b"", b""

    def headers_finished(self) -> None:
        _, options = parse_options_header(self.headers.get(b"content-disposition", b""))
        field_name = options.get(b"name", b"").decode("utf-8", "replace")
        filename = options.get(b"filename")
        if filename is None:
            if field_name not in TEXT_FIELDS:
                raise ApiError(
                    f"Unknown form field {field_name!r}. Fields: {', '.join(TEXT_FIELDS)}, "
                    f"and files under {LOG_FIELD}, {MAP_FIELD}, {PROFILE_FIELD}."
                )
            self.text_name = field_name
            return
        name = filename.decode("utf-8", "replace")
        if field_name == LOG_FIELD:
            if not name:
                return  # an empty file input
            path = self.r.folder / "logs" / check_file_name(name)
            if path in self.r.logs:
                raise ApiError(f"The log file {name!r} was given twice; upload it once.")
            self.r.logs.append(path)
        elif field_name in (MAP_FIELD, PROFILE_FIELD):
            if not name:
                return
            check_file_name(name)
            path = self.r.folder / "config" / f"{field_name}.toml"
            if field_name == MAP_FIELD:
                self.r.map_file = path
            else:
                self.r.profile_file = path
        else:
            raise ApiError(
                f"Unknown file field {field_name!r}; use {LOG_FIELD} for logs, "
                f"{MAP_FIELD} for the channel map and {PROFILE_FIELD} for the robot profile."
            )
        path.parent.mkdir(parents=True, exist_ok=True)
        self.sink = path.open("wb")

    def part_data(self, data: bytes, start: int, end: int) -> None:
        if self.sink is not None:
            self.sink.write(data[start:end])
        elif self.text_name is not None:
            self.text += data[start:end]
            if len(self.text) > MAX_TEXT:
                raise ApiError(
                    f"Form field {self.text_name!r} is longer than {MAX_TEXT} bytes; shorten it."
                )

    def part_end(self) -> None:
        if self.sink is not None:
            self.sink.close()
            self.sink = None
        elif self.text_name is not None:
            self.r.text[self.text_name] = self.text.decode("utf-8", "replace").strip()
            self.text_name = None

    def close(self) -> None:
        if self.sink is not None:
            self.sink.close()


def _too_large(limit: int) -> ApiError:
    return ApiError(
        f"The upload is larger than this server's limit of {limit // (1024 * 1024)} MiB. "
        "Split the run into smaller files, or restart the server with a larger --max-upload-mb.",
        status=413,
    )


async def receive_upload(request: Request, folder: Path) -> _Received:
    """Stream a multipart body into ``folder``; raise ApiError on a bad or too large body."""
    limit: int = request.app.state.max_upload_bytes
    ctype, options = parse_options_header(request.headers.get("content-type", ""))
    boundary = options.get(b"boundary")
    if ctype != b"multipart/form-data" or not boundary:
        raise ApiError(
            "An upload must be a multipart/form-data body (found content type "
            f"{ctype.decode() or 'none'!r}). Use the Upload page or curl -F."
        )
    declared = request.headers.get("content-length")
    if declared and declared.isdigit() and int(declared) > limit:
        raise _too_large(limit)
    received = _Received(folder=folder)
    receiver = _Receiver(received)
    parser = MultipartParser(boundary, receiver.callbacks())
    total = 0
    try:
        async for chunk in request.stream():
            total += len(chunk)
            if total > limit:
                raise _too_large(limit)
            parser.write(chunk)
        parser.finalize()
    finally:
        receiver.close()
    return received


def _config(
    archive: Archive, kind: str, uploaded: Path | None, stored_name: str, what: str, field: str
) -> Path:
    if uploaded is not None:
        return uploaded
    if stored_name:
        stored = archive.list_configs(kind)
        if stored_name not in stored:
            raise ApiError(
                f"No stored {what} named {stored_name!r}. Stored: {', '.join(stored) or 'none'}. "
                f"Choose one of them or upload the file."
            )
        return archive.config_path(kind, stored_name)
    raise ApiError(
        f"No {what} given: upload one as {field} or name a stored one "
        f"({', '.join(archive.list_configs(kind)) or 'none stored yet'})."
    )


@router.post(
    "/upload",
    status_code=202,
    dependencies=[Depends(require_write)],
    openapi_extra={"requestBody": UPLOAD_BODY},
)
async def upload(request: Request, archive: ArchiveDep, jobs: JobsDep) -> dict[str, Any]:
    """Upload a run (multipart form) and start its ingest and analysis as a background job.

    Fields: ``files`` (one or more log files), ``map_file`` or ``map_name``,
    ``profile_file`` or ``profile_name``, and optional ``name``, ``course``,
    ``controller``, ``tags`` (comma-separated), ``notes``, ``date`` (ISO 8601).
    Answers 202 with the job; poll ``GET /api/jobs/{id}``.
    """
    folder = Path(tempfile.mkdtemp(prefix="run-", dir=request.app.state.upload_root))
    try:
        got = await receive_upload(request, folder)
        if not got.logs:
            raise ApiError("No log files in the upload: add at least one file under 'files'.")
        map_path = _config(
            archive, "map", got.map_file, got.text.get("map_name", ""), "channel map", MAP_FIELD
        )
        profile_path = _config(
            archive,
            "profile",
            got.profile_file,
            got.text.get("profile_name", ""),
            "robot profile",
            PROFILE_FIELD,
        )
        # Cheap checks now, so a bad profile or map answers 400 before any job starts.
        profile = load_profile(profile_path)
        load_channel_map(map_path, profile)
    except BaseException:
        shutil.rmtree(folder, ignore_errors=True)
        raise
    text = got.text
    # The decompressed text of a gzip log is capped in proportion to the upload limit.
    text_limit = MAX_TEXT_RATIO * int(request.app.state.max_upload_bytes)
    tags = tuple(t.strip() for t in text.get("tags", "").split(",") if t.strip())
    logs = sorted(got.logs)

    def work(progress: Progress) -> str:
        def ingest_progress(fraction: float, message: str) -> None:
            progress(INGEST_SHARE * fraction, f"ingest: {message}")

        outcome = ingest_files(
            archive,
            logs,
            map_path,
            profile_path,
            name=text.get("name") or None,
            course=text.get("course") or None,
            controller=text.get("controller") or None,
            tags=tags,
            notes=text.get("notes", ""),
            date=text.get("date") or None,
            progress=ingest_progress,
            max_text_bytes=text_limit,
        )
        if outcome.duplicate_of and archive.is_analysed(outcome.duplicate_of):
            progress(1.0, f"these files are already stored as run {outcome.duplicate_of}")
            return str(outcome.duplicate_of)
        # a new run, or one stored earlier whose analysis never ran: analyse it now

        def analysis_progress(fraction: float, message: str) -> None:
            progress(INGEST_SHARE + (1 - INGEST_SHARE) * fraction, f"analysis: {message}")

        analyse_run(archive, outcome.run_id, progress=analysis_progress)
        forget_run(request, str(outcome.run_id))
        progress(1.0, "ingested and analysed")
        return str(outcome.run_id)

    job = jobs.submit(
        "upload",
        work,
        info={"files": [p.name for p in logs]},
        cleanup=lambda: shutil.rmtree(folder, ignore_errors=True),
    )
    return {"job": job.to_dict()}
