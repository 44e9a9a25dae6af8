"""Short fixture logs are allowed here (see ``tests.analysis.ingest_kit.short_runs_allowed``)."""

import pytest

from tests.analysis.ingest_kit import short_runs_allowed


@pytest.fixture(autouse=True)
def _short_runs(short_runs_allowed: None) -> None:
    """Every test of this folder may store runs shorter than the ingest minimum."""


__all__ = ["short_runs_allowed"]
