"""Export of a time window at full resolution, as CSV for a spreadsheet or a script.

The page's charts are downsampled; an engineer who wants to look closer at a
moment takes its samples out: ``GET /api/runs/{id}/window.csv?t0=&t1=`` gives
every sample of the run's frame columns and derived series inside the window,
in SI units, one column per signal with its unit in the header
(``roll [rad]``). A window is limited to :data:`MAX_CELLS` values; the whole run
is in ``files.zip`` as Parquet.
"""

from __future__ import annotations

import math
from typing import Annotated

import pandas as pd
from fastapi import APIRouter, Depends, Query
from fastapi.responses import Response

from analysis import catalogue as cat
from analysis.archive.store import Archive
from server.api.series import available_columns
from server.charts import unit_of
from server.deps import ApiError, get_archive

router = APIRouter(prefix="/api/runs", tags=["export"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]

#: Most values (rows x signals) one window export holds: about 50 MB of CSV.
MAX_CELLS = 5_000_000


#: First characters that make a spreadsheet read a cell as a formula (OWASP, CSV Injection).
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def escape_formula(value: object) -> object:
    """A text cell that a spreadsheet would run as a formula, prefixed with ``'``.

    OWASP's CSV Injection guidance: a cell starting with ``=``, ``+``, ``-``, ``@``,
    tab or carriage return gets a leading single quote (the CSV writer then quotes
    the cell as RFC 4180 needs). Anything else, and missing values, pass unchanged.
    """
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def _header(name: str) -> str:
    unit = unit_of(name)
    return f"{name} [{unit}]" if unit else name


@router.get("/{run_id}/window.csv", response_class=Response)
def window_csv(
    run_id: str,
    archive: ArchiveDep,
    t0: Annotated[float, Query(description="window start [s]")],
    t1: Annotated[float, Query(description="window end [s]")],
    signals: Annotated[
        str | None,
        Query(
            description="comma-separated signal names; every frame column and series if left out"
        ),
    ] = None,
) -> Response:
    """Every sample of the chosen signals in ``[t0, t1]`` (both ends inclusive), SI units.

    Column ``t [s]`` (seconds since the run's first sample), then one column per
    signal; an empty cell is a missing sample. Frame columns and derived series share
    the frame's time base.
    """
    for label, value in (("t0", t0), ("t1", t1)):
        if not math.isfinite(value):
            raise ApiError(
                f"{label} must be a finite time in seconds since the run's first sample, "
                f"found {value}."
            )
    if not t1 > t0:
        raise ApiError(f"The window end t1 must be after its start t0, found t0={t0}, t1={t1}.")
    raw, derived = available_columns(archive, run_id)
    if signals is None:
        names = raw + derived
    else:
        names = list(dict.fromkeys(s.strip() for s in signals.split(",") if s.strip()))
        unknown = [n for n in names if n not in raw and n not in derived]
        if unknown or not names:
            raise ApiError(
                f"Run {run_id} has no signal {', '.join(unknown) or '(none named)'}. "
                f"Signals: {', '.join(raw)}. Derived series: {', '.join(derived) or 'none'}."
            )
    # The size from the time column alone, before any value column is read.
    rows = len(archive.load_frame(run_id, columns=[], t0=t0, t1=t1))
    if rows * max(len(names), 1) > MAX_CELLS:
        raise ApiError(
            f"The window {t0:g} .. {t1:g} s holds {rows:,} samples of {len(names)} signals, "
            f"more than the {MAX_CELLS:,} values one export holds. Choose a shorter window "
            "or fewer signals; the whole run is in files.zip (Parquet)."
        )
    frame = archive.load_frame(run_id, columns=[n for n in names if n in raw], t0=t0, t1=t1)
    out = frame[[cat.T, *[n for n in names if n in frame]]]
    wanted_series = [n for n in names if n in derived]
    if wanted_series:
        series = archive.read_result_series(run_id, columns=wanted_series, t0=t0, t1=t1)
        out = pd.merge(out, series, on=cat.T, how="outer", sort=True)
    out = out[[cat.T, *[n for n in names if n in out]]]
    for col in out.columns:  # text from the log (extra.* columns): never a live formula
        if not pd.api.types.is_numeric_dtype(out[col]) and not pd.api.types.is_bool_dtype(out[col]):
            out[col] = out[col].map(escape_formula)
    # Floats as their shortest exact text (pandas' default): no digit is lost.
    text = out.rename(columns={c: _header(c) for c in out.columns}).to_csv(
        index=False, lineterminator="\n"
    )
    name = f"{run_id}-{t0:g}-{t1:g}s.csv"
    return Response(
        text,
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="{name}"'},
    )
