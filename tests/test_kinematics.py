"""Forward kinematics of envelope.kinematics.Arm, both DH conventions.

Independent source: pytransform3d (PyPI), whose rotation/translation primitives
(``active_matrix_from_angle``, ``transform_from``, ``concat``) build the DH chain here.
"""

from __future__ import annotations

import numpy as np
import pytest

pytransform3d = pytest.importorskip("pytransform3d")
import pytransform3d.rotations as pr  # noqa: E402
import pytransform3d.transformations as pt  # noqa: E402

from envelope.errors import InputError  # noqa: E402
from envelope.kinematics import Arm  # noqa: E402
from envelope.kinematics.arm import _dh_link  # noqa: E402


def random_arm(rng, convention):
    return Arm.from_dh(
        rng.uniform(-0.6, 0.6, 6), rng.uniform(-np.pi, np.pi, 6), rng.uniform(-0.6, 0.6, 6),
        rng.uniform(-np.pi, np.pi, 6), convention=convention,
    )


def _rot(axis, angle):
    return pt.transform_from(pr.active_matrix_from_angle(axis, angle), np.zeros(3))


def _trans(v):
    return pt.transform_from(np.eye(3), np.asarray(v, dtype=float))


def fk_pytransform3d(arm, q):
    """base_from_flange built from pytransform3d primitives (source: pytransform3d docs, concat is
    extrinsic: concat(A2B, B2C) = B2C @ A2B, so a chain base_from_1 @ 1_from_2 is concat(1_from_2, base_from_1))."""
    theta = np.asarray(q) + arm.offset
    base_from_i = np.eye(4)
    for i in range(6):
        if arm.convention == "standard":  # Rz(theta) Tz(d) Tx(a) Rx(alpha)
            parts = [_rot(2, theta[i]), _trans([0, 0, arm.d[i]]), _trans([arm.a[i], 0, 0]), _rot(0, arm.alpha[i])]
        else:  # Craig: Rx(alpha_(i-1)) Tx(a_(i-1)) Rz(theta_i) Tz(d_i)
            parts = [_rot(0, arm.alpha[i]), _trans([arm.a[i], 0, 0]), _rot(2, theta[i]), _trans([0, 0, arm.d[i]])]
        for P in parts:
            base_from_i = pt.concat(P, base_from_i)
    return base_from_i


@pytest.mark.parametrize("convention", ["standard", "modified"])
def test_fk_matches_pytransform3d_on_random_arms(convention):
    rng = np.random.default_rng(11 if convention == "standard" else 12)
    for _ in range(20):
        arm = random_arm(rng, convention)
        q = rng.uniform(-2 * np.pi, 2 * np.pi, (10, 6))
        ours = arm.fk(q)
        ref = np.array([fk_pytransform3d(arm, x) for x in q])  # source: pytransform3d
        np.testing.assert_allclose(ours, ref, atol=1e-12)


@pytest.mark.parametrize("convention", ["standard", "modified"])
def test_fast_fk_equals_matrix_product_and_frames(convention):
    rng = np.random.default_rng(13)
    arm = random_arm(rng, convention)
    q = rng.uniform(-np.pi, np.pi, (200, 6))
    T = np.broadcast_to(np.eye(4), (200, 4, 4))
    for i in range(6):  # the 4x4 matrix product of the DH links, written independently in arm.py
        T = T @ _dh_link(q[:, i] + arm.offset[i], arm.d[i], arm.a[i], arm.alpha[i], convention)
    np.testing.assert_allclose(arm.fk(q), T, atol=1e-12)
    F = arm.frames(q)
    prefix = np.broadcast_to(np.eye(4), (200, 4, 4))
    for i in range(6):  # every DH frame, not only the flange
        prefix = prefix @ _dh_link(q[:, i] + arm.offset[i], arm.d[i], arm.a[i], arm.alpha[i], convention)
        np.testing.assert_allclose(F[:, i + 1], prefix, atol=1e-12)
    np.testing.assert_array_equal(F[:, 0], np.broadcast_to(np.eye(4), (200, 4, 4)))
    # pytransform3d for the frames too (source: pytransform3d)
    np.testing.assert_allclose(F[7, 6], fk_pytransform3d(arm, q[7]), atol=1e-12)


