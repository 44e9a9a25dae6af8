"""Quasi-static simulation of Marram-2 driving a demo course, and its ground truth.

The model is driven by the course plan (:mod:`analysis.demo.course`). One
time-stepping loop integrates the few states that need it: distance and base
speed (wheel torques through the limiter, traction limited by friction), the
speed, lean and height references, the closed roll loop, pitch following the
forward acceleration, the two legs driven by the hip torques, and the slip of
each wheel. Everything else is derived afterwards, exactly, from those states
with the kinematic identities of DESIGN.md, so that the detectors can
reconstruct them:

- contact midpoint speed ``v_mid = v - d/dt(L sin(pitch)) - yaw_rate (r + L) sin(roll)``,
  contact speeds ``v_mid -/+ yaw_rate b/2`` (differential drive, [1]);
- rim speed = contact speed + slip; encoder (leg-referenced) joint speed
  ``w = v_rim / r - pitch_rate``;
- heading-frame specific force ``[a_x, v yaw_rate + y_c'', g + z_c'']`` rotated
  into the body frame by pitch and roll (ISO 8855 signs);
- ZMP ``y_zmp = y_c - z_c f_y / f_z`` and margin ``1 - |y_zmp| / (b/2)`` ([2]).

References
----------
[1] R. Siegwart, I. R. Nourbakhsh, D. Scaramuzza, Introduction to Autonomous
    Mobile Robots, 2nd ed. MIT Press, 2011.
[2] S. Kajita et al., "Biped walking pattern generation by using preview control
    of zero-moment point", IEEE ICRA 2003, doi:10.1109/ROBOT.2003.1241826.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.signal import lfilter

from analysis import catalogue as cat
from analysis.catalogue import G0
from analysis.demo import course as dc

T_STAND = 1.5  # s standing still, balancing, before driving off
T_TAIL = 2.0  # s standing still after the course end
MAX_DURATION = 400.0  # s, safety bound of a whole-course drive
PITCH_WN = 15.0  # rad/s, pitch follows atan(a/g) critically damped
LEG_WN = 20.0  # rad/s, closed leg-length loop
LEG_ZETA = 0.9  # -
HEIGHT_RATE = 0.1  # m/s, rate limit of the height reference
STEP_ROLL = 2.0  # rad/s^2, roll push when one wheel drops off the kerb
STEP_ROLL_S = 0.15  # s
FALL_LIMIT = np.deg2rad(80.0)  # rad, pitch where the fallen robot rests on its bumper


def _sign(x: float) -> float:
    return float(math.copysign(1.0, x)) if x != 0.0 else 0.0


def _rng(seed: int, channel: int) -> np.random.Generator:
    """An independent generator per noise channel, so shorter runs are exact prefixes."""
    return np.random.default_rng([seed, channel])


def coloured_noise(seed: int, channel: int, n: int, sigma: float, tau_s: float, dt: float):
    """First-order (AR(1)) coloured noise of standard deviation ``sigma``, time constant ``tau_s``.

    Causal, so the first samples do not depend on ``n``.
    """
    w = _rng(seed, channel).standard_normal(n)
    a = float(np.exp(-dt / tau_s))
    return lfilter([sigma * np.sqrt(1.0 - a * a)], [1.0, -a], w)


def simulate_states(
    course: dc.Course,
    ctl: dc.ControllerParams,
    *,
    seed: int,
    dt: float,
    duration_s: float | None,
    start_offset_m: float,
    fall_at_s: float | None,
    stand_s: float = T_STAND,
) -> dict[str, np.ndarray]:
    """Integrate the drive; return the true state histories (SI), one value per step.

    The run ends at ``duration_s``, or ``T_TAIL`` after stopping at the course end,
    or ``T_TAIL`` after a fall has come to rest (``fall_at_s``: time the drive faults).
    """
    grid = dc.course_grid(course, ctl, start_offset_m)
    n_max = int(round((duration_s if duration_s is not None else MAX_DURATION) / dt)) + 1
    wob = coloured_noise(seed, 1, n_max, np.deg2rad(0.3), 0.25, dt)
    droll = coloured_noise(seed, 2, n_max, 0.3, 0.3, dt)
    nw = [coloured_noise(seed, 3 + k, n_max, 0.04, 0.02, dt) for k in range(2)]
    nh = [coloured_noise(seed, 5 + k, n_max, 0.08, 0.02, dt) for k in range(2)]

    r, b, M = dc.WHEEL_RADIUS, dc.TRACK_WIDTH, dc.MASS
    kp_leg = LEG_WN**2 * dc.HIP_EFFECTIVE_MASS
    kd_leg = 2.0 * LEG_ZETA * LEG_WN * dc.HIP_EFFECTIVE_MASS
    crr = dc.ROLLING_RESISTANCE
    names = [
        "s",
        "v",
        "a",
        "vref",
        "a_cmd",
        "kappa",
        "phi_ref",
        "dphi_ref",
        "phi",
        "dphi",
        "theta",
        "dtheta",
        "theta_ref",
        "href",
        "L_l",
        "L_r",
        "dL_l",
        "dL_r",
        "ddL_l",
        "ddL_r",
        "ground_l",
        "ground_r",
        "mu_l",
        "mu_r",
        "slip_l",
        "slip_r",
        "segment",
        "wheel_l_req",
        "wheel_r_req",
        "hip_l_req",
        "hip_r_req",
        "wheel_l_cmd",
        "wheel_r_cmd",
        "hip_l_cmd",
        "hip_r_cmd",
    ]
    out = {k: np.zeros(n_max) for k in names}

    s0 = float(grid.s[0])
    last = grid.s.size - 2
    lists = {
        k: getattr(grid, k).tolist()
        for k in ("curvature", "speed", "accel", "ground_l", "ground_r", "mu_l", "mu_r", "segment")
    }
    heights = grid.height.tolist()

    def at(key: str, x: float) -> float:
        # linear interpolation on the course grid (plain floats: this runs every step)
        vals = lists[key]
        u = (x - s0) / dc.GRID_STEP
        j = min(max(int(u), 0), last)
        w = min(max(u - j, 0.0), 1.0)
        return vals[j] * (1.0 - w) + vals[j + 1] * w

    s, v, a, vref = s0, 0.0, 0.0, 0.0
    phi_ref = dphi_ref = phi = dphi = theta = dtheta = 0.0
    href = dc.NOMINAL_LEG
    L = [href, href]
    dL = [0.0, 0.0]
    slip = [0.0, 0.0]
    prev_ground = [0.0, 0.0]
    shove_t0: dict[int, float] = {}
    step_t0: list[tuple[float, float]] = []
    stop_t: float | None = None
    rest_t: float | None = None
    n = n_max
    for i in range(n_max):
        t = i * dt
        gi = min(max(int((s - s0) / dc.GRID_STEP), 0), last + 1)
        kappa = at("curvature", s)
        faulted = fall_at_s is not None and t >= fall_at_s
        # --- speed reference and wheel torque request --------------------------------
        vlim = 0.0 if t < stand_s else at("speed", s)
        vnew = max(0.0, min(vlim, vref + lists["accel"][gi] * dt))
        a_ff = (vnew - vref) / dt
        vref = vnew
        a_cmd = a_ff + ctl.vel_gain * (vref - v)
        if ctl.accel_cmd_max is not None:
            a_cmd = min(max(a_cmd, -ctl.accel_cmd_max), ctl.accel_cmd_max)
        tw = 0.5 * M * r * (a_cmd + G0 * crr * math.tanh(v / 0.05))
        req_w = [tw + nw[0][i], tw + nw[1][i]]
        if faulted:
            req_w = [0.0, 0.0]
        cmd_w = [min(max(q, -dc.WHEEL_PEAK), dc.WHEEL_PEAK) for q in req_w]
        # --- side loads from the quasi-static ZMP -------------------------------------
        Lm = 0.5 * (L[0] + L[1])
        Lc = dc.WHEEL_RADIUS + dc.COM_OFFSET + dc.COM_LEG_FACTOR * Lm
        yz = -Lc * math.sin(phi) - Lc * math.cos(phi) * v * v * kappa / G0
        share = min(max(yz / (0.5 * b), -1.0), 1.0)
        N = [0.5 * M * G0 * (1.0 + share), 0.5 * M * G0 * (1.0 - share)]
        mu = [lists["mu_l"][gi], lists["mu_r"][gi]]
        # --- traction and wheel slip ----------------------------------------------------
        force = 0.0
        for k in range(2):
            grip = mu[k] * N[k] * r
            if slip[k] == 0.0 and abs(cmd_w[k]) <= grip:
                force += cmd_w[k] / r
                continue
            sgn = _sign(slip[k]) if slip[k] != 0.0 else _sign(cmd_w[k])
            force += sgn * grip / r
            new = slip[k] + (r * (cmd_w[k] - sgn * grip) / dc.WHEEL_INERTIA - a) * dt
            slip[k] = 0.0 if _sign(new) != sgn else float(new)
        if faulted:
            a = -1.5 * float(math.tanh(v / 0.1))
        else:
            a = force / M - G0 * crr * float(math.tanh(v / 0.05))
        # --- lean reference and the closed roll loop ------------------------------------
        kappa_ahead = at("curvature", s + v * ctl.lean_preview)
        raw = -ctl.lean_gain * math.atan(v * v * kappa_ahead / G0)
        raw = min(max(raw, -ctl.lean_max), ctl.lean_max)
        wr = ctl.lean_bw
        dphi_ref += (wr * wr * (raw - phi_ref) - 2.0 * wr * dphi_ref) * dt
        phi_ref += dphi_ref * dt
        u = float(droll[i])
        for j, (s_sh, dur, size) in enumerate(grid.shoves):
            if j not in shove_t0 and s >= s_sh:
                shove_t0[j] = t
            if j in shove_t0 and 0.0 <= t - shove_t0[j] <= dur:
                u += size * math.sin(np.pi * (t - shove_t0[j]) / dur)
        ground = [at("ground_l", s), at("ground_r", s)]
        for k in range(2):
            if ground[k] < prev_ground[k] - 0.005 and not any(
                abs(t - t0) < 0.5 for t0, _ in step_t0
            ):
                step_t0.append((t, -1.0 if k == 0 else 1.0))
        prev_ground = ground
        for t0, sgn_roll in step_t0:
            if 0.0 <= t - t0 <= STEP_ROLL_S:
                u += sgn_roll * STEP_ROLL * math.sin(np.pi * (t - t0) / STEP_ROLL_S)
        wn, z = ctl.roll_wn, ctl.roll_zeta
        ddphi = wn * wn * (phi_ref - phi) + 2 * z * wn * (ctl.roll_ff * dphi_ref - dphi) + u
        dphi += ddphi * dt
        phi += dphi * dt
        # --- pitch follows the forward acceleration -------------------------------------
        theta_ref = float(math.atan(a_cmd / G0))
        if faulted:
            ddtheta = G0 / Lc * math.sin(theta) if theta < FALL_LIMIT else 0.0
            if fall_at_s is not None and t - fall_at_s < dt * 1.5:
                dtheta += 0.4  # rad/s, the forward kick that starts the fall
        else:
            target = math.atan(a / G0) + wob[i]
            ddtheta = PITCH_WN**2 * (target - theta) - 2.0 * PITCH_WN * dtheta
        dtheta += ddtheta * dt
        theta += dtheta * dt
        if faulted and theta >= FALL_LIMIT:
            theta, dtheta = FALL_LIMIT, 0.0
            rest_t = t if rest_t is None else rest_t
        # --- legs: height reference, hip torques -----------------------------------------
        hstep = heights[gi] - href
        href += min(max(hstep, -HEIGHT_RATE * dt), HEIGHT_RATE * dt)
        req_h, cmd_h, ddL = [0.0, 0.0], [0.0, 0.0], [0.0, 0.0]
        for k in range(2):
            load = dc.HIP_LEVER * N[k]
            e = href - ground[k] - L[k]
            req_h[k] = load + kp_leg * e - kd_leg * dL[k] + nh[k][i]
            cmd_h[k] = min(max(req_h[k], -dc.HIP_PEAK), dc.HIP_PEAK)
            ddL[k] = (cmd_h[k] - load) / dc.HIP_EFFECTIVE_MASS
            dL[k] += ddL[k] * dt
            L[k] += dL[k] * dt
        # --- record ------------------------------------------------------------------------
        for key, val in (
            ("s", s), ("v", v), ("a", a), ("vref", vref), ("a_cmd", a_cmd), ("kappa", kappa),
            ("phi_ref", phi_ref), ("dphi_ref", dphi_ref), ("phi", phi), ("dphi", dphi),
            ("theta", theta), ("dtheta", dtheta), ("theta_ref", theta_ref), ("href", href),
            ("L_l", L[0]), ("L_r", L[1]), ("dL_l", dL[0]), ("dL_r", dL[1]),
            ("ddL_l", ddL[0]), ("ddL_r", ddL[1]), ("ground_l", ground[0]),
            ("ground_r", ground[1]), ("mu_l", mu[0]), ("mu_r", mu[1]),
            ("slip_l", slip[0]), ("slip_r", slip[1]), ("segment", lists["segment"][gi]),
            ("wheel_l_req", req_w[0]), ("wheel_r_req", req_w[1]),
            ("hip_l_req", req_h[0]), ("hip_r_req", req_h[1]),
            ("wheel_l_cmd", cmd_w[0]), ("wheel_r_cmd", cmd_w[1]),
            ("hip_l_cmd", cmd_h[0]), ("hip_r_cmd", cmd_h[1]),
        ):  # fmt: skip
            out[key][i] = val
        v += a * dt
        s += v * dt
        # --- end of the run --------------------------------------------------------------
        if stop_t is None and s >= grid.end and vref == 0.0 and v < 0.02:
            stop_t = t
        if stop_t is not None and t - stop_t >= T_TAIL:
            n = i + 1
            break
        if rest_t is not None and t - rest_t >= T_TAIL:
            n = i + 1
            break
    res: dict[str, np.ndarray] = {k: val[:n] for k, val in out.items()}
    res["t"] = np.arange(n) * dt
    return res


def _d(x: np.ndarray, dt: float) -> np.ndarray:
    """Time derivative of a smooth true series (central differences)."""
    return np.gradient(x, dt) if x.size > 1 else np.zeros_like(x)


def derive_true(st: dict[str, np.ndarray], dt: float) -> dict[str, np.ndarray]:
    """Exact (noise-free) kinematics, specific force and tip margin from the states.

    Returns a dict of true series named after the catalogue where one exists
    (``wheel_l.contact_speed``, ``tip_margin``, ...), all SI.

    Notes
    -----
    Contact midpoint: v_mid = v - d/dt(L sin(pitch)) - yaw_rate (r + L) sin(roll)
    (rigid-body lever arm, DESIGN.md); contacts v_mid -/+ yaw_rate b/2 ([1]);
    rim speed = contact speed + slip; leg-referenced encoder w = v_rim/r - pitch_rate.
    Specific force in the heading frame [a_x, a_y, g + a_z] with a_y = v yaw_rate +
    y_c'', a_z = z_c''; body frame by R_x(roll)^T R_y(pitch)^T. ZMP [2]:
    y_zmp = y_c - z_c f_y / f_z with y_c = -L_c sin(roll), z_c = L_c cos(roll).
    """
    r, b = dc.WHEEL_RADIUS, dc.TRACK_WIDTH
    v, phi, theta = st["v"], st["phi"], st["theta"]
    dtheta = st["dtheta"]
    yaw_rate = st["kappa"] * v  # the base follows the course line
    Lm = 0.5 * (st["L_l"] + st["L_r"])
    dLm = 0.5 * (st["dL_l"] + st["dL_r"])
    Lc = dc.com_height(Lm)
    lever_pitch = dLm * np.sin(theta) + Lm * np.cos(theta) * dtheta  # d/dt(L sin(pitch))
    v_mid = v - lever_pitch - yaw_rate * (r + Lm) * np.sin(phi)
    out: dict[str, np.ndarray] = {"yaw_rate": yaw_rate, "v_mid": v_mid, "com_height": Lc}
    for side, sgn in (("l", -1.0), ("r", 1.0)):
        wheel = f"wheel_{side}"
        v_c = v_mid + sgn * yaw_rate * b / 2.0  # [1]
        v_rim = v_c + st[f"slip_{side}"]
        out[f"{wheel}.{cat.CONTACT_SPEED}"] = v_c
        out[f"{wheel}.{cat.RIM_SPEED}"] = v_rim
        out[f"{wheel}.{cat.SLIP_SPEED}"] = v_rim - v_c
        out[f"{wheel}.joint_vel"] = v_rim / r - dtheta
    out[cat.YAW_RATE_WHEELS] = (
        out[f"wheel_r.{cat.RIM_SPEED}"] - out[f"wheel_l.{cat.RIM_SPEED}"]
    ) / b
    y_c = -Lc * np.sin(phi)
    z_world = 0.5 * (st["ground_l"] + st["ground_r"]) + Lc * np.cos(phi) * np.cos(theta)
    a_x = st["a"]
    a_y = v * yaw_rate + _d(_d(y_c, dt), dt)
    a_z = _d(_d(z_world, dt), dt)
    f_x, f_y, f_z = a_x, a_y, G0 + a_z
    out[cat.SPECIFIC_FORCE_Y] = f_y
    out[cat.SPECIFIC_FORCE_Z] = f_z
    out["vel_y"] = _d(y_c, dt)
    # body frame: first R_y(pitch)^T, then R_x(roll)^T (ISO 8855, pitch nose down, roll right down)
    cth, sth, cph, sph = np.cos(theta), np.sin(theta), np.cos(phi), np.sin(phi)
    u = cth * f_x - sth * f_z
    q = sth * f_x + cth * f_z
    out[cat.ACCEL_X] = u
    out[cat.ACCEL_Y] = cph * f_y + sph * q
    out[cat.ACCEL_Z] = -sph * f_y + cph * q
    zmp = y_c - Lc * np.cos(phi) * f_y / f_z  # [2]
    out[cat.ZMP_Y] = zmp
    out[cat.TIP_MARGIN] = 1.0 - np.abs(zmp) / (b / 2.0)
    out[cat.ROLL_ERROR] = st["phi_ref"] - phi
    return out
