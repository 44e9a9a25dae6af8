"""Sensor model of the demo generator: what a log carries instead of the true states.

A field log never holds the robot's true states. It holds the output of an
attitude filter, raw gyro and accelerometer readings, a velocity estimator,
quantised encoders, drive currents converted to torque, and time stamps taken
by a logger that is sometimes late or drops a row. :class:`SensorModel` names
each of those effects with its size; :func:`measure_state`,
:func:`measure_torque` and :func:`stamp_and_drop` apply them to the true series
of the simulator. The bundled demo runs and the tests use the model by default;
:meth:`SensorModel.ideal` turns every effect off (the log is the true states,
rounded), for tests that check exact kinematics.

Sizes. None is the published value of a named part; all are "from memory" of
typical data-sheet classes, stated so that a reader can judge them:

- **Attitude estimate** (roll, pitch from an onboard attitude filter): white
  noise 0.1 deg RMS, and a slow drift, a first-order random process of 0.3 deg
  RMS with a 20 s time constant (the 0.05 to 0.2 deg noise class of MEMS
  attitude filters; drift from the filter's accelerometer correction during
  manoeuvres). Yaw (no magnetometer) drifts 0.5 deg per minute, plus 0.1 deg noise.
- **Gyro**: white noise 0.1 deg/s RMS at the log rate (about 0.01 deg/s/sqrt(Hz)
  over a 100 Hz band) and a constant bias per axis and run, drawn with 0.2 deg/s
  RMS (MEMS turn-on bias class).
- **Accelerometer**: white noise 0.02 m/s² RMS (about 200 ug/sqrt(Hz) over
  100 Hz) plus wheel/motor vibration: a gear-mesh tone at 14 times the wheel
  rotation frequency, 0.15 m/s² per m/s of speed, and broadband vibration of
  0.08 m/s² RMS per m/s of speed (invented for Marram-2, of the size small
  geared wheel drives show).
- **Velocity estimate** (``vel_x``, ``vel_y``): a first-order filter of the true
  velocity with a 20 ms time constant (the lag of a wheel-odometry/IMU fusion
  filter) plus 0.02 m/s RMS noise. It is an estimate, not the truth.
- **Encoders**: 4096 counts per revolution (12-bit magnetic encoder class). The
  wheel speed is the difference of two quantised wheel angles over one log
  period, so it moves in steps of ``2 pi / 4096 / period`` (0.31 rad/s at
  200 Hz) and lags by half a period; hip angles are quantised alike, and the
  leg lengths carry 0.3 mm RMS noise from the linkage.
- **Time stamps**: 50 us RMS jitter of the logger's clock reading (clipped to a
  fifth of the period, so rows never swap), and a dropped row with probability
  1 in 2000 per log (never the first or last row).
- **Torque**: the measured torque is the phase current times the torque
  constant: the commanded torque through the 5 ms current loop, plus noise of
  1.5 % of the actuator's peak torque RMS (current-sense noise class). The
  requested and commanded torques are the controller's own clean numbers.

Each effect draws from its own seeded generator, so the same seed gives the
same log and a shorter run is an exact prefix of a longer one.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
from scipy.signal import lfilter, lfilter_zi

#: Time stamp jitter never exceeds this share of the sample period, so rows keep
#: their order. [-]
JITTER_CLIP = 0.2


@dataclass(frozen=True)
class SensorModel:
    """Sizes of the sensor effects (SI). See the module docstring for the sources.

    Attributes
    ----------
    attitude_noise : float
        White noise of the roll and pitch estimates. [rad]
    attitude_drift : float
        RMS of the slow roll and pitch drift. [rad]
    attitude_drift_tau_s : float
        Time constant of that drift. [s]
    yaw_noise : float
        White noise of the yaw estimate. [rad]
    yaw_drift_rate : float
        Heading drift of the yaw estimate. [rad/s]
    gyro_noise : float
        White noise of each gyro axis at the log rate. [rad/s]
    gyro_bias : float
        RMS of the constant per-run bias of each gyro axis. [rad/s]
    accel_noise : float
        White noise of each accelerometer axis. [m/s²]
    vibration_tone : float
        Gear-mesh vibration amplitude per unit of speed. [m/s² per m/s]
    vibration_broadband : float
        Broadband vibration RMS per unit of speed. [m/s² per m/s]
    gear_mesh_order : float
        Gear-mesh tone frequency in multiples of the wheel rotation rate. [-]
    velocity_lag_s : float
        Time constant of the velocity estimator. [s]
    velocity_noise : float
        White noise of the velocity estimate. [m/s]
    encoder_counts : int
        Encoder counts per revolution; 0 for no quantisation. [-]
    leg_noise : float
        White noise of the leg lengths. [m]
    stamp_jitter_s : float
        RMS jitter of the time stamps. [s]
    drop_probability : float
        Probability that a log row is lost. [-]
    torque_noise_share : float
        Measured-torque noise RMS as a share of the peak torque. [-]
    torque_lag_s : float
        Time constant of the drive's current loop. [s]
    """

    attitude_noise: float = float(np.deg2rad(0.1))
    attitude_drift: float = float(np.deg2rad(0.3))
    attitude_drift_tau_s: float = 20.0
    yaw_noise: float = float(np.deg2rad(0.1))
    yaw_drift_rate: float = float(np.deg2rad(0.5) / 60.0)
    gyro_noise: float = float(np.deg2rad(0.1))
    gyro_bias: float = float(np.deg2rad(0.2))
    accel_noise: float = 0.02
    vibration_tone: float = 0.15
    vibration_broadband: float = 0.08
    gear_mesh_order: float = 14.0
    velocity_lag_s: float = 0.02
    velocity_noise: float = 0.02
    encoder_counts: int = 4096
    leg_noise: float = 3e-4
    stamp_jitter_s: float = 50e-6
    drop_probability: float = 1.0 / 2000.0
    torque_noise_share: float = 0.015
    torque_lag_s: float = 0.005

    @classmethod
    def ideal(cls) -> SensorModel:
        """Every effect off: the log carries the true states."""
        return cls(**{f.name: 0 for f in fields(cls)})


def _rng(seed: int, channel: int) -> np.random.Generator:
    """An independent generator per effect and signal (channels 300.. are the sensors')."""
    return np.random.default_rng([seed, 300 + channel])


def _lag(x: np.ndarray, tau_s: float, dt: float) -> np.ndarray:
    """First-order lag starting at the first value; the input itself when tau is 0."""
    if tau_s <= 0 or x.size == 0:
        return x.copy()
    a = float(np.exp(-dt / tau_s))
    zi = lfilter_zi([1.0 - a], [1.0, -a]) * x[0]
    return lfilter([1.0 - a], [1.0, -a], x, zi=zi)[0]


def _ar1(rng: np.random.Generator, n: int, sigma: float, tau_s: float, dt: float) -> np.ndarray:
    """Stationary first-order random process of RMS ``sigma`` and time constant ``tau_s``."""
    if sigma <= 0 or n == 0:
        return np.zeros(n)
    a = float(np.exp(-dt / tau_s))
    e = rng.standard_normal(n) * sigma
    e[1:] *= np.sqrt(1.0 - a * a)  # the first value from the stationary distribution
    return lfilter([1.0], [1.0, -a], e)


def _quantise_rate(rate: np.ndarray, dt: float, counts: int) -> np.ndarray:
    """A rate as a drive reports it from an encoder: quantised angle differenced per period."""
    if counts <= 0 or rate.size < 2:
        return rate.copy()
    step = 2.0 * np.pi / counts
    angle = np.concatenate(([0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * dt)))
    q = np.floor(angle / step) * step
    out = np.empty_like(rate)
    out[1:] = np.diff(q) / dt
    out[0] = out[1]
    return out


def _quantise_angle(angle: np.ndarray, counts: int) -> np.ndarray:
    if counts <= 0:
        return angle.copy()
    step = 2.0 * np.pi / counts
    return np.round(angle / step) * step


def measure_state(
    true: dict[str, np.ndarray],
    speed: np.ndarray,
    wheel_rate: np.ndarray,
    dt: float,
    seed: int,
    model: SensorModel,
) -> dict[str, np.ndarray]:
    """The state log's signals as the sensors report them, in SI.

    Parameters
    ----------
    true : dict of ndarray
        True series by catalogue name: ``roll``, ``pitch``, ``yaw`` (unwrapped),
        ``roll_rate``, ``pitch_rate``, ``yaw_rate``, ``accel_x|y|z``, ``vel_x``,
        ``vel_y``, ``leg_l.length``, ``leg_r.length``, ``wheel_l.vel``,
        ``wheel_r.vel`` (joint rates), ``hip_l.pos``, ``hip_r.pos``; other keys
        (references) pass unchanged. [SI]
    speed : ndarray
        True forward speed, for the vibration amplitude. [m/s]
    wheel_rate : ndarray
        Mean wheel rotation rate over the ground, for the gear-mesh tone. [rad/s]
    dt : float
        Sample period. [s]
    seed : int
        Run seed. [-]
    model : SensorModel
        Effect sizes.

    Returns
    -------
    dict of ndarray
        The same keys, measured; ``yaw`` wrapped to (-pi, pi]. [SI]
    """
    n = speed.size
    out = dict(true)
    m = model
    for k, name in enumerate(("roll", "pitch")):
        drift = _ar1(_rng(seed, k), n, m.attitude_drift, max(m.attitude_drift_tau_s, dt), dt)
        white = m.attitude_noise * _rng(seed, 10 + k).standard_normal(n)
        out[name] = true[name] + drift + white
    t = np.arange(n) * dt
    yaw = true["yaw"] + m.yaw_drift_rate * t + m.yaw_noise * _rng(seed, 12).standard_normal(n)
    out["yaw"] = np.angle(np.exp(1j * yaw))
    for k, name in enumerate(("roll_rate", "pitch_rate", "yaw_rate")):
        bias = m.gyro_bias * _rng(seed, 20 + k).standard_normal()
        out[name] = true[name] + bias + m.gyro_noise * _rng(seed, 30 + k).standard_normal(n)
    # vibration: a gear-mesh tone whose phase follows the wheel, plus broadband
    phase = np.cumsum(m.gear_mesh_order * np.abs(wheel_rate)) * dt
    for k, name in enumerate(("accel_x", "accel_y", "accel_z")):
        share = 0.5 if name == "accel_y" else 1.0  # less vibration across the axle
        tone = m.vibration_tone * share * np.abs(speed) * np.sin(phase + 2.0 * k)
        broad = m.vibration_broadband * share * np.abs(speed)
        noise = np.hypot(m.accel_noise, broad) * _rng(seed, 40 + k).standard_normal(n)
        out[name] = true[name] + tone + noise
    for k, name in enumerate(("vel_x", "vel_y")):
        lagged = _lag(true[name], m.velocity_lag_s, dt)
        out[name] = lagged + m.velocity_noise * _rng(seed, 50 + k).standard_normal(n)
    for name in ("wheel_l.vel", "wheel_r.vel"):
        out[name] = _quantise_rate(true[name], dt, m.encoder_counts)
    for name in ("hip_l.pos", "hip_r.pos"):
        out[name] = _quantise_angle(true[name], m.encoder_counts)
    for k, name in enumerate(("leg_l.length", "leg_r.length")):
        out[name] = true[name] + m.leg_noise * _rng(seed, 60 + k).standard_normal(n)
    return out


def measure_torque(
    cmd: np.ndarray, peak: float, dt: float, seed: int, channel: int, model: SensorModel
) -> np.ndarray:
    """Measured torque (phase current times torque constant) from the commanded torque.

    Parameters
    ----------
    cmd : ndarray
        Commanded torque at the control rate. [N*m]
    peak : float
        The actuator's peak torque, for the noise size. [N*m]
    dt : float
        Control period. [s]
    seed, channel : int
        Run seed and the actuator's index. [-]
    model : SensorModel
        Effect sizes.

    Returns
    -------
    ndarray
        Measured torque at the control rate. [N*m]
    """
    lagged = _lag(cmd, model.torque_lag_s, dt)
    sigma = model.torque_noise_share * peak
    return lagged + sigma * _rng(seed, 70 + channel).standard_normal(cmd.size)


def stamp_and_drop(
    t: np.ndarray, period: float, seed: int, channel: int, model: SensorModel
) -> tuple[np.ndarray, np.ndarray]:
    """Logged time stamps (with jitter) and the mask of rows kept (drops removed).

    Parameters
    ----------
    t : ndarray
        True sample times. [s]
    period : float
        Sample period of the log. [s]
    seed, channel : int
        Run seed and the log's index. [-]
    model : SensorModel
        Effect sizes.

    Returns
    -------
    (ndarray, ndarray of bool)
        Stamps [s] and the rows the log keeps.
    """
    n = t.size
    clip = JITTER_CLIP * period
    jitter = np.clip(
        model.stamp_jitter_s * _rng(seed, 80 + channel).standard_normal(n), -clip, clip
    )
    keep = _rng(seed, 90 + channel).random(n) >= model.drop_probability
    if n:
        keep[0] = keep[-1] = True
    return t + jitter, keep
