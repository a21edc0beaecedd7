"""One joint-axis chain for both DH conventions, and fast vectorised products along it.

Both conventions are rewritten as the same product (all transforms ``(4, 4)``)::

    base_from_flange = G0 Rz(theta_1) G1 Rz(theta_2) G2 ... Rz(theta_6) G6,
    G_k = Tz(d_k) Tx(a_k) Rx(alpha_k)           (constant "link" transforms)

- standard DH: ``G0 = I`` and ``G_k = (d_k, a_k, alpha_k)`` from table row k;
- modified DH (Craig): ``G0 = (0, a_1, alpha_1)``, ``G_k = (d_k, a_(k+1), alpha_(k+1))`` for k = 1..5
  and ``G6 = (d_6, 0, 0)``, because ``Rx(alpha) Tx(a) = Tx(a) Rx(alpha)``.

The frame just before ``Rz(theta_k)`` is the *axis frame* ``J_k``: its z axis is joint k's axis and its
origin lies on it. Products are evaluated column by column (x, y, z axes and origin as ``(..., 3)``
arrays) with only the elementary operations that are not the identity, which is several times faster
than batched 4x4 matrix products and equal to them to rounding.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

N_JOINTS = 6


@dataclass(frozen=True)
class Chain:
    """Unified link constants ``(d, a, alpha)`` of ``G0 .. G6``, each a ``(7,)`` float64 array."""

    d: np.ndarray
    a: np.ndarray
    alpha: np.ndarray

    @classmethod
    def from_dh(cls, a, alpha, d, convention: str) -> "Chain":
        a, alpha, d = (np.asarray(v, dtype=np.float64) for v in (a, alpha, d))
        gd, ga, gal = np.zeros(7), np.zeros(7), np.zeros(7)
        if convention == "standard":
            gd[1:], ga[1:], gal[1:] = d, a, alpha
        else:
            ga[0], gal[0] = a[0], alpha[0]
            gd[1:] = d
            ga[1:6], gal[1:6] = a[1:], alpha[1:]
        for v in (gd, ga, gal):
            v.flags.writeable = False
        return cls(gd, ga, gal)

    def link_matrix(self, k: int) -> np.ndarray:
        """``G_k`` as a ``(4, 4)`` matrix."""
        ca, sa = np.cos(self.alpha[k]), np.sin(self.alpha[k])
        return np.array(
            [[1.0, 0.0, 0.0, self.a[k]], [0.0, ca, -sa, 0.0], [0.0, sa, ca, self.d[k]], [0.0, 0.0, 0.0, 1.0]]
        )


class Frame:
    """Mutable scratch state of a product: axes ``x, y, z`` and origin ``p``, each ``(..., 3)``."""

    __slots__ = ("x", "y", "z", "p")

    def __init__(self, x, y, z, p):
        self.x, self.y, self.z, self.p = x, y, z, p

    @classmethod
    def identity(cls, shape) -> "Frame":
        e = np.eye(3)
        return cls(*(np.broadcast_to(e[i], tuple(shape) + (3,)) for i in range(3)), np.zeros(tuple(shape) + (3,)))

    def copy(self) -> "Frame":
        return Frame(self.x, self.y, self.z, self.p)

    def rz(self, c, s) -> "Frame":
        """Right-multiply by ``Rz`` with cosine ``c`` and sine ``s`` (arrays ``(...)``)."""
        c, s = c[..., None], s[..., None]
        x, y = self.x, self.y
        self.x, self.y = c * x + s * y, c * y - s * x
        return self

    def link(self, d: float, a: float, alpha: float) -> "Frame":
        """Right-multiply by the constant ``Tz(d) Tx(a) Rx(alpha)``."""
        if d != 0.0:
            self.p = self.p + d * self.z
        if a != 0.0:
            self.p = self.p + a * self.x
        if alpha != 0.0:
            ca, sa = np.cos(alpha), np.sin(alpha)
            y, z = self.y, self.z
            self.y, self.z = ca * y + sa * z, ca * z - sa * y
        return self

    def matrix(self) -> np.ndarray:
        """The state as ``(..., 4, 4)`` matrices."""
        shape = np.broadcast_shapes(self.x.shape, self.y.shape, self.z.shape, self.p.shape)
        out = np.zeros(shape[:-1] + (4, 4))
        out[..., :3, 0] = self.x
        out[..., :3, 1] = self.y
        out[..., :3, 2] = self.z
        out[..., :3, 3] = self.p
        out[..., 3, 3] = 1.0
        return out


def forward(chain: Chain, theta: np.ndarray, start: Frame | None = None) -> Frame:
    """The flange frame for DH joint angles ``theta`` ``(..., 6)`` (offsets already added)."""
    f = Frame.identity(theta.shape[:-1]) if start is None else start
    f.link(chain.d[0], chain.a[0], chain.alpha[0])
    c, s = np.cos(theta), np.sin(theta)
    for k in range(N_JOINTS):
        f.rz(c[..., k], s[..., k]).link(chain.d[k + 1], chain.a[k + 1], chain.alpha[k + 1])
    return f


def axis_frames(chain: Chain, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Joint axes and the flange for DH angles ``theta`` ``(..., 6)``.

    Returns
    -------
    origins, axes : (..., 6, 3)
        A point on, and the unit direction of, each joint axis (base frame).
    flange : (..., 4, 4)
    """
    f = Frame.identity(theta.shape[:-1])
    f.link(chain.d[0], chain.a[0], chain.alpha[0])
    c, s = np.cos(theta), np.sin(theta)
    origins, axes = [], []
    for k in range(N_JOINTS):
        origins.append(np.broadcast_to(f.p, theta.shape[:-1] + (3,)))
        axes.append(np.broadcast_to(f.z, theta.shape[:-1] + (3,)))
        f.rz(c[..., k], s[..., k]).link(chain.d[k + 1], chain.a[k + 1], chain.alpha[k + 1])
    return np.stack(origins, axis=-2), np.stack(axes, axis=-2), f.matrix()


