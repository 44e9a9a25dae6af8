"""Stored robot profiles and channel maps, chosen by name on the Upload page."""

from __future__ import annotations

import re
import tomllib
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Request
from fastapi.responses import FileResponse

from analysis.archive.store import Archive
from analysis.ingest.channel_map import parse_channel_map
from analysis.profile import profile_from_dict
from server.deps import ApiError, get_archive, require_write

router = APIRouter(prefix="/api/configs", tags=["configs"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]
Kind = Literal["profile", "map"]

#: Largest profile or map accepted. [bytes]
MAX_CONFIG_BYTES = 256 * 1024
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]{0,63}$")


@router.get("/{kind}")
def list_configs(kind: Kind, archive: ArchiveDep) -> dict[str, Any]:
    """Names of the stored robot profiles (``profile``) or channel maps (``map``)."""
    return {"kind": kind, "names": archive.list_configs(kind)}


@router.get("/{kind}/{name}", response_class=FileResponse)
def get_config(kind: Kind, name: str, archive: ArchiveDep) -> FileResponse:
    """The TOML text of one stored profile or map."""
    if name not in archive.list_configs(kind):
        raise ApiError(f"No stored {kind} named {name!r}.", status=404)
    return FileResponse(archive.config_path(kind, name), media_type="text/plain; charset=utf-8")


@router.put(
    "/{kind}/{name}",
    dependencies=[Depends(require_write)],
    openapi_extra={
        "requestBody": {
            "required": True,
            "description": "The TOML text of the profile or channel map.",
            "content": {"text/plain": {"schema": {"type": "string"}}},
        }
    },
)
async def save_config(kind: Kind, name: str, request: Request, archive: ArchiveDep) -> dict:
    """Store a profile or map (the TOML text is the request body); it is checked first."""
    if not _NAME.match(name):
        raise ApiError(
            f"Config name {name!r} is not allowed: use 1 to 64 letters, digits, '_', '-', '.', "
            "starting with a letter or digit."
        )
    body = await request.body()
    if len(body) > MAX_CONFIG_BYTES:
        raise ApiError(
            f"The {kind} is {len(body)} bytes; the limit is {MAX_CONFIG_BYTES}.", status=413
        )
    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ApiError(f"The {kind} must be UTF-8 TOML text ({exc}).") from exc
    check_config(kind, text, name)
    path = archive.save_config(kind, name, text)
    return {"kind": kind, "name": name, "saved": path.name}


def check_config(kind: str, text: str, name: str) -> None:
    """Parse a profile or map so a broken one is never stored (raises ProfileError etc.)."""
    if kind == "profile":
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise ApiError(f"The profile {name!r} is not valid TOML: {exc}.") from exc
        profile_from_dict(data, source=name)
    else:
        parse_channel_map(text, origin=f"channel map {name!r}")
