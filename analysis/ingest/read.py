"""Reading raw log files in batches: CSV (plain or gzip), Parquet and JSON Lines.

This module finds a file's format and columns and yields its rows as Arrow
tables of fixed column types, block by block, so that a multi-GB log never sits
in memory whole. Lines that do not parse are skipped and recorded with their
1-based line number in the file and the reason.

Notes
-----
CSV and JSON Lines are read in blocks of about :data:`BLOCK_BYTES` that end at a
line break. Each block first goes through the fast path: one multi-threaded
pyarrow parse with the final column types. The fast path is kept only if it
succeeds and yields one row per line of the block, which proves that the block
held no comment, blank or malformed line, so row ``i`` is line ``first + i``.
Otherwise the block takes the slow path: the lines are classified with numpy
(comment, blank, wrong number of fields), the good lines are parsed as text and
every column is validated and converted on its own, so each bad value can be
traced to its line. Fields may be quoted as RFC 4180 says (a delimiter or a
doubled quote mark inside quotes is part of the field); a line break inside a
quoted field is not supported (one record per line), and its lines are reported
as malformed.
"""

from __future__ import annotations

import io
import json
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.json as pajson
import pyarrow.parquet as pq

from analysis.errors import IngestError

#: Bytes of text parsed at once (before decompression for gzip this is the text size).
BLOCK_BYTES = 32 << 20
#: Longest line of a CSV or JSON Lines log; a longer one refuses the file. Bounds the
#: memory a line can take whatever the input (a gzip "bomb" of one endless line). [bytes]
MAX_LINE_BYTES = 1 << 20
#: Decompressed text one ingest reads at most, per byte of the server's upload limit:
#: an upload of N MiB may hold up to ``MAX_TEXT_RATIO * N`` MiB of log text. [-]
MAX_TEXT_RATIO = 20
#: Rows per batch read from Parquet input.
PARQUET_BATCH_ROWS = 1 << 18
#: Bytes read to find the header and guess types.
PEEK_BYTES = 2 * MAX_LINE_BYTES
#: Most skipped lines kept in the report (all are counted).
MAX_LISTED_LINES = 100

#: The CSV quote mark (RFC 4180).
QUOTE = b'"'
#: Why a line with an odd number of quote marks is skipped.
UNPAIRED_QUOTE = (
    "unpaired quote mark (truncated line, or a line break inside a quoted field, which "
    "is not supported: keep each record on one line)"
)

_FLOAT_RE = r"(?i)^[-+]?((\d+(\.\d*)?|\.\d+)(e[-+]?\d+)?|inf|infinity|nan)$"
_INT_RE = r"^[-+]?\d+$"
_BOOL_RE = r"(?i)^(true|false|1|0)$"


@dataclass
class TextBudget:
    """Decompressed text bytes one ingest may read, over all its files (checked while streaming)."""

    limit: int
    used: int = 0

    def spend(self, name: str, n: int) -> None:
        """Count ``n`` bytes read from file ``name``; refuse once past the limit."""
        self.used += n
        if self.used > self.limit:
            raise IngestError(
                f"{name}: the run's log text passes {self.limit / (1 << 20):,.0f} MiB once "
                f"decompressed, the most one ingest reads ({MAX_TEXT_RATIO}x the server's "
                "upload limit; --max-text-mb on the command line). Split the run into "
                "smaller files, or raise the limit if the logs really are that large."
            )


