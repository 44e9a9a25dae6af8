"""Force-angle margin: the second, independent tip-over measure.

In the lateral plane of the heading frame the robot can tip about either wheel
contact. The force-angle stability measure (Papadopoulos & Rey [1]) looks at the
angle between the net force acting at the centre of mass (everything but the
ground's support) and the line from the CoM to each tip-over axis: the robot
tips about an axis when that force's line of action passes through it, i.e.
when the angle reaches zero. This module gives that angle per wheel; the
smaller of the two is the margin. Unlike the ZMP margin it is an angle, so it
reads directly as "how many degrees more lean or lateral force before tipping".
"""

from __future__ import annotations

import numpy as np


def force_angles(
    L_c: np.ndarray | float,
    roll: np.ndarray | float,
    f_y: np.ndarray | float,
    f_z: np.ndarray | float,
    track_width: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Angles of the net CoM force to the left and right tip-over axes.

    Parameters
    ----------
    L_c : ndarray or float
        CoM distance from the ground along body z. [m]
    roll : ndarray or float
        Roll, positive right side down (ISO 8855). [rad]
    f_y, f_z : ndarray or float
        Specific force of the CoM in the heading frame, left and up (at rest f_z = g). [m/s²]
    track_width : float
        Distance b between the wheel contacts. [m]

    Returns
    -------
    (theta_left, theta_right) : tuple of ndarray
        Signed angle for tipping about the left and the right contact: positive
        while the force passes inside the contact, 0 at tip-over, negative beyond. [rad]

    Notes
    -----
    CoM at ``(y_c, z_c) = (-L_c sin(phi), L_c cos(phi))``; contacts at
    ``(+-b/2, 0)``; ``l_i`` from the CoM to contact i. The net non-support force
    per unit mass is ``f_r = -(f_y, f_z)`` (gravity minus the acceleration, [1]).
    ``theta_i = s_i atan2(l_i x f_r, l_i . f_r)`` with ``s_left = -1``,
    ``s_right = +1`` so that both are positive for an upright robot at rest,
    where they equal ``atan(b / (2 L_c))``. This is the angle term theta of the
    force-angle measure of [1]; the full measure also weighs it by the force
    magnitude and a distance, which this module does not.

    References
    ----------
    .. [1] E. G. Papadopoulos and D. A. Rey, "A new measure of tipover stability
       margin for mobile manipulators," Proc. IEEE Int. Conf. on Robotics and
       Automation, 1996, pp. 3111-3116. DOI 10.1109/ROBOT.1996.509185
    """
    Lc = np.asarray(L_c, dtype=float)
    phi = np.asarray(roll, dtype=float)
    fy = np.asarray(f_y, dtype=float)
    fz = np.asarray(f_z, dtype=float)
    y_c, z_c = -Lc * np.sin(phi), Lc * np.cos(phi)
    ry, rz = -fy, -fz  # f_r per unit mass, [1]
    out = []
    for sign, y_contact in ((-1.0, track_width / 2), (1.0, -track_width / 2)):
        ly, lz = y_contact - y_c, -z_c
        cross = ly * rz - lz * ry
        dot = ly * ry + lz * rz
        out.append(sign * np.arctan2(cross, dot))  # [1] angle theta_i
    return out[0], out[1]


def force_angle_margin(
    L_c: np.ndarray | float,
    roll: np.ndarray | float,
    f_y: np.ndarray | float,
    f_z: np.ndarray | float,
    track_width: float,
) -> np.ndarray:
    """Smaller of the two force angles (see :func:`force_angles`). [rad]"""
    left, right = force_angles(L_c, roll, f_y, f_z, track_width)
    return np.minimum(left, right)