def test_transform_facts():
    # common practice, no source: bottom row 0 0 0 1, 3x3 block a rotation, last column the position
    rng = np.random.default_rng(14)
    arm = random_arm(rng, "standard")
    T = arm.fk(rng.uniform(-np.pi, np.pi, (50, 6)))
    np.testing.assert_array_equal(T[:, 3], np.tile([0.0, 0.0, 0.0, 1.0], (50, 1)))
    R = T[:, :3, :3]
    np.testing.assert_allclose(np.swapaxes(R, 1, 2) @ R, np.broadcast_to(np.eye(3), R.shape), atol=1e-12)
    np.testing.assert_allclose(np.linalg.det(R), 1.0, atol=1e-12)
    # a chain with no twists and no offsets lies stretched along x at home: orientation identity,
    # position (sum a, 0, sum d) in the last column (common practice, no source)
    flat = Arm.from_dh([0.1, 0.2, 0.3, 0.0, 0.05, 0.0], np.zeros(6), [0.4, 0, 0, 0.01, 0, 0.02], np.zeros(6))
    T0 = flat.fk(np.zeros(6))
    np.testing.assert_allclose(T0[:3, :3], np.eye(3), atol=1e-15)
    np.testing.assert_allclose(T0[:3, 3], [0.65, 0.0, 0.43], atol=1e-15)
    # turning joint 1 by 90 deg moves that point to (0, sum a, sum d)
    np.testing.assert_allclose(flat.fk([np.pi / 2, 0, 0, 0, 0, 0])[:3, 3], [0.0, 0.65, 0.43], atol=1e-15)


def test_six_joints_and_home_is_offsets_only_chain():
    # common practice, no source: a six-axis arm has six joint angles; at home all joint values are 0,
    # so FK is the chain with theta_i = offset_i.
    rng = np.random.default_rng(15)
    for convention in ("standard", "modified"):
        arm = random_arm(rng, convention)
        assert arm.fk(np.zeros(6)).shape == (4, 4)
        offsets_only = Arm.from_dh(arm.a, arm.alpha, arm.d, np.zeros(6), convention=convention)
        np.testing.assert_allclose(arm.fk(np.zeros(6)), offsets_only.fk(arm.offset), atol=1e-12)
        np.testing.assert_allclose(arm.fk(np.zeros(6)), fk_pytransform3d(arm, np.zeros(6)), atol=1e-12)
        with pytest.raises(InputError, match=r"shape \(6,\)"):
            arm.fk(np.zeros(5))


def test_fk_shapes():
    rng = np.random.default_rng(16)
    arm = random_arm(rng, "modified")
    assert arm.fk(np.zeros((3, 5, 6))).shape == (3, 5, 4, 4)
    assert arm.frames(np.zeros((2, 6))).shape == (2, 7, 4, 4)


def test_from_dh_rejects_bad_tables():
    with pytest.raises(InputError, match="convention"):
        Arm.from_dh(np.zeros(6), np.zeros(6), np.zeros(6), np.zeros(6), convention="craig")
    with pytest.raises(InputError, match=r"limits must have shape \(6, 2\)"):
        Arm.from_dh(np.zeros(6), np.zeros(6), np.zeros(6), np.zeros(6), limits=np.zeros((6, 3)))
    with pytest.raises(InputError, match="not below"):
        Arm.from_dh(np.zeros(6), np.zeros(6), np.zeros(6), np.zeros(6), limits=np.tile([1.0, -1.0], (6, 1)))
    arm = Arm.from_dh(np.zeros(6), np.zeros(6), np.zeros(6), np.zeros(6))
    np.testing.assert_array_equal(arm.limits, np.tile([-np.pi, np.pi], (6, 1)))
