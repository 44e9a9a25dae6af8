"""Batch re-analysis of many runs, in process or on a Dask cluster.

The analysis of one run is a pure function of that run and the thresholds
(:func:`analysis.detect.pipeline.analyse_run`), and each run's results are replaced
atomically in its own folder, so re-analysing a fleet after a detector change
is a map over run ids. With a ``dask.distributed`` client the map runs on an
existing cluster, whose workers must see the same archive folder or, for an
archive on an object store (``s3://BUCKET/PREFIX``), only the store itself (with
the AWS_* variables set on every worker); without one it runs here, one run
after another.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from analysis.archive.objstore import open_archive
from analysis.detect.pipeline import analyse_run
from analysis.errors import OutriggerError


@dataclass(frozen=True)
class BatchOutcome:
    """One run's outcome: its event count, or the error that stopped it."""

    run_id: str
    events: int | None
    error: str | None = None


def analyse_one(root: str, run_id: str) -> BatchOutcome:
    """Analyse one stored run (the unit of work shipped to a worker).

    Parameters
    ----------
    root : str
        Archive root, as the worker sees it.
    run_id : str
        The run.
    """
    try:
        result = analyse_run(open_archive(root), run_id)
    except OutriggerError as exc:
        return BatchOutcome(run_id, None, str(exc))
    return BatchOutcome(run_id, len(result.events))


def reanalyse(
    root: str | os.PathLike[str],
    run_ids: Sequence[str],
    client: Any | None = None,
    progress: Callable[[BatchOutcome], None] | None = None,
) -> list[BatchOutcome]:
    """Re-analyse runs; on ``client`` (a ``dask.distributed.Client``) when given.

    A run that cannot be analysed (bad stored data) is reported in its outcome;
    the others still run. Outcomes come back in the order of ``run_ids``.
    """
    root_s = str(root)
    if client is None:
        out = []
        for run_id in run_ids:
            outcome = analyse_one(root_s, run_id)
            if progress:
                progress(outcome)
            out.append(outcome)
        return out
    from distributed import as_completed

    futures = [client.submit(analyse_one, root_s, r, pure=False) for r in run_ids]
    done: dict[str, BatchOutcome] = {}
    for future in as_completed(futures):
        outcome = future.result()
        done[outcome.run_id] = outcome
        if progress:
            progress(outcome)
    return [done[r] for r in run_ids]
