"""Load the bundled demo runs (``demo_logs/``) into an archive.

``demo_logs/runs.toml`` names the channel map, the robot profile and, per run,
its files and metadata. Runs already stored (same source files) are recognised
by hash and not stored twice; runs never analysed are analysed.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any

from analysis.archive.store import Archive
from analysis.detect.pipeline import analyse_run
from analysis.errors import IngestError
from analysis.ingest.stream import ingest_files

#: Index file of a demo folder.
RUNS_FILE = "runs.toml"


def read_demo_index(folder: str | Path) -> dict[str, Any]:
    """Read and check ``runs.toml`` of a demo folder."""
    root = Path(folder)
    index = root / RUNS_FILE
    if not index.is_file():
        raise IngestError(
            f"No {RUNS_FILE} in {root}: this is not a demo folder. "
            f"Regenerate it with `outrigger demo-logs --out {root}`."
        )
    data = tomllib.loads(index.read_text(encoding="utf-8"))
    for key in ("map", "profile", "run"):
        if key not in data:
            raise IngestError(f"{index} has no '{key}' entry; regenerate the demo folder.")
    return data


def load_demo_runs(archive: Archive, folder: str | Path) -> list[str]:
    """Ingest (if new) and analyse (if never analysed) every demo run of ``folder``.

    Parameters
    ----------
    archive : Archive
        Target archive.
    folder : path
        A folder with ``runs.toml`` (the bundled ``demo_logs/``).

    Returns
    -------
    list of str
        The run ids, in the order of ``runs.toml``.
    """
    root = Path(folder)
    data = read_demo_index(root)
    ids = []
    for run in data["run"]:
        outcome = ingest_files(
            archive,
            [root / f for f in run["files"]],
            root / data["map"],
            root / data["profile"],
            name=run.get("name"),
            course=run.get("course"),
            controller=run.get("controller"),
            tags=run.get("tags", ()),
            notes=run.get("notes", ""),
        )
        if archive.read_results(outcome.run_id) is None:
            analyse_run(archive, outcome.run_id)
        ids.append(outcome.run_id)
    return ids
