"""File helpers of the run archive: strict JSON, result frames, as-of indices, profiles.

Kept apart from :mod:`analysis.archive.store` so that module holds the layout and the
catalog logic only.
"""

from __future__ import annotations

import json
import math
import os
import secrets
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import suppress
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from analysis.ingest.order import row_group_batches
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


class RowGroupCache:
    """Forward reader of Parquet files for successive time windows of a run.

    A chunked analysis reads a run window after window, each starting later than
    the one before. Reading each window with ``pyarrow.parquet.read_table`` decodes
    whole row groups (about 1M rows) again and again, and holds them; this reads
    each file once, in batches, and holds only the batches of the current window.
    A window that starts before the batches held (or other columns) starts the
    file over. Rows come out exactly as ``read_table`` with the same ``t`` filters
    gives them.
    """

    #: Rows per decoded batch. [-]
    BATCH_ROWS = 1 << 16

    def __init__(self) -> None:
        self._state: dict[str, tuple[tuple[str, ...], Any, list[pa.RecordBatch], bool]] = {}
        self._dropped: dict[str, float] = {}  # last time of the batches let go, per file [s]

    def read(self, path: Path, columns: list[str], lo: float | None, hi: float | None) -> pa.Table:
        """Rows of ``path`` with ``lo <= t <= hi`` (either bound optional), given columns."""
        key, cols = str(path), tuple(columns)
        state = self._state.get(key)
        held: list[pa.RecordBatch]
        if (
            state is None
            or state[0] != cols
            or (lo is not None and state[2] and _first_t(state[2][0]) > lo)
        ):
            pf = pq.ParquetFile(path)
            batches = row_group_batches(pf, list(cols), self.BATCH_ROWS)
            held, done, schema = [], False, pf.schema_arrow
            self._dropped[key] = -math.inf
        else:
            _, batches, held, done = state
            schema = None
        if lo is not None:  # drop the batches that end before the window
            while held and _last_t(held[0]) < lo:
                self._dropped[key] = _last_t(held.pop(0))
        while not done and (hi is None or not held or _last_t(held[-1]) <= hi):
            batch = next(batches, None)
            if batch is None:
                done = True
                break
            if not batch.num_rows:
                continue
            if lo is None or _last_t(batch) >= lo:
                held.append(batch)
            else:
                self._dropped[key] = _last_t(batch)
        self._state[key] = (cols, batches, held, done)
        if not held:
            if schema is None:
                schema = pq.ParquetFile(path).schema_arrow
            return schema.empty_table().select(list(cols))
        table = pa.Table.from_batches(held)
        # A stored stream is sorted by t (ingest orders it), so the rows lo <= t <= hi
        # are one slice: no copy, where a filter would copy every column.
        t = table.column("t").to_numpy()
        i0 = 0 if lo is None else int(np.searchsorted(t, lo, side="left"))
        i1 = t.size if hi is None else int(np.searchsorted(t, hi, side="right"))
        return table.slice(i0, max(i1 - i0, 0))


def _first_t(batch: pa.RecordBatch) -> float:
    return float(batch.column(0)[0].as_py())


def _last_t(batch: pa.RecordBatch) -> float:
    return float(batch.column(0)[batch.num_rows - 1].as_py())


#: Rows per row group of a frame written in parts at most: 65,536 (164 s at 400 Hz).
#: A dashboard zoom on a long run decodes every row group of the derived series its
#: window touches; a 10-minute part (240,000 rows at 400 Hz) in one row group took 30
#: to 190 ms of the 200 ms zoom budget on an eight-hour run.
PART_ROW_GROUP_ROWS = 1 << 16


class FrameWriter:
    """Write a frame to Parquet in parts, as :func:`write_frame` would write it whole.

    For frames of plain columns (numbers, bool, text; no dict/list cells). Each
    part becomes one or more row groups of at most :data:`PART_ROW_GROUP_ROWS`
    rows; every part must have the first part's columns.
    """

    def __init__(self, path: Path, background: bool = False) -> None:
        self.path = path
        self._writer: pq.ParquetWriter | None = None
        self.rows = 0
        # background: one part is converted and compressed on a thread while the caller
        # goes on (pyarrow lets go of the GIL to compress); at most one part waits.
        self._pool = ThreadPoolExecutor(1, "frame-writer") if background else None
        self._pending: Future[None] | None = None

    def write(self, frame: pd.DataFrame) -> None:
        """Append the rows of ``frame`` (in the background: after the part before it)."""
        if self._pool is None:
            self._write(frame)
            return
        self.wait()
        self._pending = self._pool.submit(self._write, frame)

    def wait(self) -> None:
        """Wait for a part being written in the background; raise what its writing raised."""
        pending, self._pending = self._pending, None
        if pending is not None:
            pending.result()

    def _write(self, frame: pd.DataFrame) -> None:
        table = pa.Table.from_pandas(frame, preserve_index=False)
        if self._writer is None:
            schema = table.schema.with_metadata(
                {**(table.schema.metadata or {}), _JSON_COLUMNS_KEY: b"[]"}
            )
            # Derived series are noisy floats: a dictionary would cost time for nothing, and
            # their bytes split by significance (Parquet's BYTE_STREAM_SPLIT) compress
            # better. On the series of a one-hour run (1.44M rows, 31 columns, 316 MB in
            # memory): 0.63 s CPU and 196 MB against 0.75 s and 203 MB (measured, no source).
            floats = [f.name for f in schema if pa.types.is_floating(f.type)]
            dictionary = [f.name for f in schema if f.name not in floats]
            self._writer = pq.ParquetWriter(
                self.path,
                schema,
                compression="zstd",
                use_dictionary=dictionary,
                use_byte_stream_split=floats,
            )
        table = table.cast(self._writer.schema)
        self._writer.write_table(table, row_group_size=PART_ROW_GROUP_ROWS)
        self.rows += table.num_rows

    def close(self) -> None:
        """Finish the file (an empty frame's file if nothing was written)."""
        try:
            self.wait()
        finally:
            if self._pool is not None:
                self._pool.shutdown(wait=True)
                self._pool = None
        if self._writer is None:
            write_frame(pd.DataFrame(), self.path)
            return
        self._writer.close()


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
