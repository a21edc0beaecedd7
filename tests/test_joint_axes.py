"""Joint axes: batch shapes, and each axis is the line that joint turns the rest of the arm about."""

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from envelope.kinematics import Arm


@pytest.mark.parametrize("convention", ["standard", "modified"])
def test_joint_axes_are_the_rotation_axes(convention):
    rng = np.random.default_rng(11)
    arm = Arm.from_dh(rng.uniform(-0.5, 0.5, 6), rng.uniform(-np.pi, np.pi, 6), rng.uniform(-0.5, 0.5, 6),
                      rng.uniform(-1, 1, 6), convention=convention)
    q = rng.uniform(-np.pi, np.pi, (4, 6))
    points, dirs = arm.joint_axes(q)
    assert points.shape == dirs.shape == (4, 6, 3)
    for i in range(len(q)):
        p1, d1 = arm.joint_axes(q[i])
        assert np.allclose(points[i], p1) and np.allclose(dirs[i], d1)
        for j in range(6):
            dq = np.zeros(6)
            dq[j] = 0.3
            before, after = arm.fk(q[i]), arm.fk(q[i] + dq)
            # Independent: scipy's rotation about the axis (Rotation.from_rotvec) applied to the flange.
            R = Rotation.from_rotvec(0.3 * dirs[i, j]).as_matrix()
            expected_p = R @ (before[:3, 3] - points[i, j]) + points[i, j]
            assert np.allclose(after[:3, 3], expected_p, atol=1e-12)
            assert np.allclose(after[:3, :3], R @ before[:3, :3], atol=1e-12)