@dataclass
class TimeCheck:
    """Plausible raw timestamps of one source; a row outside is a bad line (skipped, reported).

    ``lo`` and ``hi`` bound the raw time in the column's own unit (int64
    nanoseconds for ISO 8601 text). ``spike`` is the smallest jump, in raw units,
    that makes a single row "far from its neighbours": a row more than ``spike``
    away from both the row before and the row after, while those two are within
    ``spike`` of each other, is skipped (a corrupt timestamp, not a logging gap,
    which is one jump and never jumps back).
    """

    lo: float
    hi: float
    spike: float
    unit: str
    where: str  # the plausible range in words, for the message

    def bad_rows(self, column: pa.Array | pa.ChunkedArray) -> tuple[np.ndarray, list[str]]:
        """Mask of implausible rows of a raw time column and the reason of each."""
        col = column.cast(pa.int64()) if pa.types.is_timestamp(column.type) else column
        valid = pc.is_valid(col).to_numpy(zero_copy_only=False)
        raw = np.asarray(pc.fill_null(col, 0).to_numpy(zero_copy_only=False), dtype=np.float64)
        with np.errstate(invalid="ignore"):
            out = valid & ~((raw >= self.lo) & (raw <= self.hi))
        # non-finite values compare False above, so NaN and inf are out of range too
        if len(raw) >= 3:
            ok = valid & ~out
            prev_d = np.abs(raw[1:-1] - raw[:-2])
            next_d = np.abs(raw[2:] - raw[1:-1])
            skip_d = np.abs(raw[2:] - raw[:-2])
            spike = (prev_d > self.spike) & (next_d > self.spike) & (skip_d <= self.spike)
            spike &= ok[:-2] & ok[2:] & ok[1:-1]
            out[1:-1] |= spike
        else:
            spike = np.zeros(0, bool)
        reasons = []
        for k in np.flatnonzero(out).tolist():
            is_spike = 0 < k < len(raw) - 1 and bool(spike[k - 1])
            why = (
                f"far from its neighbours (more than {self.spike:g} {self.unit} from the rows "
                "before and after)"
                if is_spike
                else f"outside the plausible range {self.where}"
            )
            reasons.append(f"time {raw[k]!r} {self.unit} is {why}")
        return out, reasons


def drop_bad_times(
    table: pa.Table, required: str, lines: np.ndarray, bad: BadLines, check: TimeCheck | None
) -> pa.Table:
    """Skip and record the rows of ``table`` whose time ``check`` finds implausible."""
    if check is None or table.num_rows == 0:
        return table
    mask, reasons = check.bad_rows(table.column(required).combine_chunks())
    if not mask.any():
        return table
    bad.add(np.asarray(lines)[mask], reasons)
    return table.filter(pa.array(~mask))


def _line_too_long(name: str, line_no: int, length: int | None = None) -> IngestError:
    found = f" ({length:,} bytes)" if length is not None else ""
    return IngestError(
        f"{name}: line {line_no} is longer than {MAX_LINE_BYTES // (1 << 20)} MiB{found}, the "
        f"longest line a log may have. The file is damaged or not a log (a missing line "
        f"break?); repair it or export it again."
    )


def _check_lines(name: str, block: bytes, first: int) -> None:
    """Refuse a block holding a line longer than :data:`MAX_LINE_BYTES`.

    Cheap: a line that long fully covers one of the half-limit windows of the
    block, so only windows without a line break are looked at closely.
    """
    half = MAX_LINE_BYTES // 2
    for pos in range(0, len(block), half):
        if block.find(b"\n", pos, pos + half) >= 0:
            continue
        start = block.rfind(b"\n", 0, pos) + 1
        end = block.find(b"\n", pos)
        end = len(block) if end < 0 else end
        if end - start > MAX_LINE_BYTES:
            raise _line_too_long(name, first + block.count(b"\n", 0, start), end - start)


@dataclass
class FileInfo:
    """What :func:`inspect_file` learnt about one log file."""

    path: Path
    fmt: str  # "csv" | "parquet" | "jsonl"
    compression: str | None
    columns: list[str]
    delimiter: str = ","
    header_line: int = 0  # 1-based line of the CSV header
    data_offset: int = 0  # byte offset of the first data line in the (decompressed) text
    size: int = 0  # bytes on disk
    peek: pa.Table | None = None  # first rows, types inferred
    text_budget: TextBudget | None = None  # decompressed text the ingest may still read
    time_check: TimeCheck | None = None  # plausible raw times, set by the ingest


