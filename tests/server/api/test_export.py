"""A time window of a run as CSV at full resolution (GET /api/runs/{id}/window.csv)."""

from __future__ import annotations

import io

import pandas as pd
import pytest
from fastapi.testclient import TestClient

from analysis import catalogue as cat
from server.api import export as routes_export
from tests.server.dashboard_fixtures import PLANT_RATE_HZ, RunInputs, Stocked

TORQUE = cat.actuator_signal("wheel_l", cat.TORQUE_CMD)
RMS = f"wheel_l.{cat.TORQUE_RMS}"


def _csv(response) -> pd.DataFrame:
    assert response.status_code == 200, response.text
    assert response.headers["content-type"].startswith("text/csv")
    return pd.read_csv(io.StringIO(response.text))


def test_window_holds_every_sample_of_the_input_log(
    client: TestClient, stocked: Stocked, planted_inputs: RunInputs
) -> None:
    response = client.get(
        f"/api/runs/{stocked.planted_id}/window.csv",
        params={"t0": 10.0, "t1": 12.0, "signals": f"{cat.PITCH},{TORQUE},{RMS}"},
    )
    got = _csv(response)
    assert list(got.columns) == ["t [s]", "pitch [rad]", f"{TORQUE} [N*m]", f"{RMS} [N*m]"]
    assert f"{stocked.planted_id}-10-12s.csv" in response.headers["content-disposition"]
    # The outside reference: the log file that was uploaded (SI units already).
    log = pd.read_csv(planted_inputs.logs[0])
    t = log["stamp_s"] - log["stamp_s"].iloc[0]
    inside = log[(t >= 10.0 - 1e-9) & (t <= 12.0 + 1e-9)]
    # 100 Hz over 2 s, both ends inclusive: 201 samples (the planted rate).
    assert len(got) == len(inside) == 2 * PLANT_RATE_HZ + 1
    assert got["t [s]"].to_numpy() == pytest.approx((t[inside.index]).to_numpy(), abs=1e-9)
    # Exact: floats written as their shortest round-trip text.
    assert got["pitch [rad]"].tolist() == inside["pitch"].tolist()
    assert got[f"{TORQUE} [N*m]"].tolist() == inside[TORQUE].tolist()
    assert got[f"{RMS} [N*m]"].notna().all()


def test_without_signals_every_column_and_series_comes(
    client: TestClient, stocked: Stocked
) -> None:
    got = _csv(client.get(f"/api/runs/{stocked.planted_id}/window.csv", params={"t0": 0, "t1": 1}))
    assert "pitch [rad]" in got.columns and f"{RMS} [N*m]" in got.columns
    assert got.columns[0] == "t [s]" and len(got) == PLANT_RATE_HZ + 1


@pytest.mark.parametrize(
    ("params", "words"),
    [
        ({"t0": 5, "t1": 5}, "must be after its start"),
        ({"t0": "nan", "t1": 5}, "must be a finite time"),
        ({"t0": 0, "t1": 5, "signals": "roll,warp_drive"}, "has no signal warp_drive"),
        ({"t0": 0}, "t1"),
    ],
)
def test_bad_windows_are_refused_in_plain_words(
    client: TestClient, stocked: Stocked, params: dict, words: str
) -> None:
    response = client.get(f"/api/runs/{stocked.planted_id}/window.csv", params=params)
    assert response.status_code == 400
    assert words in response.json()["detail"]


def test_a_window_too_large_is_refused_with_what_to_do(
    client: TestClient, stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(routes_export, "MAX_CELLS", 1000)
    response = client.get(
        f"/api/runs/{stocked.planted_id}/window.csv", params={"t0": 0, "t1": 20, "signals": "roll"}
    )
    assert response.status_code == 400
    message = response.json()["detail"]
    assert "shorter window" in message and "files.zip" in message


def test_an_unknown_run_is_a_404(client: TestClient) -> None:
    response = client.get("/api/runs/20990101-0000-abcdef/window.csv", params={"t0": 0, "t1": 1})
    assert response.status_code == 404
