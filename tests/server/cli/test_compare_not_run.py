"""`outrigger compare` names a detector that did not run instead of comparing its KPIs as 0."""

from __future__ import annotations

from dataclasses import replace

import pytest

from analysis.events import events_frame
from server.cli import compare as cli_compare
from server.cli.main import main
from tests.analysis.compare_synth import make_run
from tests.server.cli.test_compare import MemoryArchive

REASON = "no pitch: map the attitude estimate's pitch in the channel map"


class SkippingArchive(MemoryArchive):
    def read_results(self, run_id: str):
        run = self._run(run_id)
        summary = {"skipped": [{"detector": d, "reason": r} for d, r in run.skipped.items()]}
        return events_frame(run.events), summary


@pytest.fixture()
def archive(monkeypatch, tmp_path):
    runs = {
        "a1": make_run("a1", seed=1),
        "b1": replace(
            make_run("b1", seed=3, controller="lean-ctl 2.0"), skipped={"balance": REASON}
        ),
    }
    mem = SkippingArchive(runs, tmp_path)
    monkeypatch.setattr(cli_compare, "open_archive", lambda root: mem)
    return mem


def test_compare_text_says_not_run(archive, capsys) -> None:
    assert main(["compare", "a1", "b1", "--n-boot", "200"]) == 0
    out = capsys.readouterr().out
    assert f"Not run: detector balance on run b1 ({REASON})" in out
    assert "falls" not in out.split("Not run:")[1].split("\n", 1)[1]  # no falls row in the table
