"""Units: the one place where file units (millimetres, degrees) become library units (metres, radians).

Inside the library every length is in metres and every angle in radians. Files and reports use the
trade's habit, millimetres and degrees. Loaders call ``to_metres`` / ``to_radians`` once at the
boundary; writers call ``to_mm`` / ``to_degrees`` once on the way out.
"""

from __future__ import annotations

import math

import numpy as np

LENGTH_SCALE = {"mm": 1e-3, "m": 1.0}
"""Metres per unit, for the length units a file may declare."""
ANGLE_SCALE = {"deg": math.pi / 180.0, "rad": 1.0}
"""Radians per unit, for the angle units a file may declare."""


def to_metres(value, unit: str = "mm"):
    """A length (scalar or array) in ``unit`` as metres, float64."""
    return np.asarray(value, dtype=np.float64) * LENGTH_SCALE[unit]


def to_radians(value, unit: str = "deg"):
    """An angle (scalar or array) in ``unit`` as radians, float64."""
    return np.asarray(value, dtype=np.float64) * ANGLE_SCALE[unit]


def to_mm(value):
    """A length in metres (scalar or array) as millimetres."""
    return np.asarray(value, dtype=np.float64) * 1e3


def to_degrees(value):
    """An angle in radians (scalar or array) as degrees."""
    return np.degrees(np.asarray(value, dtype=np.float64))


def pose_to_metres(pose, unit: str = "mm"):
    """A ``(..., 4, 4)`` pose whose translation is in ``unit``, with the translation in metres."""
    out = np.array(pose, dtype=np.float64, copy=True)
    out[..., :3, 3] *= LENGTH_SCALE[unit]
    return out