@dataclass
class BadLines:
    """Lines of one file that were skipped, with reasons (the first ones listed, all counted)."""

    unit: str = "line"
    count: int = 0
    total: int = 0  # data lines or rows seen (comments and blank lines excluded)
    listed: list[dict[str, object]] = field(default_factory=list)

    def add(self, lines: Sequence[int] | np.ndarray, reason: str | Sequence[str]) -> None:
        """Record skipped lines with one reason for all or one reason per line."""
        n = len(lines)
        self.count += n
        room = MAX_LISTED_LINES - len(self.listed)
        for k in range(min(room, n)):
            why = reason if isinstance(reason, str) else reason[k]
            self.listed.append({self.unit: int(lines[k]), "reason": why})
        self.listed.sort(key=lambda item: int(item[self.unit]))  # type: ignore[call-overload]


def _open_text(path: Path, compression: str | None) -> tuple[pa.NativeFile, pa.NativeFile]:
    raw = pa.OSFile(str(path), "rb")
    stream = pa.CompressedInputStream(raw, "gzip") if compression else raw
    return raw, stream


def inspect_file(path: str | Path, delimiter: str | None = None) -> FileInfo:
    """Find the format, columns, CSV delimiter and header line of a log file.

    Raises
    ------
    IngestError
        If the file is missing, empty, has no data rows, or is neither CSV,
        Parquet nor JSON Lines.
    """
    p = Path(path)
    if not p.is_file():
        raise IngestError(f"Log file {p} does not exist.")
    size = p.stat().st_size
    if size == 0:
        raise IngestError(f"Log file {p.name} is empty (0 bytes). Give a file with data.")
    with p.open("rb") as fh:
        magic = fh.read(4)
    if magic == b"PAR1":
        try:
            pf = pq.ParquetFile(p)
        except Exception as exc:
            raise IngestError(f"{p.name} looks like Parquet but cannot be read: {exc}") from exc
        if pf.metadata.num_rows == 0:
            raise IngestError(f"Log file {p.name} is empty (a Parquet file with no rows).")
        return FileInfo(p, "parquet", None, pf.schema_arrow.names, size=size)
    compression = "gzip" if magic[:2] == b"\x1f\x8b" else None
    raw, stream = _open_text(p, compression)
    try:
        head = stream.read(PEEK_BYTES)
    except OSError as exc:
        raise IngestError(f"{p.name} is not a readable gzip file: {exc}") from exc
    finally:
        stream.close()
        raw.close()
    if b"\x00" in head:
        raise IngestError(
            f"{p.name} is neither CSV, Parquet nor JSON Lines (binary content). "
            f"Export the log as one of these."
        )
    raw_lines = head.split(b"\n")
    offset = 0
    for i, raw_line in enumerate(raw_lines):
        try:
            line = raw_line.decode("utf-8")
        except UnicodeDecodeError:
            line = raw_line.decode("latin-1")
        stripped = line.strip()
        complete = i < len(raw_lines) - 1
        if not stripped or stripped.startswith("#"):
            offset += len(raw_line) + 1
            continue
        if not complete and len(head) == PEEK_BYTES:
            raise _line_too_long(p.name, i + 1)
        if stripped.startswith("{"):
            return _inspect_jsonl(p, compression, head, size)
        delim = delimiter or max((",", ";", "\t"), key=stripped.count)
        columns = [c.strip().strip('"') for c in stripped.split(delim)]
        if len(columns) < 2:
            raise IngestError(
                f"{p.name} is neither CSV, Parquet nor JSON Lines: its first line "
                f"{stripped[:60]!r} has no ',', ';' or tab delimiter."
            )
        dupes = sorted({c for c in columns if columns.count(c) > 1})
        if dupes:
            raise IngestError(f"{p.name}: column name(s) {', '.join(dupes)} appear twice.")
        offset += len(raw_line) + 1
        rest = head[offset:]
        if not rest.strip(b"\r\n\t ;,#") and len(head) < PEEK_BYTES:
            raise IngestError(
                f"Log file {p.name} is empty: a header but no data rows. Give a file with data."
            )
        info = FileInfo(p, "csv", compression, columns, delim, i + 1, offset, size)
        info.peek = _peek_csv(info, rest)
        return info
    raise IngestError(
        f"Log file {p.name} is empty: no header line or data found. Give a file with data."
    )


