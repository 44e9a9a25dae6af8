"""window.csv escapes log text that a spreadsheet would run as a formula (issue 11, item 8).

OWASP, "CSV Injection" (common practice): a cell starting with ``=``, ``+``, ``-``,
``@``, tab or carriage return is prefixed with a single quote so that a spreadsheet
shows it as text; numbers stay numbers.
"""

from __future__ import annotations

import csv
import io

from analysis.archive.store import Archive
from analysis.ingest.stream import ingest_files
from server.api.export import escape_formula
from tests.analysis.ingest_kit import MAP, PROFILE, state_lines, write
from tests.server.dashboard_fixtures import fresh_app

NOTES = ['=HYPERLINK("http://x","y")', "+1+2", "-3+4", "@SUM(A1)", "\tcmd", "plain", "a=b"]


def test_escape_formula_by_the_owasp_rule():
    assert [escape_formula(v) for v in NOTES] == [
        "'=HYPERLINK(\"http://x\",\"y\")", "'+1+2", "'-3+4", "'@SUM(A1)", "'\tcmd", "plain", "a=b",
    ]  # fmt: skip
    assert escape_formula("\rx") == "'\rx"
    assert escape_formula(None) is None


def test_window_csv_escapes_text_cells_and_keeps_numbers(tmp_path):
    lines = state_lines(1000)
    for k in range(len(NOTES)):
        row = lines[k + 2].split(",")
        row[8] = '"' + NOTES[k].replace('"', '""') + '"'  # the "mode" column, kept as extra.mode
        lines[k + 2] = ",".join(row)
    archive = Archive(tmp_path / "data")
    run_id = ingest_files(archive, [write(tmp_path / "n_state.csv", lines)], MAP, PROFILE).run_id
    with fresh_app(archive.root) as c:
        response = c.get(
            f"/api/runs/{run_id}/window.csv",
            params={"t0": 0.0, "t1": 1.0, "signals": "roll,extra.mode"},
        )
    assert response.status_code == 200, response.text
    rows = list(csv.reader(io.StringIO(response.text)))
    assert rows[0] == ["t [s]", "roll [rad]", "extra.mode"]
    assert [r[2] for r in rows[1 : 1 + len(NOTES)]] == [escape_formula(v) for v in NOTES]
    assert rows[1][2].startswith("'=")
    # numbers are not text: a negative roll stays a plain number
    rolls = [float(r[1]) for r in rows[1:]]
    assert min(rolls) < 0 and not any(r[1].startswith("'") for r in rows[1:])
