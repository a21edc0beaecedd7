"""Rigid poses: building them from xyz + Euler angles, quaternions or matrices, and validating them.

A pose is a float64 ``(4, 4)`` homogeneous matrix ``parent_from_child``: the upper-left 3x3 block is
the orientation of the child frame in the parent, the last column its origin, the bottom row
``0 0 0 1``. A batch is ``(n, 4, 4)``. Every function here takes metres and radians; converting from
file units is done by the loaders through ``envelope.units``.

Euler conventions are named explicitly (see docs/conventions.md):

- ``"fixed-xyz"`` (roll-pitch-yaw): rotate about the *fixed* X axis by a, then the fixed Y by b, then
  the fixed Z by c: ``R = Rz(c) @ Ry(b) @ Rx(a)``. Any three-letter axis word works: ``fixed-zyx`` ...
- ``"euler-zyz"``: rotate about Z by a, then about the *new* Y' by b, then the new Z'' by c:
  ``R = Rz(a) @ Ry(b) @ Rz(c)``. Any axis word works: ``euler-zyx``, ``euler-xyz`` ...

Quaternions are given scalar first, ``(w, x, y, z)``, unless ``order="xyzw"`` is passed.
"""

from __future__ import annotations

import numpy as np

from .errors import PoseError

BOTTOM_ROW_TOL = 1e-9
"""Largest allowed deviation of the bottom row from ``0 0 0 1``."""
ORTHONORMAL_TOL = 1e-6
"""Largest allowed entry of ``R.T @ R - I``."""
QUATERNION_NORM_TOL = 1e-6
"""Largest allowed deviation of a quaternion's norm from 1 (it is never normalised silently)."""

_AXES = {"x": 0, "y": 1, "z": 2}


def _where(item, index=None):
    if index is None:
        return item
    return f"{item}[{index}]" if item else f"pose[{index}]"


