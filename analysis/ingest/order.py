"""Time order of an ingested stream: duplicates, out-of-order rows, gaps and rate.

The streaming pass (:mod:`analysis.ingest.stream`) drops duplicated timestamps between
neighbouring rows and notices whether time ever runs backwards. Only a stream
whose time ran backwards (or whose time origin moved) is rewritten here, in a
second pass over its Parquet file.

Notes
-----
The second pass keeps memory bounded by columns, not by the table: it reads the
``t`` column, computes a stable sort order, and then takes one column at a time
into a memory-mapped Arrow IPC file; the final Parquet file is assembled from
those files one row group at a time. Peak memory is about four float64 columns
of the stream (``t``, the order, one column and its sorted copy), e.g. 1.3 GB for
40 million rows, against ``rows x columns x 8`` bytes for an in-memory sort.
A stable sort keeps file order among equal timestamps, so "keep the first of
duplicated timestamps" means the first in the file.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from analysis import catalogue

#: Rows per Parquet row group of a stored stream: 131,072 (328 s at 400 Hz). A
#: dashboard zoom decodes every row group its window touches; groups of 2**20 rows took
#: 100 ms of the 200 ms zoom budget on an eight-hour run, these 20 ms (files 12 % larger).
ROW_GROUP_ROWS = 1 << 17
#: A gap is a step in time longer than this many median periods.
GAP_FACTOR = 5.0
#: Most gaps listed in the report (all are counted).
MAX_LISTED_GAPS = 100


#: A float column is dictionary-encoded when at most this share of the values of
#: the first rows written are distinct (measured on the demo log and a noisy log,
#: common practice, no source: repeated logged values, e.g. printed with 2-4
#: decimals, encode faster and 30% smaller with a dictionary; noisy values 3x
#: slower to write with one). [-]
DICTIONARY_MAX_DISTINCT = 0.25
#: Rows of the first block looked at for that choice. [-]
DICTIONARY_SAMPLE_ROWS = 65536


def dictionary_columns(table: pa.Table) -> list[str]:
    """Columns worth a dictionary: every non-float one, and floats with few distinct values."""
    sample = table.slice(0, DICTIONARY_SAMPLE_ROWS)
    out = []
    for f in table.schema:
        if not pa.types.is_floating(f.type):
            out.append(f.name)
        elif sample.num_rows:
            distinct = pc.count_distinct(sample.column(f.name)).as_py()
            if distinct <= DICTIONARY_MAX_DISTINCT * sample.num_rows:
                out.append(f.name)
    return out


def open_writer(
    path: Path, schema: pa.Schema, dictionary: list[str] | None = None
) -> pq.ParquetWriter:
    """Parquet writer of a stored stream: zstd; dictionary encoding for ``dictionary``.

    By default only non-float columns; :func:`dictionary_columns` picks the float
    columns that repeat their values enough to gain from it.
    """
    if dictionary is None:
        dictionary = [f.name for f in schema if not pa.types.is_floating(f.type)]
    return pq.ParquetWriter(path, schema, compression="zstd", use_dictionary=dictionary)


def duplicate_masks(t: np.ndarray, table: pa.Table) -> tuple[np.ndarray, np.ndarray]:
    """Rows to drop because their timestamp equals the row before (``t`` sorted within ties).

    Parameters
    ----------
    t : ndarray
        Time of each row, equal timestamps adjacent. [s]
    table : pyarrow.Table
        The rows, in the same order, for comparing values.

    Returns
    -------
    exact, conflicting : ndarray of bool
        Rows equal in every column to the first row of their timestamp, and rows
        with the same timestamp but other values. The first row of each
        timestamp is in neither.
    """
    n = len(t)
    dup = np.zeros(n, bool)
    if n < 2:
        return dup, dup.copy()
    dup[1:] = t[1:] == t[:-1]
    if not dup.any():
        return dup, np.zeros(n, bool)
    starts = np.where(~dup, np.arange(n), 0)
    first = np.maximum.accumulate(starts)
    idx = np.flatnonzero(dup)
    same = np.ones(len(idx), bool)
    a_idx, b_idx = pa.array(idx), pa.array(first[idx])
    for name in table.column_names:
        col = table.column(name)
        same &= _equal(col.take(a_idx), col.take(b_idx))
    exact = np.zeros(n, bool)
    exact[idx[same]] = True
    conflicting = dup & ~exact
    return exact, conflicting


def late_rows(t: np.ndarray, prev_max: float) -> int:
    """Count rows earlier than some row before them (rows that arrived out of order)."""
    if len(t) == 0:
        return 0
    running = np.maximum.accumulate(np.concatenate(([prev_max], t[:-1])))
    return int(np.count_nonzero(t < running))


def rewrite_stream(path: Path, shift: float, needs_sort: bool) -> tuple[np.ndarray, int, int]:
    """Second pass: shift ``t`` by ``shift`` and, if needed, sort and drop duplicates.

    Parameters
    ----------
    path : Path
        The stream's Parquet file; replaced in place.
    shift : float
        Added to every ``t``. [s]
    needs_sort : bool
        True if time ran backwards somewhere in the stream.

    Returns
    -------
    t : ndarray
        Final time column. [s]
    exact, conflicting : int
        Rows dropped as exact duplicates and as conflicting timestamps.
    """
    pf = pq.ParquetFile(path)
    schema = pf.schema_arrow
    tmp = path.with_name(path.name + ".tmp")
    if not needs_sort:
        parts = []
        with open_writer(tmp, schema) as writer:
            for i in range(pf.num_row_groups):
                rg = pf.read_row_group(i)
                t = rg.column(catalogue.T).to_numpy() + shift
                parts.append(t)
                rg = rg.set_column(0, catalogue.T, pa.array(t))
                writer.write_table(rg, row_group_size=ROW_GROUP_ROWS)
        os.replace(tmp, path)
        return (np.concatenate(parts) if parts else np.zeros(0)), 0, 0
    t_all = pq.read_table(path, columns=[catalogue.T]).column(catalogue.T).to_numpy() + shift
    order = np.argsort(t_all, kind="stable")
    t_sorted = t_all[order]
    del t_all
    dup = np.zeros(len(t_sorted), bool)
    dup[1:] = t_sorted[1:] == t_sorted[:-1]
    same = dup.copy()
    order_arr = pa.array(order)
    with tempfile.TemporaryDirectory(dir=path.parent) as td:
        # Pass A: compare values of tied rows column by column.
        if dup.any():
            idx = np.flatnonzero(dup)
            first = np.maximum.accumulate(np.where(~dup, np.arange(len(dup)), 0))[idx]
            for name in schema.names[1:]:
                col = pq.read_table(path, columns=[name]).column(name).take(order_arr)
                a = col.take(pa.array(idx))
                b = col.take(pa.array(first))
                same[idx] &= _equal(a, b)
        keep = ~dup
        n_exact = int(np.count_nonzero(dup & same))
        n_conf = int(np.count_nonzero(dup & ~same))
        keep_arr = pa.array(keep)
        # Pass B: each column sorted and filtered into its own IPC file.
        files = []
        for k, name in enumerate(schema.names):
            if k == 0:
                col = pa.chunked_array([pa.array(t_sorted[keep])])
            else:
                col = pq.read_table(path, columns=[name]).column(name).take(order_arr)
                col = col.filter(keep_arr)
            f = Path(td) / f"{k}.arrow"
            with (
                pa.OSFile(str(f), "wb") as sink,
                pa.ipc.new_file(sink, pa.schema([schema.field(k)])) as w,
            ):
                w.write_table(pa.table({name: col}, schema=pa.schema([schema.field(k)])))
            files.append(f)
            del col
        t_final = t_sorted[keep]
        del t_sorted
        readers = [pa.ipc.open_file(pa.memory_map(str(f))).read_all() for f in files]
        n = len(t_final)
        with open_writer(tmp, schema) as writer:
            for start in range(0, n, ROW_GROUP_ROWS):
                cols = [r.column(0).slice(start, ROW_GROUP_ROWS) for r in readers]
                writer.write_table(pa.Table.from_arrays(cols, schema=schema))
        del readers
    os.replace(tmp, path)
    return t_final, n_exact, n_conf


def _equal(a: pa.ChunkedArray, b: pa.ChunkedArray) -> np.ndarray:
    """Element-wise equality where two nulls (or two NaN) count as equal."""
    if pa.types.is_floating(a.type):
        x = a.to_numpy()
        y = b.to_numpy()
        return (x == y) | (np.isnan(x) & np.isnan(y))
    eq = pc.equal(a, b)
    both_null = pc.and_(pc.is_null(a), pc.is_null(b))
    return pc.fill_null(pc.or_kleene(eq, both_null), False).to_numpy(zero_copy_only=False)


def time_stats(t: np.ndarray) -> dict[str, Any]:
    """Rate, duration and gaps of a sorted time column.

    Parameters
    ----------
    t : ndarray
        Sorted, duplicate-free time. [s]

    Returns
    -------
    dict
        ``rows``, ``rate_hz`` (1 / median period), ``duration_s``, and ``gaps``:
        ``count`` and ``list`` of ``[start_s, end_s]`` (steps longer than
        :data:`GAP_FACTOR` median periods; at most :data:`MAX_LISTED_GAPS` listed).
    """
    n = len(t)
    out: dict[str, Any] = {"rows": int(n), "rate_hz": None, "duration_s": 0.0}
    out["gaps"] = {"count": 0, "list": []}
    if n < 2:
        return out
    d = np.diff(t)
    period = float(np.median(d))
    out["duration_s"] = float(t[-1] - t[0])
    out["rate_hz"] = 1.0 / period if period > 0 else None
    if period > 0:
        where = np.flatnonzero(d > GAP_FACTOR * period)
        out["gaps"] = {
            "count": int(len(where)),
            "list": [[float(t[i]), float(t[i + 1])] for i in where[:MAX_LISTED_GAPS]],
        }
    return out


def row_group_batches(
    pf: pq.ParquetFile, columns: list[str], rows: int
) -> Iterator[pa.RecordBatch]:
    """A Parquet file's ``columns`` in batches of at most ``rows``, one reader per row group.

    Not one ``ParquetFile.iter_batches`` over the whole file: with pyarrow 26 that
    reader held on to memory as it went (about 330 MiB by the end of an 8-hour
    stream, 100 MiB over 6M rows of 13 columns); a reader per row group stays flat
    and still streams within a large row group (measured, no source).
    """
    for group in range(pf.num_row_groups):
        yield from pf.iter_batches(batch_size=rows, columns=columns, row_groups=[group])


def distance(t: np.ndarray, vel_x: np.ndarray) -> float:
    """Distance travelled: trapezoidal integral of ``|vel_x|`` over ``t``, gaps excluded.

    Steps longer than :data:`GAP_FACTOR` median periods are left out, so a
    logging gap is never bridged (nothing is interpolated).

    Parameters
    ----------
    t : ndarray
        Sorted time. [s]
    vel_x : ndarray
        Forward velocity; NaN samples contribute nothing. [m/s]

    Returns
    -------
    float
        Distance. [m]
    """
    if len(t) < 2:
        return 0.0
    return distance_in_parts([(t, vel_x)], float(np.median(np.diff(t))))


def distance_in_parts(parts: Iterable[tuple[np.ndarray, np.ndarray]], period: float) -> float:
    """:func:`distance` fed in consecutive parts (``t``, ``vel_x``), in bounded memory.

    Parameters
    ----------
    parts : iterable of (ndarray, ndarray)
        Consecutive pieces of the sorted time [s] and forward velocity [m/s].
    period : float
        Median sample interval of the whole column (the gap rule's unit). [s]

    Returns
    -------
    float
        Distance; each step between two parts counted once. [m]
    """
    total = 0.0
    prev: tuple[float, float] | None = None
    for t, vel_x in parts:
        if not len(t):
            continue
        t = np.asarray(t, dtype=float)
        v = np.abs(np.asarray(vel_x, dtype=float))
        if prev is not None:
            t, v = np.concatenate(([prev[0]], t)), np.concatenate(([prev[1]], v))
        d = np.diff(t)
        seg = 0.5 * (v[1:] + v[:-1]) * d
        ok = np.isfinite(seg) & (d <= GAP_FACTOR * period)
        total += float(seg[ok].sum())
        prev = (float(t[-1]), float(v[-1]))
    return total
