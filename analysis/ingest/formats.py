"""Readers of JSON Lines and Parquet logs, and the dispatch over all formats.

Same contract as :func:`analysis.ingest.read.iter_csv`: tables with fixed
column types, bad lines (rows, for Parquet) skipped and recorded.
"""

from __future__ import annotations

import io
import json
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.json as pajson
import pyarrow.parquet as pq

from analysis.errors import IngestError
from analysis.ingest.order import row_group_batches
from analysis.ingest.read import (
    PARQUET_BATCH_ROWS,
    BadLines,
    FileInfo,
    _convert_text_table,
    _iter_text_blocks,
    drop_bad_times,
    iter_csv,
)

# --- JSON Lines ----------------------------------------------------------------------


def iter_jsonl(
    info: FileInfo,
    types: dict[str, pa.DataType],
    required: str,
    bad: BadLines,
    tick: Callable[[int], None] | None = None,
) -> Iterator[pa.Table]:
    """Yield the rows of a JSON Lines file as tables with ``types`` (see :func:`iter_csv`)."""
    parse_types = {c: (pa.string() if pa.types.is_timestamp(t) else t) for c, t in types.items()}
    schema = pa.schema(list(parse_types.items()))
    opts = pajson.ParseOptions(explicit_schema=schema, unexpected_field_behavior="ignore")
    for block, first in _iter_text_blocks(info, tick):
        lines = block.split(b"\n")
        if lines and lines[-1] == b"":
            lines.pop()
        content = [bool(ln.strip()) for ln in lines]
        n_content = sum(content)
        try:
            table = pajson.read_json(io.BytesIO(block), parse_options=opts)
            if table.num_rows != n_content or table.column(required).null_count:
                raise pa.ArrowInvalid("row count or time nulls: take the slow path")
            for c, t in types.items():
                if pa.types.is_timestamp(t):
                    table = table.set_column(
                        table.schema.get_field_index(c), c, table.column(c).cast(t)
                    )
            bad.total += n_content
            lines_of = first + np.flatnonzero(np.asarray(content, bool))
            table = drop_bad_times(
                table.select(list(types)), required, lines_of, bad, info.time_check
            )
            if table.num_rows:
                yield table
            continue
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            pass
        # Slow path: one line at a time, only for blocks holding a bad line.
        rows: dict[str, list[object]] = {c: [] for c in types}
        good: list[int] = []
        for k, ln in enumerate(lines):
            if not content[k]:
                continue
            bad.total += 1
            try:
                obj = json.loads(ln)
            except ValueError:
                bad.add([first + k], "not valid JSON (truncated or malformed line)")
                continue
            if not isinstance(obj, dict):
                bad.add([first + k], "not a JSON object")
                continue
            for c in types:
                v = obj.get(c)
                rows[c].append(None if v is None else str(v))
            good.append(first + k)
        if good:
            text = pa.table({c: pa.array(v, pa.string()) for c, v in rows.items()})
            out = _convert_text_table(text, types, required, np.asarray(good), bad, info.time_check)
            if out.num_rows:
                yield out


# --- Parquet -------------------------------------------------------------------------


def iter_parquet(
    info: FileInfo,
    types: dict[str, pa.DataType],
    required: str,
    bad: BadLines,
    tick: Callable[[int], None] | None = None,
) -> Iterator[pa.Table]:
    """Yield the rows of a Parquet file as tables with ``types``; rows are numbered from 1."""
    pf = pq.ParquetFile(info.path)
    bad.unit = "row"
    row0 = 1
    total = max(pf.metadata.num_rows, 1)
    for batch in row_group_batches(pf, list(types), PARQUET_BATCH_ROWS):
        table = pa.Table.from_batches([batch])
        arrays = {}
        for c, t in types.items():
            col = table.column(c)
            if col.type != t:
                try:
                    col = col.cast(t)
                except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
                    raise IngestError(
                        f"{info.path.name}: column {c!r} of type {col.type} cannot be read as "
                        f"{t} ({exc}). Check the channel map's unit for it."
                    ) from exc
            arrays[c] = col
        out = pa.table(arrays)
        bad.total += out.num_rows
        nulls = ~pc.is_valid(out.column(required)).to_numpy(zero_copy_only=False)
        rows = row0 + np.arange(out.num_rows)
        if nulls.any():
            bad.add(row0 + np.flatnonzero(nulls), f"empty time cell in column {required!r}")
            out = out.filter(pa.array(~nulls))
            rows = rows[~nulls]
        out = drop_bad_times(out, required, rows, bad, info.time_check)
        row0 += batch.num_rows
        if tick is not None:
            tick(int(info.size * min(1.0, (row0 - 1) / total)))
        yield out


def iter_file(
    info: FileInfo,
    types: dict[str, pa.DataType],
    required: str,
    bad: BadLines,
    tick: Callable[[int], None] | None = None,
    hasher: Any = None,
) -> Iterator[pa.Table]:
    """Yield the rows of any supported file (dispatch on ``info.fmt``).

    ``hasher`` (a ``hashlib`` object) is fed the file's bytes as they are read;
    only for files where :func:`hashed_while_read` is True.
    """
    if hasher is not None:
        if not hashed_while_read(info):
            raise ValueError(f"{info.path.name} cannot be hashed while it is read")
        return iter_csv(info, types, required, bad, tick, hasher)
    reader = {"csv": iter_csv, "jsonl": iter_jsonl, "parquet": iter_parquet}[info.fmt]
    return reader(info, types, required, bad, tick)


def hashed_while_read(info: FileInfo) -> bool:
    """Whether the file's SHA-256 can be taken in the reading pass (uncompressed CSV)."""
    return info.fmt == "csv" and not info.compression
