"""Time and column types of a log file during ingest.

Raw time (s, ms, us, ns, or ISO 8601 parsed to ns) becomes seconds since the
run's origin; the origin is kept in integer nanoseconds so that epoch times in
ns lose nothing before the subtraction.
"""

from __future__ import annotations

from datetime import UTC, datetime
from decimal import Decimal

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from analysis.errors import IngestError
from analysis.ingest.channel_map import ISO8601, SourceSpec
from analysis.ingest.read import FileInfo, TimeCheck, _validate
from analysis.profile import unit_registry

#: Plausible absolute (epoch) timestamps: from 1990-01-01 to 2100-01-01 UTC. [s since epoch]
EPOCH_RANGE_S = (
    datetime(1990, 1, 1, tzinfo=UTC).timestamp(),
    datetime(2100, 1, 1, tzinfo=UTC).timestamp(),
)
#: Plausible boot-clock timestamps: within 30 days of the clock's zero. [s]
BOOT_RANGE_S = 30 * 86400.0
#: A single row this far from both neighbours (which are close to each other) is skipped. [s]
SPIKE_S = 10.0


def time_check(source: SourceSpec) -> TimeCheck:
    """The plausible range of a source's raw time column (see :class:`TimeCheck`)."""
    ns = ns_per_unit(source)
    unit = "ns" if source.time_unit == ISO8601 else source.time_unit
    if source.time_origin == "epoch" or source.time_unit == ISO8601:
        lo_s, hi_s = EPOCH_RANGE_S
        where = "1990-01-01 .. 2100-01-01 UTC (time since the Unix epoch)"
    else:
        lo_s, hi_s = -BOOT_RANGE_S, BOOT_RANGE_S
        where = "within 30 days of the clock's zero (time since boot)"
    per_s = 1e9 / ns  # raw units per second
    return TimeCheck(lo_s * per_s, hi_s * per_s, SPIKE_S * per_s, unit, where)


def time_type(info: FileInfo, source: SourceSpec) -> pa.DataType:
    if source.time_unit == ISO8601:
        return pa.timestamp("ns", "UTC")
    if info.fmt == "parquet":
        t = pq.ParquetFile(info.path).schema_arrow.field(source.time_column).type
    elif info.peek is not None and source.time_column in info.peek.column_names:
        t = info.peek.schema.field(source.time_column).type
    else:
        t = pa.float64()
    if pa.types.is_timestamp(t) or pa.types.is_string(t):
        raise IngestError(
            f"{info.path.name}: time column {source.time_column!r} holds date-time text or "
            f"timestamps, but the map says time_unit = {source.time_unit!r}. "
            f'Set time_unit = "iso8601".'
        )
    return pa.int64() if pa.types.is_integer(t) else pa.float64()


def extra_type(info: FileInfo, column: str) -> pa.DataType:
    if info.fmt == "parquet":
        return pq.ParquetFile(info.path).schema_arrow.field(column).type
    if info.peek is None or column not in info.peek.column_names:
        return pa.string()
    t = info.peek.schema.field(column).type
    if pa.types.is_integer(t) or pa.types.is_floating(t):
        return pa.float64()
    if pa.types.is_boolean(t):
        return pa.bool_()
    return pa.string()


def ns_per_unit(source: SourceSpec) -> int:
    unit = "ns" if source.time_unit == ISO8601 else source.time_unit
    return int(round(unit_registry().Quantity(1, unit).to("ns").magnitude))


def raw_time(col: pa.ChunkedArray | pa.Array) -> np.ndarray:
    if pa.types.is_timestamp(col.type):
        col = col.cast(pa.int64())
    return np.asarray(col.to_numpy())


def first_time_ns(info: FileInfo, source: SourceSpec, ttype: pa.DataType) -> int | None:
    """Earliest timestamp among the first rows of a file (all rows for Parquet). [ns]"""
    if info.fmt == "parquet":
        col = pq.read_table(info.path, columns=[source.time_column]).column(source.time_column)
        col = col.cast(ttype)
    elif info.peek is not None and source.time_column in info.peek.column_names:
        col, _ = _validate(
            info.peek.column(source.time_column).combine_chunks().cast(pa.string()), ttype
        )
    else:
        return None
    col = pc.drop_null(col)
    if len(col) == 0:
        return None
    if info.time_check is not None:  # an implausible time never sets the origin
        implausible, _ = info.time_check.bad_rows(col)
        col = col.filter(pa.array(~implausible))
        if len(col) == 0:
            return None
    raw = raw_time(col)
    low = raw.min()
    ns = ns_per_unit(source)
    # Decimal(float) is exact: no float rounding of epoch values at ns scale
    return int(low) * ns if raw.dtype.kind in "iu" else int(round(Decimal(float(low)) * ns))


class Clock:
    """Raw time of one source -> seconds since the run's origin, keeping ns precision."""

    def __init__(self, source: SourceSpec, origin_ns: int) -> None:
        self.ns = ns_per_unit(source)
        self.factor = source.time_factor  # s per raw unit (pint)
        self.base, rem = divmod(origin_ns, self.ns)  # origin in raw units + ns remainder
        self.rem_s = rem * 1e-9
        self.origin_raw = origin_ns / self.ns

    def seconds(self, raw: np.ndarray) -> np.ndarray:
        if raw.dtype.kind in "iu":
            return (raw - np.int64(self.base)).astype(np.float64) * self.factor - self.rem_s
        return (raw - self.origin_raw) * self.factor