def validate_pose(pose, *, item: str | None = None, file=None) -> np.ndarray:
    """Check that ``pose`` is a rigid transform, or a batch of them, and return it as float64.

    Parameters
    ----------
    pose : (4, 4) or (..., 4, 4) array_like
    item, file : str, optional
        Named in the error message.

    Returns
    -------
    (4, 4) or (..., 4, 4) float64 ndarray
        The same values; nothing is repaired.

    Raises
    ------
    PoseError
        Wrong shape, non-finite values, bottom row not ``0 0 0 1`` within 1e-9, the 3x3 block not
        orthonormal within 1e-6, or its determinant not +1. For a batch, the message names the index
        of the first bad pose.
    """
    where = item or "pose"
    try:
        arr = np.asarray(pose, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise PoseError(f"cannot read as a 4x4 matrix of numbers ({exc})", file=file, item=where) from None
    if arr.ndim < 2 or arr.shape[-2:] != (4, 4):
        raise PoseError(f"expected shape (4, 4) or (n, 4, 4), got {arr.shape}", file=file, item=where)
    flat = arr.reshape(-1, 4, 4)

    def idx(i):  # the index in the caller's batch shape: "3" for (n, 4, 4), "1, 0" for (m, n, 4, 4)
        return None if arr.ndim == 2 else ", ".join(str(int(k)) for k in np.unravel_index(i, arr.shape[:-2]))

    bad = ~np.isfinite(flat).all(axis=(1, 2))
    if bad.any():
        i = np.flatnonzero(bad)[0]
        raise PoseError("contains a non-finite value (nan or inf)", file=file, item=_where(where, idx(i)))

    bottom_err = np.abs(flat[:, 3, :] - np.array([0.0, 0.0, 0.0, 1.0])).max(axis=1)
    bad = bottom_err > BOTTOM_ROW_TOL
    if bad.any():
        i = np.flatnonzero(bad)[0]
        raise PoseError(
            f"bottom row must be [0, 0, 0, 1], got {flat[i, 3].tolist()}", file=file, item=_where(where, idx(i))
        )

    rot = flat[:, :3, :3]
    ortho_err = np.abs(np.swapaxes(rot, 1, 2) @ rot - np.eye(3)).max(axis=(1, 2))
    bad = ortho_err > ORTHONORMAL_TOL
    if bad.any():
        i = np.flatnonzero(bad)[0]
        raise PoseError(
            f"rotation block is not orthonormal: max |R^T R - I| = {ortho_err[i]:.3g} > {ORTHONORMAL_TOL:g}",
            file=file,
            item=_where(where, idx(i)),
        )
    det = np.linalg.det(rot)
    bad = det < 0
    if bad.any():
        i = np.flatnonzero(bad)[0]
        raise PoseError(
            f"rotation block has determinant {det[i]:.6g}, expected +1 (a reflection, not a rotation)",
            file=file,
            item=_where(where, idx(i)),
        )
    return arr


def _elementary(axis: int, angle: np.ndarray) -> np.ndarray:
    """``(..., 3, 3)`` rotations by ``angle`` about the coordinate axis ``axis``."""
    c, s = np.cos(angle), np.sin(angle)
    out = np.zeros(angle.shape + (3, 3))
    i, j = [(1, 2), (2, 0), (0, 1)][axis]
    out[..., axis, axis] = 1.0
    out[..., i, i] = c
    out[..., j, j] = c
    out[..., i, j] = -s
    out[..., j, i] = s
    return out


def parse_convention(convention: str) -> tuple[bool, tuple[int, int, int]]:
    """Split ``"fixed-xyz"`` / ``"euler-zyz"`` into (intrinsic?, axis indices).

    Raises
    ------
    PoseError
        For a name that is not ``fixed-`` or ``euler-`` followed by three of x, y, z with no two
        neighbours equal.
    """
    name = str(convention).lower()
    kind, _, word = name.partition("-")
    ok = kind in ("fixed", "euler") and len(word) == 3 and all(c in _AXES for c in word)
    ok = ok and word[0] != word[1] and word[1] != word[2]
    if not ok:
        raise PoseError(
            f"unknown Euler convention {convention!r}: use 'fixed-xyz' (roll-pitch-yaw about fixed axes), "
            "'euler-zyz' (about moving axes), or another 'fixed-'/'euler-' axis word"
        )
    return kind == "euler", tuple(_AXES[c] for c in word)


def rotation_from_euler(angles, convention: str = "fixed-xyz") -> np.ndarray:
    """Rotation matrices from three Euler angles.

    Parameters
    ----------
    angles : (3,) or (n, 3) array_like, radians
    convention : str
        See the module docstring.

    Returns
    -------
    (3, 3) or (n, 3, 3) float64 ndarray
    """
    intrinsic, axes = parse_convention(convention)
    a = np.asarray(angles, dtype=np.float64)
    if a.shape[-1:] != (3,):
        raise PoseError(f"expected 3 Euler angles, got shape {a.shape}")
    r = [_elementary(ax, a[..., k]) for k, ax in enumerate(axes)]
    return r[0] @ r[1] @ r[2] if intrinsic else r[2] @ r[1] @ r[0]


def euler_from_rotation(rotation, convention: str = "fixed-xyz") -> np.ndarray:
    """Euler angles (radians) of rotation matrices; the inverse of ``rotation_from_euler``.

    The middle angle is in [0, pi] for symmetric words (zyz) and [-pi/2, pi/2] otherwise; at the
    gimbal-lock singularity the third angle is set to 0.

    Parameters
    ----------
    rotation : (3, 3) or (n, 3, 3) array_like

    Returns
    -------
    (3,) or (n, 3) float64 ndarray
    """
    intrinsic, axes = parse_convention(convention)
    R = np.asarray(rotation, dtype=np.float64)
    if not intrinsic:  # fixed (a about i, b about j, c about k) == intrinsic (c about k, b about j, a about i)
        out = euler_from_rotation(R, "euler-" + "xyz"[axes[2]] + "xyz"[axes[1]] + "xyz"[axes[0]])[..., ::-1]
        # At gimbal lock that call zeroed its third angle, which is our first; zero our third instead, as
        # documented: R = R_j(b) R_i(a), so R_i(a) = R_j(b)^T R.
        b = out[..., 1]
        lock = (np.abs(np.sin(b)) if axes[0] == axes[2] else np.abs(np.cos(b))) < 1e-12
        if np.any(lock):
            M = np.swapaxes(_elementary(axes[1], b), -1, -2) @ R
            p, q = [(1, 2), (2, 0), (0, 1)][axes[0]]
            a = np.arctan2(M[..., q, p], M[..., p, p])
            out = np.where(lock[..., None], np.stack([a, b, np.zeros_like(b)], axis=-1), out)
        return out
    i, j, k = axes
    symmetric = i == k
    if symmetric:
        k = 3 - i - j
    parity = 1.0 if (j - i) % 3 == 1 else -1.0  # +1 for a cyclic (right-handed) i -> j order
    if symmetric:
        # R = R_i(a) R_j(b) R_i(c)
        cb = np.clip(R[..., i, i], -1.0, 1.0)
        sb = np.hypot(R[..., i, j], R[..., i, k])
        b = np.arctan2(sb, cb)
        a = np.arctan2(R[..., j, i], -parity * R[..., k, i])
        c = np.arctan2(R[..., i, j], parity * R[..., i, k])
        lock = sb < 1e-12
        a_lock = np.arctan2(parity * -R[..., j, k] * np.sign(cb + (cb == 0)), R[..., j, j])
        a = np.where(lock, a_lock, a)
        c = np.where(lock, 0.0, c)
    else:
        # R = R_i(a) R_j(b) R_k(c)
        sb = np.clip(parity * R[..., i, k], -1.0, 1.0)
        cb = np.hypot(R[..., i, i], R[..., i, j])
        b = np.arctan2(sb, cb)
        a = np.arctan2(-parity * R[..., j, k], R[..., k, k])
        c = np.arctan2(-parity * R[..., i, j], R[..., i, i])
        lock = cb < 1e-12
        a_lock = np.arctan2(parity * R[..., k, j], R[..., j, j])
        a = np.where(lock, a_lock, a)
        c = np.where(lock, 0.0, c)
    return np.stack([a, b, c], axis=-1)


def pose_from_euler(xyz, angles, convention: str = "fixed-xyz") -> np.ndarray:
    """A pose from a position (metres) and three Euler angles (radians).

    Parameters
    ----------
    xyz : (3,) or (n, 3) array_like
    angles : (3,) or (n, 3) array_like
    convention : str
        ``"fixed-xyz"`` (roll-pitch-yaw), ``"euler-zyz"``, ... (module docstring).

    Returns
    -------
    (4, 4) or (n, 4, 4) float64 ndarray
    """
    return _assemble(xyz, rotation_from_euler(angles, convention))


def rotation_from_quaternion(quaternion, order: str = "wxyz") -> np.ndarray:
    """Rotation matrices from unit quaternions.

    Parameters
    ----------
    quaternion : (4,) or (n, 4) array_like
        Scalar first ``(w, x, y, z)`` by default; ``order="xyzw"`` for scalar last.

    Raises
    ------
    PoseError
        If a quaternion's norm differs from 1 by more than 1e-6 (it is never normalised silently).
    """
    q = np.asarray(quaternion, dtype=np.float64)
    if q.shape[-1:] != (4,):
        raise PoseError(f"expected a quaternion of 4 values, got shape {q.shape}")
    if order == "xyzw":
        q = q[..., [3, 0, 1, 2]]
    elif order != "wxyz":
        raise PoseError(f"unknown quaternion order {order!r}: use 'wxyz' (scalar first) or 'xyzw'")
    norm = np.linalg.norm(q, axis=-1)
    bad = ~(np.abs(norm - 1.0) <= QUATERNION_NORM_TOL)
    if np.any(bad):
        first = float(np.atleast_1d(norm)[np.flatnonzero(np.atleast_1d(bad))[0]])
        raise PoseError(f"quaternion must have unit norm within {QUATERNION_NORM_TOL:g}, got norm {first:.9g}")
    w, x, y, z = np.moveaxis(q, -1, 0)
    return np.stack(
        [
            np.stack([1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)], axis=-1),
            np.stack([2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)], axis=-1),
            np.stack([2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)], axis=-1),
        ],
        axis=-2,
    )


