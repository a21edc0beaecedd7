"""The arm model: a six-joint revolute DH chain with joint limits, and its forward kinematics.

Frames: frame 0 is the arm's base frame; frame i (1..6) is the DH frame rigidly attached to link i,
so link i's geometry is given in frame i and moves with it; frame 6 is the flange. The joint angle
of joint i is ``theta_i = q_i + offset_i``.

- ``convention="standard"`` (Denavit-Hartenberg 1955, as in most textbooks):
  ``base_from_i = base_from_(i-1) @ Rz(theta_i) Tz(d_i) Tx(a_i) Rx(alpha_i)``; joint i turns about
  the z axis of frame i-1.
- ``convention="modified"`` (Craig 1986):
  ``base_from_i = base_from_(i-1) @ Rx(alpha_(i-1)) Tx(a_(i-1)) Rz(theta_i) Tz(d_i)``, with row i of
  the table holding ``a_(i-1), alpha_(i-1), d_i, offset_i``; joint i turns about the z axis of frame i.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from .chain import Chain, dh_frames, forward

N_JOINTS = 6
CONVENTIONS = ("standard", "modified")
FK_CHUNK = 8192
"""Configurations per vectorised pass of ``fk`` / ``frames``."""


def _as_table_column(values, name: str) -> np.ndarray:
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (N_JOINTS,):
        raise InputError(f"DH column {name!r} must have {N_JOINTS} values, got shape {arr.shape}", item="arm")
    if not np.isfinite(arr).all():
        raise InputError(f"DH column {name!r} contains a non-finite value", item="arm")
    arr = arr.copy()
    arr.flags.writeable = False
    return arr


def _dh_link(theta, d, a, alpha, convention: str) -> np.ndarray:
    """``(..., 4, 4)`` transforms of one DH row for joint angles ``theta`` of shape ``(...)``."""
    ct, st = np.cos(theta), np.sin(theta)
    ca, sa = np.cos(alpha), np.sin(alpha)
    T = np.zeros(np.shape(theta) + (4, 4))
    if convention == "standard":
        T[..., 0, 0] = ct
        T[..., 0, 1] = -st * ca
        T[..., 0, 2] = st * sa
        T[..., 0, 3] = a * ct
        T[..., 1, 0] = st
        T[..., 1, 1] = ct * ca
        T[..., 1, 2] = -ct * sa
        T[..., 1, 3] = a * st
        T[..., 2, 1] = sa
        T[..., 2, 2] = ca
        T[..., 2, 3] = d
    else:
        T[..., 0, 0] = ct
        T[..., 0, 1] = -st
        T[..., 0, 3] = a
        T[..., 1, 0] = st * ca
        T[..., 1, 1] = ct * ca
        T[..., 1, 2] = -sa
        T[..., 1, 3] = -sa * d
        T[..., 2, 0] = st * sa
        T[..., 2, 1] = ct * sa
        T[..., 2, 2] = ca
        T[..., 2, 3] = ca * d
    T[..., 3, 3] = 1.0
    return T


@dataclass(frozen=True, eq=False)
class Arm:
    """An immutable six-joint revolute arm: DH table, convention and joint limits (metres, radians).

    Build it with ``Arm.from_dh``. Attributes are read-only float64 arrays of shape ``(6,)``;
    ``limits`` is ``(6, 2)`` (lower, upper).
    """

    a: np.ndarray
    alpha: np.ndarray
    d: np.ndarray
    offset: np.ndarray
    limits: np.ndarray
    convention: str = "standard"
    name: str = "arm"
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_dh(cls, a, alpha, d, offset, limits=None, convention: str = "standard", *, name: str = "arm") -> "Arm":
        """An arm from its DH table.

        Parameters
        ----------
        a, alpha, d, offset : (6,) array_like
            Link lengths (m), twists (rad), link offsets (m) and joint-angle offsets (rad). For
            ``convention="modified"`` row i holds ``a_(i-1)`` and ``alpha_(i-1)`` (Craig).
        limits : (6, 2) array_like, optional
            Lower and upper joint limits in radians; ``[-pi, pi]`` for every joint by default.
            A range may exceed 360 degrees (turn variants are then enumerated by IK).
        convention : {"standard", "modified"}
        """
        if convention not in CONVENTIONS:
            raise InputError(f"DH convention must be one of {CONVENTIONS}, got {convention!r}", item="arm")
        if limits is None:
            limits = np.tile([-np.pi, np.pi], (N_JOINTS, 1))
        lim = np.asarray(limits, dtype=np.float64)
        if lim.shape != (N_JOINTS, 2):
            raise InputError(f"joint limits must have shape (6, 2), got {lim.shape}", item="arm")
        if not np.isfinite(lim).all():
            raise InputError("joint limits contain a non-finite value", item="arm")
        bad = np.flatnonzero(lim[:, 0] >= lim[:, 1])
        if bad.size:
            j = int(bad[0])
            raise InputError(
                f"joint {j + 1} lower limit {np.degrees(lim[j, 0]):.6g} deg is not below its upper limit "
                f"{np.degrees(lim[j, 1]):.6g} deg",
                item="arm",
            )
        lim = lim.copy()
        lim.flags.writeable = False
        return cls(
            a=_as_table_column(a, "a"),
            alpha=_as_table_column(alpha, "alpha"),
            d=_as_table_column(d, "d"),
            offset=_as_table_column(offset, "offset"),
            limits=lim,
            convention=convention,
            name=name,
        )

    def with_limits(self, limits) -> "Arm":
        """The same arm with other joint limits (``(6, 2)`` radians)."""
        return Arm.from_dh(self.a, self.alpha, self.d, self.offset, limits, self.convention, name=self.name)

    # ------------------------------------------------------------------ forward kinematics
    def frames(self, q) -> np.ndarray:
        """Every DH frame in the base frame.

        Parameters
        ----------
        q : (6,) or (..., 6) array_like, radians

        Returns
        -------
        (7, 4, 4) or (..., 7, 4, 4) float64 ndarray
            ``base_from_frame[i]`` for i = 0 (base, the identity) .. 6 (flange).
        """
        q = np.asarray(q, dtype=np.float64)
        if q.shape[-1:] != (N_JOINTS,):
            raise InputError(f"joint values must have shape (6,) or (n, 6), got {q.shape}")
        theta = q + self.offset
        flat = theta.reshape(-1, N_JOINTS)
        out = np.empty((len(flat), N_JOINTS + 1, 4, 4))
        for i in range(0, len(flat), FK_CHUNK):  # chunks keep the temporaries in cache
            out[i : i + FK_CHUNK] = dh_frames(self.chain, flat[i : i + FK_CHUNK], self.convention)
        return out.reshape(q.shape[:-1] + (N_JOINTS + 1, 4, 4))

    def fk(self, q) -> np.ndarray:
        """Base-to-flange pose.

        Parameters
        ----------
        q : (6,) or (..., 6) array_like, radians

        Returns
        -------
        (4, 4) or (..., 4, 4) float64 ndarray
            ``base_from_flange``.
        """
        q = np.asarray(q, dtype=np.float64)
        if q.shape[-1:] != (N_JOINTS,):
            raise InputError(f"joint values must have shape (6,) or (n, 6), got {q.shape}")
        flat = (q + self.offset).reshape(-1, N_JOINTS)
        out = np.empty((len(flat), 4, 4))
        for i in range(0, len(flat), FK_CHUNK):  # chunks keep the temporaries in cache
            out[i : i + FK_CHUNK] = forward(self.chain, flat[i : i + FK_CHUNK]).matrix()
        return out.reshape(q.shape[:-1] + (4, 4))

    # ------------------------------------------------------------------ inverse kinematics
    @property
    def chain(self) -> Chain:
        """The DH table as the convention-free joint-axis chain of ``chain.py``."""
        if "chain" not in self._cache:
            self._cache["chain"] = Chain.from_dh(self.a, self.alpha, self.d, self.convention)
        return self._cache["chain"]

    @property
    def spherical_wrist(self) -> bool:
        """True if axes 4, 5 and 6 meet in one point (then IK is closed form and complete)."""
        if "spherical" not in self._cache:
            from .pieper import is_spherical

            self._cache["spherical"] = is_spherical(self.chain)
        return self._cache["spherical"]

    @property
    def _pieper(self):
        if "pieper" not in self._cache:
            from .pieper import PieperModel

            self._cache["pieper"] = PieperModel.build(self.chain, np.asarray(self.offset))
        return self._cache["pieper"]

    def ik(self, base_from_flange, *, n_starts: int | None = None):
        """Every inverse-kinematics solution of a flange pose.

        Parameters
        ----------
        base_from_flange : (4, 4) or (..., 4, 4) array_like
            Target pose(s) of the flange (frame 6) in the base frame, metres. For a TCP target use
            ``base_from_tcp @ inv(flange_from_tcp)``.
        n_starts : int, optional
            Start configurations of the numerical solver (arms without a spherical wrist);
            64 for one pose, 32 per pose in a batch by default.

        Returns
        -------
        IKSolutions for one pose, IKBatch for a batch (see ``envelope.kinematics.ik``).
        """
        from .ik import ik_batch, ik_single

        T = np.asarray(base_from_flange, dtype=np.float64)
        if T.ndim == 2:
            return ik_single(self, T, **({} if n_starts is None else {"n_starts": n_starts}))
        return ik_batch(self, T, **({} if n_starts is None else {"n_starts": n_starts}))

    def ik_each(self, base_from_flange, *, n_starts: int | None = None) -> list:
        """``IKSolutions`` of every pose of a batch: the same as ``[arm.ik(T) for T in base_from_flange]``.

        One vectorised solve for all poses and a cheap per-pose assembly (turn variants included),
        so it is the fast way to get full per-pose results for many targets.

        Parameters
        ----------
        base_from_flange : (n, 4, 4) array_like
            Target flange poses in the base frame, metres.
        n_starts : int, optional
            Start configurations of the numerical solver; 64 by default, as for one pose.

        Returns
        -------
        list of n IKSolutions
        """
        from .ik import ik_each

        return ik_each(self, base_from_flange, **({} if n_starts is None else {"n_starts": n_starts}))

    def joint_axes(self, q) -> tuple[np.ndarray, np.ndarray]:
        """Points on, and unit directions of, the six joint axes in the base frame.

        Parameters
        ----------
        q : (6,) or (..., 6) array_like, radians

        Returns
        -------
        points, directions : (..., 6, 3) float64 ndarrays
        """
        F = self.frames(q)
        idx = np.arange(N_JOINTS) if self.convention == "standard" else np.arange(1, N_JOINTS + 1)
        F = F[..., idx, :, :]
        return F[..., :3, 3], F[..., :3, 2]

    def within_limits(self, q, tol: float = 0.0) -> np.ndarray:
        """``(..., 6)`` bool: each joint value within its limits (widened by ``tol`` radians)."""
        q = np.asarray(q, dtype=np.float64)
        return (q >= self.limits[:, 0] - tol) & (q <= self.limits[:, 1] + tol)