def pose_error(target: np.ndarray, current: np.ndarray) -> np.ndarray:
    """``(..., 6)`` error twist (position m, rotation vector rad) taking ``current`` to ``target``.

    The rotation part is the rotation vector of ``R_target R_current^T`` (base frame).
    """
    ep = target[..., :3, 3] - current[..., :3, 3]
    Rd = target[..., :3, :3] @ np.swapaxes(current[..., :3, :3], -1, -2)
    v = 0.5 * np.stack([Rd[..., 2, 1] - Rd[..., 1, 2], Rd[..., 0, 2] - Rd[..., 2, 0], Rd[..., 1, 0] - Rd[..., 0, 1]], -1)
    sin_t = np.linalg.norm(v, axis=-1)
    cos_t = 0.5 * (np.trace(Rd, axis1=-2, axis2=-1) - 1.0)
    ang = np.arctan2(sin_t, cos_t)
    scale = np.where(sin_t > 1e-12, ang / np.maximum(sin_t, 1e-300), 1.0)
    return np.concatenate([ep, v * scale[..., None]], axis=-1)


def jacobian(origins: np.ndarray, axes: np.ndarray, flange: np.ndarray) -> np.ndarray:
    """``(..., 6, 6)`` geometric Jacobian (rows: linear velocity of the flange origin, angular velocity)."""
    lin = np.cross(axes, flange[..., None, :3, 3] - origins)
    return np.swapaxes(np.concatenate([lin, axes], axis=-1), -1, -2)


def newton_polish(chain: Chain, offset: np.ndarray, q: np.ndarray, target: np.ndarray, iterations: int = 3,
                  damping: float = 1e-12) -> np.ndarray:
    """Damped Newton steps on the full pose; ``q`` ``(..., 6)`` joint values, ``target`` ``(..., 4, 4)``."""
    q = q.copy()
    lam = damping
    for _ in range(iterations):
        o, z, F = axis_frames(chain, q + offset)
        err = pose_error(target, F)
        J = jacobian(o, z, F)
        Jt = np.swapaxes(J, -1, -2)
        A = Jt @ J + lam * np.eye(6)
        q = q + np.linalg.solve(A, (Jt @ err[..., None]))[..., 0]
    return q


def dh_frames(chain: Chain, theta: np.ndarray, convention: str) -> np.ndarray:
    """``(..., 7, 4, 4)`` DH frames 0..6 in the base frame for DH angles ``theta`` ``(..., 6)``.

    Standard DH: frame i is the product through ``G_i``. Modified DH: frame i is ``J_i Rz(theta_i)
    Tz(d_i)``, i.e. the product through the ``d`` part of ``G_i``.
    """
    shape = theta.shape[:-1]
    out = np.zeros(shape + (7, 4, 4))
    out[..., 3, 3] = 1.0
    out[..., 0, :3, :3] = np.eye(3)
    f = Frame.identity(shape).link(chain.d[0], chain.a[0], chain.alpha[0])
    c, s = np.cos(theta), np.sin(theta)
    for k in range(N_JOINTS):
        f.rz(c[..., k], s[..., k])
        if convention == "standard":
            f.link(chain.d[k + 1], chain.a[k + 1], chain.alpha[k + 1])
            _store(out[..., k + 1, :, :], f)
        else:
            f.link(chain.d[k + 1], 0.0, 0.0)
            _store(out[..., k + 1, :, :], f)
            f.link(0.0, chain.a[k + 1], chain.alpha[k + 1])
    return out


def _store(dst: np.ndarray, f: Frame) -> None:
    dst[..., :3, 0] = f.x
    dst[..., :3, 1] = f.y
    dst[..., :3, 2] = f.z
    dst[..., :3, 3] = f.p