def pose_from_quaternion(xyz, quaternion, order: str = "wxyz") -> np.ndarray:
    """A pose from a position (metres) and a unit quaternion (scalar first unless ``order="xyzw"``)."""
    return _assemble(xyz, rotation_from_quaternion(quaternion, order))


def _assemble(xyz, R) -> np.ndarray:
    """Poses ``(..., 4, 4)`` from positions ``(..., 3)`` and rotations ``(..., 3, 3)`` (broadcast)."""
    p = np.asarray(xyz, dtype=np.float64)
    if p.shape[-1:] != (3,):
        raise PoseError(f"expected a position of 3 values, got shape {p.shape}")
    shape = np.broadcast_shapes(p.shape[:-1], R.shape[:-2])
    out = np.zeros(shape + (4, 4))
    out[..., :3, :3] = R
    out[..., :3, 3] = p
    out[..., 3, 3] = 1.0
    return out


def pose_from_matrix(matrix, *, item: str | None = None, file=None) -> np.ndarray:
    """A validated copy of a ``(4, 4)`` or ``(n, 4, 4)`` matrix (see ``validate_pose``)."""
    return np.array(validate_pose(matrix, item=item, file=file), dtype=np.float64, copy=True)


def invert(pose) -> np.ndarray:
    """Inverse of rigid poses ``(..., 4, 4)``: ``child_from_parent`` from ``parent_from_child``."""
    T = np.asarray(pose, dtype=np.float64)
    out = np.zeros_like(T)
    Rt = np.swapaxes(T[..., :3, :3], -1, -2)
    out[..., :3, :3] = Rt
    out[..., :3, 3] = -(Rt @ T[..., :3, 3, None])[..., 0]
    out[..., 3, 3] = 1.0
    return out


def translation(xyz) -> np.ndarray:
    """A pure translation pose ``(4, 4)`` (metres)."""
    out = np.eye(4)
    out[:3, 3] = np.asarray(xyz, dtype=np.float64)
    return out
