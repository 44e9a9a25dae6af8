"""File helpers of the run archive: strict JSON, result frames, as-of indices, profiles.

Kept apart from :mod:`analysis.archive.store` so that module holds the layout and the
catalog logic only.
"""

from __future__ import annotations

import json
import math
import os
import secrets
from contextlib import suppress
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from analysis.profile import Actuator, ComModel, MotorConstants, RobotProfile, Thresholds

_JSON_COLUMNS_KEY = b"outrigger.json_columns"


def json_safe(obj: Any) -> Any:
    """Plain JSON data: numpy scalars to Python, NaN and inf to null."""
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple | np.ndarray):
        return [json_safe(v) for v in obj]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, pd.Timestamp | datetime):
        return obj.isoformat()
    return obj


def write_json(path: Path, data: dict[str, Any]) -> None:
    tmp = path.with_name(path.name + f".{secrets.token_hex(3)}.tmp")
    tmp.write_text(json.dumps(json_safe(data), indent=1, allow_nan=False), encoding="utf-8")
    os.replace(tmp, path)


def write_frame(frame: pd.DataFrame, path: Path | str, filesystem: Any = None) -> None:
    """DataFrame to Parquet; object columns of dicts/lists are stored as JSON text.

    ``filesystem`` (pyarrow's) writes straight into an object store, where one
    upload appears whole when complete.
    """
    frame = frame.copy()
    json_cols = []
    for col in frame.columns:
        if (
            frame[col].dtype == object
            and frame[col].map(lambda v: isinstance(v, dict | list)).any()
        ):
            frame[col] = frame[col].map(lambda v: json.dumps(json_safe(v)))
            json_cols.append(str(col))
    table = pa.Table.from_pandas(frame, preserve_index=False)
    table = table.replace_schema_metadata(
        {**(table.schema.metadata or {}), _JSON_COLUMNS_KEY: json.dumps(json_cols).encode()}
    )
    pq.write_table(table, path, compression="zstd", filesystem=filesystem)


def read_frame(
    path: Path | str,
    columns: list[str] | None = None,
    filters: list[Any] | None = None,
    filesystem: Any = None,
) -> pd.DataFrame:
    """Parquet written by :func:`write_frame` back to a DataFrame (``filesystem``: pyarrow's)."""
    table = pq.read_table(path, columns=columns, filters=filters, filesystem=filesystem)
    meta = table.schema.metadata or {}
    frame = table.to_pandas()
    with suppress(ValueError, TypeError):
        for col in json.loads(meta.get(_JSON_COLUMNS_KEY, b"[]")):
            if col in frame:
                frame[col] = frame[col].map(lambda v: json.loads(v) if isinstance(v, str) else v)
    return frame


def asof_indices(t: np.ndarray, other_t: np.ndarray, tolerance_s: float) -> pa.Array:
    """Index into ``other_t`` of the nearest earlier (or equal) sample for each ``t``.

    Parameters
    ----------
    t : ndarray
        Times to look up, sorted. [s]
    other_t : ndarray
        Sample times of the joined stream, sorted. [s]
    tolerance_s : float
        Largest allowed age of the sample; older gives a null index. [s]

    Returns
    -------
    pyarrow.Array
        int64 indices, null where no sample is recent enough (so ``take`` gives null).
    """
    if len(other_t) == 0:
        return pa.nulls(len(t), pa.int64())
    idx = np.searchsorted(other_t, t, side="right") - 1
    safe = np.clip(idx, 0, len(other_t) - 1)
    ok = (idx >= 0) & ((t - other_t[safe]) <= tolerance_s)
    return pa.array(safe, mask=~ok)


def profile_from_si(d: dict[str, Any], where: str) -> RobotProfile:
    """Rebuild a :class:`RobotProfile` from ``RobotProfile.to_dict()`` output."""
    actuators = tuple(
        Actuator(**{**a, "motor": MotorConstants(**a["motor"]) if a.get("motor") else None})
        for a in d["actuators"]
    )
    return RobotProfile(
        name=d["name"],
        wheel_radius=d["wheel_radius"],
        track_width=d["track_width"],
        mass=d["mass"],
        com=ComModel(**d["com"]),
        wheel_encoder_reference=d["wheel_encoder_reference"],
        actuators=actuators,
        thresholds=Thresholds.from_mapping(d["thresholds"], where=where),
    )
