"""What makes two ingests the same run: files, channel map and robot profile.

An ingest is a duplicate only when the same log files are read with the same
channel map and the same robot profile: the run's ``source_hash`` covers all
three (:func:`ingest_key`). The same files with a fixed channel map are a new
run, and the ingest names the older one (:func:`same_files_run`) so that the
user can delete or replace it. Also: the default run name from the file names
(:func:`default_run_name`) and the metadata a duplicate ingest did not apply
(:func:`not_applied`).
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, Protocol


class RunLookup(Protocol):
    """What these checks need of the archive (``analysis.archive.store.Archive`` is one)."""

    def find_by_hash(self, source_hash: str) -> str | None: ...

    def get_meta(self, run_id: str) -> dict[str, Any]: ...

    def list_runs(self) -> list[dict[str, Any]]: ...


def _digest(data: Any) -> str:
    text = json.dumps(data, sort_keys=True, default=str, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def files_key(hashes: Mapping[str, str]) -> str:
    """One hash for a set of source files (order-free): SHA-256 of the sorted file hashes.

    It equals the ``source_hash`` that runs ingested before this change carry.
    """
    return hashlib.sha256("\n".join(sorted(hashes.values())).encode()).hexdigest()


def ingest_key(
    hashes: Mapping[str, str], channel_map: Mapping[str, Any], profile: Mapping[str, Any]
) -> tuple[str, str]:
    """The run's identity: ``(source_hash, files_hash)``.

    Parameters
    ----------
    hashes : mapping
        File name -> SHA-256 of its bytes.
    channel_map, profile : mapping
        The checked channel map and robot profile as stored in ``meta.json``
        (``ChannelMap.to_dict()``, ``RobotProfile.to_dict()``): a change of any value
        changes the key, a change of layout or comments in the TOML does not.

    Returns
    -------
    source_hash : str
        SHA-256 over the files' hashes, the map and the profile.
    files_hash : str
        :func:`files_key` of the files alone.
    """
    files = files_key(hashes)
    both = f"files:{files}\nmap:{_digest(channel_map)}\nprofile:{_digest(profile)}"
    return hashlib.sha256(both.encode()).hexdigest(), files


def _same_setup(meta: Mapping[str, Any], channel_map: Any, profile: Any) -> bool:
    return _digest(meta.get("channel_map")) == _digest(channel_map) and _digest(
        meta.get("profile")
    ) == _digest(profile)


def find_duplicate(
    archive: RunLookup,
    source_hash: str,
    files_hash: str,
    channel_map: Mapping[str, Any],
    profile: Mapping[str, Any],
) -> str | None:
    """The run already stored from these files with this map and profile, if any.

    A run ingested before the map and profile counted carries the files' hash as
    its ``source_hash``: it is a duplicate when its stored map and profile are
    these (JSON round trip compared).
    """
    found = archive.find_by_hash(source_hash)
    if found is not None:
        return found
    legacy = archive.find_by_hash(files_hash)
    if legacy is not None:
        plain = json.loads(json.dumps([channel_map, profile], default=str))
        if _same_setup(archive.get_meta(legacy), plain[0], plain[1]):
            return legacy
    return None


def same_files_run(archive: RunLookup, files_hash: str, skip: str | None = None) -> str | None:
    """A stored run read from the same files (with another map or profile), if any.

    Reads each run's ``meta.json`` (the catalog keeps only the full key): one small
    file per stored run, once per ingest.
    """
    if archive.find_by_hash(files_hash) not in (None, skip):
        return archive.find_by_hash(files_hash)
    for row in archive.list_runs():
        run_id = str(row["run_id"])
        if run_id == skip:
            continue
        meta = archive.get_meta(run_id)
        if meta.get("files_hash") == files_hash:
            return run_id
    return None


def default_run_name(files: Sequence[str | os.PathLike[str]]) -> str:
    """A run name from its file names: their common start, else the first file's stem.

    ``['t7_state.csv', 't7_torque.csv']`` gives ``'t7'``; ``['imu.csv.gz']`` gives
    ``'imu'``.
    """
    stems = [Path(f).name.split(".")[0] for f in files]
    if not stems:
        return "run"
    common = os.path.commonprefix(stems).rstrip("_-. ")
    return common if len(common) >= 2 else stems[0]


#: Metadata fields an ingest may set, in the order messages name them.
META_FIELDS = ("name", "course", "controller", "tags", "notes", "date")


def not_applied(meta: Mapping[str, Any], given: Mapping[str, Any]) -> list[str]:
    """The metadata given to a duplicate ingest that differs from the stored run's.

    Parameters
    ----------
    meta : mapping
        The stored run's ``meta.json``.
    given : mapping
        What the ingest was given (None or empty: not given).

    Returns
    -------
    list of str
        ``"name 'new' (stored: 'old')"`` per differing field, in :data:`META_FIELDS` order.
    """
    out = []
    for key in META_FIELDS:
        value = given.get(key)
        if value is None or value == "" or value == [] or value == ():
            continue
        stored = meta.get(key)
        if key == "tags":
            if sorted(value) == sorted(stored or []):
                continue
            out.append(f"tags {', '.join(value)} (stored: {', '.join(stored or []) or 'none'})")
        elif key == "date":
            continue  # the stored start comes from the log when it carries absolute time
        elif value != stored:
            out.append(f"{key} {value!r} (stored: {stored!r})")
    return out