def _inspect_jsonl(p: Path, compression: str | None, head: bytes, size: int) -> FileInfo:
    end = head.rfind(b"\n")
    block = head if end < 0 else head[: end + 1]
    columns: list[str] = []
    for line in block.split(b"\n")[:1000]:
        try:
            obj = json.loads(line)
        except ValueError:
            continue
        if isinstance(obj, dict):
            columns += [k for k in obj if k not in columns]
    if not columns:
        raise IngestError(f"{p.name} is not JSON Lines: no line holds a JSON object.")
    info = FileInfo(p, "jsonl", compression, columns, size=size)
    try:
        info.peek = pajson.read_json(io.BytesIO(block))
    except pa.ArrowInvalid:
        info.peek = None
    return info


def _peek_csv(info: FileInfo, rest: bytes) -> pa.Table | None:
    end = rest.rfind(b"\n")
    block = rest if end < 0 else rest[: end + 1]
    lines = [ln for ln in block.split(b"\n") if ln.strip() and not ln.startswith(b"#")]
    try:
        return pacsv.read_csv(
            io.BytesIO(b"\n".join(lines[:5000])),
            read_options=pacsv.ReadOptions(column_names=info.columns),
            parse_options=pacsv.ParseOptions(
                delimiter=info.delimiter, invalid_row_handler=lambda row: "skip"
            ),
        )
    except pa.ArrowInvalid:
        return None


# --- conversion with per-row validation (slow path) -------------------------------


def _validate(column: pa.Array, target: pa.DataType) -> tuple[pa.Array, np.ndarray]:
    """Convert a text column to ``target``; return it and the mask of unparseable cells."""
    n = len(column)
    if pa.types.is_string(target) or pa.types.is_large_string(target):
        return column.cast(target), np.zeros(n, bool)
    text = pc.utf8_trim_whitespace(column.cast(pa.string()))
    empty = pc.equal(text, "")
    text = pc.if_else(empty, pa.scalar(None, pa.string()), text)
    present = pc.is_valid(text).to_numpy(zero_copy_only=False)
    if pa.types.is_timestamp(target):
        try:
            return text.cast(target), np.zeros(n, bool)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            values = text.to_pylist()
            bad = np.zeros(n, bool)
            out: list[int | None] = []
            for k, v in enumerate(values):  # slow path only: blocks with unparseable times
                if v is None:
                    out.append(None)
                    continue
                try:
                    stamp = datetime.fromisoformat(v)
                except ValueError:
                    stamp = None
                if stamp is None or stamp.tzinfo is None:
                    bad[k] = True
                    out.append(None)
                else:
                    out.append(int(stamp.timestamp()) * 10**9 + stamp.microsecond * 1000)
            return pa.array(out, pa.int64()).cast(target), bad
    if pa.types.is_integer(target):
        pattern = _INT_RE
    elif pa.types.is_boolean(target):
        pattern = _BOOL_RE
    else:
        pattern = _FLOAT_RE
    ok = pc.fill_null(pc.match_substring_regex(text, pattern), True).to_numpy(zero_copy_only=False)
    bad = present & ~ok
    if bad.any():
        text = pc.if_else(pa.array(bad), pa.scalar(None, pa.string()), text)
    return text.cast(target), bad


