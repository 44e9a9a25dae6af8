"""Profile and channel-map messages: unknown keys listed, every problem at once, unit hints."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from analysis.errors import ChannelMapError, ProfileError
from analysis.ingest.channel_map import channel_map_from_dict
from analysis.profile import PROFILE_KEYS, load_profile, profile_from_dict

DATA = Path(__file__).resolve().parents[1] / "data" / "ingest"
PROFILE = DATA / "marram2_profile.toml"
MAP = DATA / "marram2_map.toml"


def _profile() -> dict:
    return tomllib.loads(PROFILE.read_text(encoding="utf-8"))


def test_unknown_profile_key_is_refused_with_the_valid_keys() -> None:
    data = _profile()
    data["robot"]["wheel_radius"] = 0.1  # a typo of wheel_radius_m
    with pytest.raises(ProfileError) as err:
        profile_from_dict(data, source="robot.toml")
    text = str(err.value)
    assert "Unknown key(s) 'wheel_radius' in [robot]" in text
    assert "Valid keys there: " + ", ".join(PROFILE_KEYS["robot"]) in text


def test_every_profile_problem_is_listed_at_once() -> None:
    data = _profile()
    data["robot"]["mass_kg"] = -3
    data["com"]["model"] = "cubic"
    data["actuators"]["wheel_l"]["colour"] = "red"
    data["actuators"]["wheel_r"]["peak_torque_nm"] = "lots"
    with pytest.raises(ProfileError) as err:
        profile_from_dict(data, source="robot.toml")
    text = str(err.value)
    assert "robot.toml has 4 problems" in text
    assert "robot.mass_kg must be > 0, found -3" in text
    assert 'com.model must be "constant" or "linear"' in text
    assert "'colour' in [actuators.wheel_l]" in text
    assert "actuators.wheel_r.peak_torque_nm must be a number, found 'lots'" in text


def test_the_test_profile_still_loads() -> None:
    assert load_profile(PROFILE).track_width > 0


def test_nm_is_not_read_as_newton_metres_silently() -> None:
    profile = load_profile(PROFILE)
    raw = tomllib.loads(MAP.read_text(encoding="utf-8"))
    torque = next(s for s in raw["source"] if s["name"] == "torque")
    torque["columns"]["tq_l_cmd"]["unit"] = "Nm"
    with pytest.raises(ChannelMapError) as err:
        channel_map_from_dict(raw, profile)
    # pint parses 'Nm' as one unit that is not a torque (not N*m): the message says how
    # it was read and offers the product written with '*'.
    assert "unit 'Nm' has the wrong dimension" in str(err.value)
    assert "pint reads 'Nm' as" in str(err.value)
    assert "did you mean 'N*m'?" in str(err.value)
