"""The calibration check fed chunk by chunk gives the whole-run check's estimates.

The reference is the project's own whole-run :func:`calibrate`. The demo run has
straights, curves and a standstill; NaN holes are planted in the signals every
selection reads, and the chunks are cut at odd sizes (1, 7, 997 rows, empty ones)
so that stretches and standstill are split between chunks.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import replace
from itertools import cycle

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.demo.logs import demo_profile, simulate_run
from analysis.detect.calibrate import (
    MIN_SAMPLES,
    MOVING_SPEED,
    STEADY_PITCH_RATE,
    STRAIGHT_YAW_RATE,
    TURN_YAW_RATE,
    Calibration,
    _fit_through_origin,
    _ThinnedPairs,
    calibrate,
    calibrate_chunks,
)
from analysis.profile import RobotProfile

#: The means are running sums over the chunks instead of one sum over the run: only
#: the order of the additions differs, a few ulp of the mean (common practice, no source).
MEAN_REL = 1e-12
#: Estimates that are means (sums and counts); the others are fits and must be exact.
MEAN_KEYS = {
    "gyro_bias_roll",
    "gyro_bias_pitch",
    "gyro_bias_yaw",
    "accel_tilt_pitch",
    "accel_tilt_roll",
}


@pytest.fixture(scope="module")
def run_frame() -> pd.DataFrame:
    """The demo run with NaN holes in every signal a selection reads."""
    frame = simulate_run(seed=5).frame.copy()
    rng = np.random.default_rng(11)
    for name in (
        cat.VEL_X,
        cat.YAW_RATE,
        cat.PITCH_RATE,
        cat.ROLL_RATE,
        "wheel_l.vel",
        "wheel_r.vel",
        cat.ACCEL_X,
        cat.PITCH,
    ):
        rows = rng.choice(len(frame), size=len(frame) // 50, replace=False)
        frame.loc[rows, name] = np.nan
    return frame


def _chunks(frame: pd.DataFrame, sizes: list[int]) -> Iterator[pd.DataFrame]:
    """Consecutive chunks of ``frame`` with the sizes taken in turn from ``sizes``."""
    start = 0
    for size in cycle(sizes):
        if start >= len(frame):
            return
        yield frame.iloc[start : start + size]
        start += size


def _assert_same(whole: Calibration, part: Calibration) -> None:
    """Same estimates in the same order; fits exactly, means to MEAN_REL."""
    a = [e.to_dict() for e in whole.estimates]
    b = [e.to_dict() for e in part.estimates]
    assert [e["key"] for e in a] == [e["key"] for e in b]
    for ea, eb in zip(a, b, strict=True):
        if ea["key"] in MEAN_KEYS and ea["estimate"] is not None:
            assert eb["estimate"] == pytest.approx(ea["estimate"], rel=MEAN_REL, abs=0), ea["key"]
            ea, eb = dict(ea, estimate=None), dict(eb, estimate=None)
        assert ea == eb, ea["key"]


# The profile's encoders read relative to the body ("leg"); "ground" takes the other branch.
PROFILES = {
    "leg": demo_profile(),
    "ground": replace(demo_profile(), wheel_encoder_reference="ground"),
}
#: Chunk sizes: single rows, prime sizes, an empty chunk, a large one.
SIZES = {
    "mixed": [1, 1, 7, 997, 0, 2, 3001, 1, 13, 0, 450],
    "7": [7],
    "997": [997],
}
MISSING = {
    "all": [],
    # No velocity estimate: no radius fit, the standstill rests on the wheels alone.
    "no-vel-accel_z-roll": [cat.VEL_X, cat.ACCEL_Z, cat.ROLL],
    # No pitch rate (the encoders' body-rate term is zero) and no roll angle.
    "no-pitch_rate-roll": [cat.PITCH_RATE, cat.ROLL],
}


@pytest.mark.parametrize("sizes", list(SIZES), ids=list(SIZES))
@pytest.mark.parametrize("missing", list(MISSING), ids=list(MISSING))
@pytest.mark.parametrize("reference", list(PROFILES), ids=list(PROFILES))
def test_chunks_give_the_whole_runs_estimates(
    run_frame: pd.DataFrame, sizes: str, missing: str, reference: str
) -> None:
    frame = run_frame.drop(columns=MISSING[missing])
    profile = PROFILES[reference]
    whole = calibrate(frame, profile)
    # Every estimate the columns allow is there, and rests on enough samples to be made.
    assert (
        len(whole.estimates)
        == {"all": 7, "no-vel-accel_z-roll": 4, "no-pitch_rate-roll": 5}[missing]
    )
    assert all(e.estimate is not None for e in whole.estimates)
    part = calibrate_chunks(_chunks(frame, SIZES[sizes]), profile)
    _assert_same(whole, part)


def test_single_row_chunks_give_the_whole_runs_estimates(run_frame: pd.DataFrame) -> None:
    profile = PROFILES["leg"]
    part = calibrate_chunks(_chunks(run_frame, [1]), profile)
    _assert_same(calibrate(run_frame, profile), part)


def _selections(
    frame: pd.DataFrame, profile: RobotProfile
) -> tuple[tuple[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]:
    """The radius pairs and the track pairs (yaw rate, ground_r - ground_l) that
    :func:`calibrate` selects, written out by hand from its docstring and constants."""
    yaw = frame[cat.YAW_RATE].to_numpy(float)
    q = frame[cat.PITCH_RATE].to_numpy(float)
    v = frame[cat.VEL_X].to_numpy(float)
    gl = frame["wheel_l.vel"].to_numpy(float)
    gr = frame["wheel_r.vel"].to_numpy(float)
    if profile.wheel_encoder_reference != "ground":
        gl, gr = gl + q, gr + q
    w_mid = 0.5 * (gl + gr)
    use = (np.abs(yaw) < STRAIGHT_YAW_RATE) & (np.abs(v) > MOVING_SPEED)
    use &= np.abs(q) < STEADY_PITCH_RATE
    use &= np.isfinite(w_mid) & np.isfinite(v)
    turn = (np.abs(yaw) > TURN_YAW_RATE) & np.isfinite(yaw) & np.isfinite(gr - gl)
    return (w_mid[use], v[use]), (yaw[turn], (gr - gl)[turn])


@pytest.mark.parametrize("sizes", [[997], [1, 7, 0, 5003, 13]], ids=["997", "mixed"])
def test_a_capped_fit_rests_on_every_kth_selected_sample(
    run_frame: pd.DataFrame, sizes: list[int]
) -> None:
    profile = PROFILES["leg"]
    (wx, wy), (yx, yd) = _selections(run_frame, profile)
    assert len(wx) > 4000 and len(yx) > 1000  # enough to thin several times
    max_pairs = 700
    part = {
        e.key: e for e in calibrate_chunks(_chunks(run_frame, sizes), profile, max_pairs).estimates
    }
    whole = {e.key: e for e in calibrate(run_frame, profile).estimates}

    def step(n: int) -> int:
        k = 1
        while -(-n // k) > max_pairs:  # ceil(n / k) pairs held at step k
            k *= 2
        return k

    k_r, k_b = step(len(wx)), step(len(yx))
    assert k_r >= 8 and k_b >= 4
    r_est, held = _fit_through_origin(wx[::k_r], wy[::k_r])
    assert held <= max_pairs
    radius = part["wheel_radius"]
    assert radius.estimate == r_est
    assert radius.samples == len(wx) == whole["wheel_radius"].samples
    assert radius.note == f"fitted on every {k_r}th of {len(wx):,} samples"

    # The track fit uses the thinned radius estimate, as calibrate uses its own.
    assert r_est is not None
    b_est, _ = _fit_through_origin(yx[::k_b], r_est * yd[::k_b])
    track = part["track_width"]
    assert track.estimate == b_est
    assert track.samples == len(yx) == whole["track_width"].samples
    suffix = {2: "nd", 4: "th", 8: "th", 16: "th", 32: "nd"}[k_b]
    assert track.note == (
        f"with the estimated wheel radius; fitted on every {k_b}{suffix} of {len(yx):,} samples"
    )
    # Thinning keeps the estimates close to the full fits.
    assert radius.estimate == pytest.approx(whole["wheel_radius"].estimate, rel=0.01)
    assert track.estimate == pytest.approx(whole["track_width"].estimate, rel=0.02)
    # The means are not thinned.
    assert part["gyro_bias_yaw"].samples == whole["gyro_bias_yaw"].samples


@pytest.mark.parametrize("max_pairs", [100, 101, 128, 333])
def test_the_pairs_held_are_samples_0_k_2k_and_never_more_than_the_cap(max_pairs: int) -> None:
    rng = np.random.default_rng(max_pairs)
    pairs = _ThinnedPairs(max_pairs)
    n = 0
    for size in rng.choice([0, 1, 2, 7, 63, 997, 2500], size=200):
        x = np.arange(n, n + size, dtype=float)
        pairs.add(x, -x)
        n += size
        held_x, held_y = pairs.pairs()
        assert len(held_x) <= max_pairs
        # Held: selected samples 0, k, 2k, ... up to the last one seen, k a power of two.
        k = pairs.step
        assert k & (k - 1) == 0
        np.testing.assert_array_equal(held_x, np.arange(0, n, k))
        np.testing.assert_array_equal(held_y, -held_x)
        assert pairs.seen == n
        # k is as small as the cap allows (it would hold too many at k / 2).
        assert k == 1 or -(-n // (k // 2)) > max_pairs
    assert pairs.step > 1


def test_below_the_cap_nothing_is_thinned(run_frame: pd.DataFrame) -> None:
    profile = PROFILES["leg"]
    (wx, _), _ = _selections(run_frame, profile)
    part = calibrate_chunks(_chunks(run_frame, [997]), profile, max_pairs=len(wx))
    _assert_same(calibrate(run_frame, profile), part)


def test_empty_chunks_and_an_empty_run_do_not_crash(run_frame: pd.DataFrame) -> None:
    profile = PROFILES["leg"]
    assert calibrate_chunks([], profile).estimates == []
    assert calibrate_chunks(iter(()), profile).to_dict() == Calibration().to_dict()
    # Only empty chunks: the estimates the columns allow, none with samples.
    empty = run_frame.iloc[:0]
    part = calibrate_chunks([empty, empty, empty], profile)
    _assert_same(calibrate(empty, profile), part)
    assert [e.samples for e in part.estimates] == [0] * 7
    assert all(e.estimate is None for e in part.estimates)
    # Empty chunks first, between and last change nothing.
    chunks = [empty, run_frame.iloc[:5000], empty, empty, run_frame.iloc[5000:], empty]
    _assert_same(calibrate(run_frame, profile), calibrate_chunks(chunks, profile))


def test_chunks_must_share_the_first_chunks_columns(run_frame: pd.DataFrame) -> None:
    profile = PROFILES["leg"]
    chunks = [run_frame.iloc[:5000], run_frame.iloc[5000:].drop(columns=[cat.VEL_X])]
    with pytest.raises(ValueError, match="same columns"):
        calibrate_chunks(chunks, profile)
    with pytest.raises(ValueError, match="max_pairs"):
        calibrate_chunks([run_frame], profile, max_pairs=2 * MIN_SAMPLES - 1)