def _convert_text_table(
    table: pa.Table,
    types: dict[str, pa.DataType],
    required: str,
    lines: np.ndarray,
    bad: BadLines,
    check: TimeCheck | None = None,
) -> pa.Table:
    """Slow path: validate every column of an all-text table, drop and record bad rows."""
    n = table.num_rows
    drop = np.zeros(n, bool)
    reasons: dict[int, str] = {}
    arrays = {}
    for name, target in types.items():
        arr, bad_cells = _validate(table.column(name).combine_chunks(), target)
        if bad_cells.any():
            idx = np.flatnonzero(bad_cells & ~drop)
            raw = table.column(name).take(pa.array(idx)).to_pylist()
            kind = "time" if name == required else "a number"
            for k, value in zip(idx.tolist(), raw, strict=True):
                reasons[k] = f"{value!r} in column {name!r} is not {kind}"
            drop |= bad_cells
        arrays[name] = arr
    missing_time = ~pc.is_valid(arrays[required]).to_numpy(zero_copy_only=False) & ~drop
    for k in np.flatnonzero(missing_time).tolist():
        reasons[k] = f"empty time cell in column {required!r}"
    drop |= missing_time
    out = pa.table(arrays)
    if drop.any():
        idx = np.flatnonzero(drop)
        bad.add(lines[idx], [reasons[k] for k in idx.tolist()])
        out = out.filter(pa.array(~drop))
    return drop_bad_times(out, required, np.asarray(lines)[~drop], bad, check)


# --- CSV -------------------------------------------------------------------------


def _iter_text_blocks(
    info: FileInfo, tick: Callable[[int], None] | None
) -> Iterator[tuple[bytes, int]]:
    """Yield (block of whole lines, 1-based line number of its first line)."""
    raw, stream = _open_text(info.path, info.compression)
    name = info.path.name
    try:
        skipped = stream.read(info.data_offset)
        budget = info.text_budget
        if budget is not None:
            budget.spend(name, len(skipped))
        line_no = skipped.count(b"\n") + 1
        carry = b""
        while True:
            chunk = stream.read(BLOCK_BYTES)
            if budget is not None:
                budget.spend(name, len(chunk))
            if tick is not None:
                tick(raw.tell())
            if not chunk:
                if carry:
                    yield carry, line_no
                return
            data = carry + chunk
            end = data.rfind(b"\n")
            if end < 0:
                if len(data) > MAX_LINE_BYTES:
                    raise _line_too_long(name, line_no)
                carry = data
                continue
            block, carry = data[: end + 1], data[end + 1 :]
            if len(carry) > MAX_LINE_BYTES:
                raise _line_too_long(name, line_no + block.count(b"\n"))
            _check_lines(name, block, line_no)
            yield block, line_no
            line_no += block.count(b"\n")
    finally:
        stream.close()
        raw.close()


