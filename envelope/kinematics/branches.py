"""Branch labels, singularity measures, joint-limit placement and turn variants of IK solutions.

Branch label ``"<shoulder>-<elbow>-<wrist>"``, computed from the geometry of the solution (never from
its slot), with ``w`` the wrist centre (for an arm without a spherical wrist: the foot on axis 5 of
the common normal of axes 4 and 5), ``o_i`` / ``z_i`` a point on / the direction of joint axis i
(``o_2``: foot on axis 2 of the common normal from axis 1; ``o_3``: foot on axis 3 of the common
normal from axis 2), ``x_1`` the x axis of DH frame 1:

- shoulder ``front`` if ``(w - o_1) . x_1 >= 0``, else ``back``;
- elbow: ``u = w - o_2``, ``m = z_2 x u`` turned so that ``m . z_1 >= 0`` (``m . x_1`` if that is 0);
  ``up`` if ``(o_3 - o_2) . m >= 0``, else ``down``;
- wrist ``pos`` if ``(z_4 x z_6) . z_5 >= 0``, else ``neg``. For the usual wrists (twists -90/+90 deg in
  standard DH, +90/-90 deg in modified DH) this is the sign of ``sin(theta_5)``.

The integer code is ``4 * back + 2 * down + neg``; ``BRANCH_LABELS[code]`` is the label.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

BRANCH_LABELS = tuple(f"{s}-{e}-{w}" for s in ("front", "back") for e in ("up", "down") for w in ("pos", "neg"))
"""The eight labels, indexed by branch code."""

WRIST_SINGULAR_TOL = 1e-6
"""Wrist singular: ``|det[z4 z5 z6]|`` below this (axes 4, 5, 6 coplanar; for the usual wrist that is
``|sin theta5|``, axes 4 and 6 aligned, where only theta4 + theta6 is fixed)."""
SHOULDER_SINGULAR_TOL = 1e-6
"""Shoulder singular: wrist centre closer than this (m) to axis 1."""
ELBOW_SINGULAR_TOL = 1e-6
"""Elbow singular: sine of the angle between the wrist-centre velocities of joints 2 and 3 below this
(arm fully stretched or fully folded)."""
SINGULAR_TOLS = np.array([WRIST_SINGULAR_TOL, SHOULDER_SINGULAR_TOL, ELBOW_SINGULAR_TOL])


def _dot(u, v):
    return u[..., 0] * v[..., 0] + u[..., 1] * v[..., 1] + u[..., 2] * v[..., 2]


def _cross(u, v):
    u0, u1, u2 = u[..., 0], u[..., 1], u[..., 2]
    v0, v1, v2 = v[..., 0], v[..., 1], v[..., 2]
    return np.stack([u1 * v2 - u2 * v1, u2 * v0 - u0 * v2, u0 * v1 - u1 * v0], axis=-1)


def _norm(u):
    return np.sqrt(_dot(u, u))


def arm_codes(w, o1, z1, x1, o2, z2, o3) -> np.ndarray:
    """``(...)`` int8 shoulder/elbow part of the branch code (``4 * back + 2 * down``)."""
    back = _dot(w - o1, x1) < 0
    m = _cross(z2, w - o2)
    up_dir = _dot(m, z1)
    alt = _dot(m, x1)
    sgn = np.where(np.abs(up_dir) > 1e-12 * (_norm(m) + 1e-300), np.sign(up_dir), np.sign(alt))
    sgn = np.where(sgn == 0, 1.0, sgn)
    down = sgn * _dot(o3 - o2, m) < 0
    return (4 * back + 2 * down).astype(np.int8)


def codes_from_geometry(w, o1, z1, x1, o2, z2, o3, wrist_sign) -> np.ndarray:
    """``(...)`` int8 branch codes from ``(..., 3)`` points/axes and the wrist triple product."""
    return (arm_codes(w, o1, z1, x1, o2, z2, o3) + (wrist_sign < 0)).astype(np.int8)


def arm_measures(w, o1, z1, o2, z2, o3, z3) -> np.ndarray:
    """``(..., 2)``: [distance of w from axis 1 (m), elbow sine]."""
    r = w - o1
    shoulder = _norm(r - _dot(r, z1)[..., None] * z1)
    j2 = _cross(z2, w - o2)
    j3 = _cross(z3, w - o3)
    n23 = _norm(j2) * _norm(j3)
    elbow = np.where(n23 > 1e-300, _norm(_cross(j2, j3)) / np.maximum(n23, 1e-300), 0.0)
    return np.stack([shoulder, elbow], axis=-1)


def singularity_measures(w, o1, z1, o2, z2, o3, z3, wrist_det) -> np.ndarray:
    """``(..., 3)``: [|det[z4 z5 z6]|, distance of w from axis 1 (m), elbow sine]."""
    am = arm_measures(w, o1, z1, o2, z2, o3, z3)
    return np.concatenate([np.broadcast_to(wrist_det, am.shape[:-1])[..., None], am], axis=-1)


def place_in_limits(q: np.ndarray, limits: np.ndarray):
    """Place joint values in their ranges.

    Each angle becomes the equivalent (``q + 2 pi m``) inside ``[lower, upper]`` with the smallest
    magnitude; where none exists it is wrapped to ``[-pi, pi]`` and flagged.

    Parameters
    ----------
    q : (..., 6) radians
    limits : (6, 2) radians

    Returns
    -------
    placed : (..., 6) radians
    within : (..., 6) bool
    excess : (..., 6) radians
        0 inside the range, else the distance of the nearest equivalent angle to the range.
    """
    q = np.asarray(q, dtype=np.float64)
    flat = np.ascontiguousarray(q.reshape(-1, q.shape[-1]))
    placed, within, excess = np.empty_like(flat), np.empty(flat.shape, bool), np.empty_like(flat)
    lim = np.ascontiguousarray(limits, dtype=np.float64)
    _place_kernel(flat, lim[:, 0].copy(), lim[:, 1].copy(), placed, within, excess)
    return placed.reshape(q.shape), within.reshape(q.shape), excess.reshape(q.shape)


@njit(cache=True, nogil=True)
def _place_kernel(q, lo, hi, placed, within, excess):
    two_pi = 2.0 * np.pi
    for i in range(q.shape[0]):
        for j in range(q.shape[1]):
            x = q[i, j]
            # the solvers' angles (|x| <= 3 pi): two conditional turns; anything else by remainder
            if abs(x) <= 3 * np.pi:
                w = x - two_pi if x > np.pi else x
                w = w + two_pi if w < -np.pi else w
            else:
                w = np.remainder(x + np.pi, two_pi) - np.pi
            lo_, hi_ = lo[j], hi[j]
            if lo_ <= -np.pi and hi_ >= np.pi:  # the whole circle: the wrapped angle is in range, the smallest
                placed[i, j], within[i, j], excess[i, j] = w, True, 0.0
                continue
            m_lo = math.ceil((lo_ - w) / two_pi - 1e-12)
            m_hi = math.floor((hi_ - w) / two_pi + 1e-12)
            if m_lo <= m_hi:
                m0 = min(max(float(round(-w / two_pi)), m_lo), m_hi)
                placed[i, j] = min(max(w + two_pi * m0, lo_), hi_)  # the clip only absorbs the 1e-12 slack
                within[i, j], excess[i, j] = True, 0.0
            else:  # distance of the nearest of w - 2 pi, w, w + 2 pi to the range
                dist = min(max(lo_ - w, w - hi_), max(lo_ - (w + two_pi), (w + two_pi) - hi_))
                dist = min(dist, max(lo_ - (w - two_pi), (w - two_pi) - hi_))
                placed[i, j], within[i, j], excess[i, j] = w, False, max(dist, 0.0)


def turn_counts(q_placed: np.ndarray, limits: np.ndarray):
    """``(..., 6)`` lowest and highest turn index m with ``q + 2 pi m`` inside the limits."""
    lo, hi = limits[:, 0], limits[:, 1]
    two_pi = 2.0 * np.pi
    m_lo = np.ceil((lo - q_placed) / two_pi - 1e-12)
    m_hi = np.floor((hi - q_placed) / two_pi + 1e-12)
    return m_lo.astype(int), m_hi.astype(int)
