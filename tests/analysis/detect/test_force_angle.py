"""Force-angle margin against closed-form geometry."""

from __future__ import annotations

import math

import numpy as np
import pytest

from analysis.detect.force_angle import force_angle_margin, force_angles

G = 9.80665  # m/s², ISO 80000-3
B, L_C = 0.42, 0.55  # m, an invented robot


def test_upright_at_rest_both_angles_are_the_half_track_angle():
    left, right = force_angles(L_C, 0.0, 0.0, G, B)
    # Geometry: gravity points straight down, each contact is b/2 aside and L_c below,
    # so the angle between them is atan(b / (2 L_c)).
    assert float(left) == pytest.approx(math.atan(B / (2 * L_C)), abs=1e-12)
    assert float(right) == pytest.approx(math.atan(B / (2 * L_C)), abs=1e-12)


def test_zero_on_the_outer_wheel_at_the_static_stability_factor():
    # Static stability factor (NHTSA rollover resistance rating): an upright rigid body
    # tips at a_y / g = b / (2 L_c). A left turn (f_y > 0) loads the right wheel.
    f_y = G * B / (2 * L_C)
    left, right = force_angles(L_C, 0.0, f_y, G, B)
    assert float(right) == pytest.approx(0.0, abs=1e-12)
    assert float(left) > 0
    beyond = force_angle_margin(L_C, 0.0, 1.1 * f_y, G, B)
    assert float(beyond) < 0


def test_leaned_at_the_steady_turn_angle_the_force_passes_through_the_midpoint():
    # Steady-turn lean tan(phi) = v^2 / (g R) (Cossalter, Motorcycle Dynamics): the net
    # force runs along the body axis, through the midpoint between the contacts. Each
    # angle is then the angle at the CoM between the midpoint and that contact, from the
    # law of cosines on the triangle CoM-midpoint-contact. Left turn, leaning left
    # (roll negative, ISO 8855), CoM L_c along the tilted axis above the midpoint.
    v, R = 2.0, 1.5
    lean = math.atan(v * v / (G * R))
    left, right = force_angles(L_C, -lean, v * v / R, G, B)
    for theta, toward_lean in ((left, True), (right, False)):
        # Angle at the midpoint between the axis and the ground toward the contact:
        at_mid = math.pi / 2 - lean if toward_lean else math.pi / 2 + lean
        side = math.sqrt(L_C**2 + (B / 2) ** 2 - 2 * L_C * (B / 2) * math.cos(at_mid))
        expected = math.acos((L_C**2 + side**2 - (B / 2) ** 2) / (2 * L_C * side))
        assert float(theta) == pytest.approx(expected, abs=1e-12)


def test_vectorised_and_nan_propagates():
    m = force_angle_margin(np.array([L_C, np.nan]), np.zeros(2), np.zeros(2), np.full(2, G), B)
    assert np.isfinite(m[0]) and np.isnan(m[1])