def _line_table(block: bytes, delimiter: str, ncols: int, first: int) -> tuple[np.ndarray, ...]:
    """Classify the lines of a block with numpy: starts, lengths, valid mask, fields, numbers."""
    buf = np.frombuffer(block, np.uint8)
    nl = np.flatnonzero(buf == 10)
    starts = np.concatenate(([0], nl + 1))
    ends = np.concatenate((nl, [len(buf)]))
    if len(buf) and buf[-1] == 10:
        starts, ends = starts[:-1], ends[:-1]
    seg_len = ends - starts
    cr = np.zeros(len(starts), bool)
    has = seg_len > 0
    cr[has] = buf[ends[has] - 1] == 13
    text_len = seg_len - cr
    delim = buf == ord(delimiter)
    unbalanced = np.zeros(len(starts), bool)
    if QUOTE in block:
        # RFC 4180 quoting: a delimiter between a pair of quote marks belongs to the field
        # (a doubled quote inside a quoted field is a pair too). Parity of the quote marks
        # since the line's start, per byte; a line with an odd count is malformed.
        quote = buf == QUOTE[0]
        cq = np.concatenate(([0], np.cumsum(quote, dtype=np.int32)))
        line_of = np.concatenate(([0], np.cumsum(buf == 10, dtype=np.int32)[:-1]))
        line_of = np.minimum(line_of, max(len(starts) - 1, 0))
        inside = (cq[:-1] - cq[starts][line_of]) % 2 == 1
        delim &= ~inside
        unbalanced = (cq[ends] - cq[starts]) % 2 == 1
    cum = np.concatenate(([0], np.cumsum(delim, dtype=np.int32)))
    fields = cum[ends] - cum[starts] + 1
    first_char = np.where(text_len > 0, buf[np.minimum(starts, max(len(buf) - 1, 0))], 0)
    blank = text_len == 0
    comment = first_char == ord("#")
    fields = np.where(unbalanced, -1, fields)  # -1: an unpaired quote mark (see iter_csv)
    valid = ~blank & ~comment & (fields == ncols)
    numbers = first + np.arange(len(starts))
    return buf, starts, ends, valid, blank | comment, fields, numbers


def iter_csv(
    info: FileInfo,
    types: dict[str, pa.DataType],
    required: str,
    bad: BadLines,
    tick: Callable[[int], None] | None = None,
) -> Iterator[pa.Table]:
    """Yield the rows of a CSV file as tables with ``types``, skipping bad lines.

    Parameters
    ----------
    info : FileInfo
        From :func:`inspect_file`.
    types : dict of str to pyarrow.DataType
        Columns to return and their types; other columns are not converted.
    required : str
        Column that must be present in a row (the time column).
    bad : BadLines
        Receives the skipped lines and the count of data lines.
    tick : callable, optional
        Called with the bytes of the file read so far.
    """
    ncols = len(info.columns)
    read_opts = pacsv.ReadOptions(column_names=info.columns, block_size=8 << 20)
    parse_opts = pacsv.ParseOptions(delimiter=info.delimiter)
    typed_opts = pacsv.ConvertOptions(column_types=types, include_columns=list(types))
    text_opts = pacsv.ConvertOptions(
        column_types={c: pa.string() for c in types},
        include_columns=list(types),
        strings_can_be_null=True,
    )
    for block, first in _iter_text_blocks(info, tick):
        n_lines = block.count(b"\n") + (0 if block.endswith(b"\n") else 1)
        try:
            table = pacsv.read_csv(
                io.BytesIO(block), read_options=read_opts, parse_options=parse_opts,
                convert_options=typed_opts,
            )  # fmt: skip
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            table = None
        if table is not None and table.num_rows == n_lines:
            nulls = table.column(required).null_count
            if nulls == 0:
                bad.total += n_lines
                lines = first + np.arange(table.num_rows)
                table = drop_bad_times(table, required, lines, bad, info.time_check)
                if table.num_rows:
                    yield table
                continue
        buf, starts, ends, valid, ignorable, fields, numbers = _line_table(
            block, info.delimiter, ncols, first
        )
        wrong = ~valid & ~ignorable
        bad.total += int((~ignorable).sum())
        if wrong.any():
            idx = np.flatnonzero(wrong)
            bad.add(
                numbers[idx],
                [
                    UNPAIRED_QUOTE
                    if f < 0
                    else f"expected {ncols} fields, found {f} (truncated or malformed line)"
                    for f in fields[idx]
                ],
            )
        if not valid.any():
            continue
        keep = np.repeat(valid, np.concatenate((starts[1:], [len(buf)])) - starts)
        clean = buf[keep].tobytes()
        text = pacsv.read_csv(
            io.BytesIO(clean), read_options=read_opts, parse_options=parse_opts,
            convert_options=text_opts,
        )  # fmt: skip
        out = _convert_text_table(text, types, required, numbers[valid], bad, info.time_check)
        if out.num_rows:
            yield out
