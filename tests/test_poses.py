"""Tests of envelope.poses: Euler angles, quaternions, validation, inversion, batch shapes.

The independent source is scipy.spatial.transform.Rotation (PyPI: scipy). In scipy's axis strings,
lowercase ``'xyz'`` means extrinsic (about fixed axes) and uppercase ``'XYZ'`` intrinsic (about moving
axes); scipy's quaternions are scalar last ``(x, y, z, w)``.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from envelope import poses
from envelope.errors import InputError, PoseError

WORDS = ["".join(w) for w in itertools.product("xyz", repeat=3) if w[0] != w[1] and w[1] != w[2]]
CONVENTIONS = [f"{kind}-{w}" for kind in ("fixed", "euler") for w in WORDS]


def scipy_seq(convention: str) -> str:
    """Our convention name as scipy's axis string: fixed -> lowercase (extrinsic), euler -> uppercase."""
    kind, word = convention.split("-")
    return word if kind == "fixed" else word.upper()


def wrap(angle):
    return np.angle(np.exp(1j * np.asarray(angle)))


def random_poses(rng, shape):
    """Rigid poses of batch shape ``shape``, rotations from scipy, positions in [-2, 2] m."""
    n = int(np.prod(shape)) if shape else 1
    out = np.zeros((n, 4, 4))
    out[:, :3, :3] = Rotation.random(n, random_state=rng.integers(1 << 31)).as_matrix()
    out[:, :3, 3] = rng.uniform(-2.0, 2.0, (n, 3))
    out[:, 3, 3] = 1.0
    return out.reshape(tuple(shape) + (4, 4))


def test_twelve_axis_words_per_family():
    # 3 * 2 * 2 = 12 axis words with no two neighbours equal (6 asymmetric, 6 symmetric): common practice, no source
    assert len(WORDS) == 12
    assert sum(w[0] == w[2] for w in WORDS) == 6


@pytest.mark.parametrize("convention", CONVENTIONS)
def test_rotation_from_euler_matches_scipy(convention):
    rng = np.random.default_rng(11)
    angles = rng.uniform(-np.pi, np.pi, (40, 3))
    ours = poses.rotation_from_euler(angles, convention)
    # independent source: scipy Rotation.from_euler ('xyz' extrinsic = fixed-, 'XYZ' intrinsic = euler-)
    ref = Rotation.from_euler(scipy_seq(convention), angles).as_matrix()
    assert ours.shape == (40, 3, 3)
    np.testing.assert_allclose(ours, ref, atol=1e-12)
    single = poses.rotation_from_euler(angles[7], convention)
    assert single.shape == (3, 3)
    np.testing.assert_allclose(single, ref[7], atol=1e-12)


def test_named_conventions_written_out():
    # fixed-xyz (roll-pitch-yaw) = Rz(c) Ry(b) Rx(a); euler-zyz = Rz(a) Ry(b) Rz(c): scipy as the source
    a, b, c = 0.3, -0.7, 1.9
    Rx = Rotation.from_rotvec([a, 0, 0]).as_matrix()
    Ry = Rotation.from_rotvec([0, b, 0]).as_matrix()
    Rz = Rotation.from_rotvec([0, 0, c]).as_matrix()
    np.testing.assert_allclose(poses.rotation_from_euler([a, b, c], "fixed-xyz"), Rz @ Ry @ Rx, atol=1e-14)
    Rza = Rotation.from_rotvec([0, 0, a]).as_matrix()
    Ryb = Rotation.from_rotvec([0, b, 0]).as_matrix()
    np.testing.assert_allclose(poses.rotation_from_euler([a, b, c], "euler-zyz"), Rza @ Ryb @ Rz, atol=1e-14)


@pytest.mark.parametrize("convention", CONVENTIONS)
def test_euler_from_rotation_matches_scipy(convention):
    rotations = Rotation.random(40, random_state=5)
    ours = poses.euler_from_rotation(rotations.as_matrix(), convention)
    # independent source: scipy as_euler; away from gimbal lock the angles are unique in these ranges
    ref = rotations.as_euler(scipy_seq(convention))
    np.testing.assert_allclose(wrap(ours - ref), 0.0, atol=1e-9)
    symmetric = convention[-3] == convention[-1]
    lo, hi = (0.0, np.pi) if symmetric else (-np.pi / 2, np.pi / 2)
    assert np.all((ours[:, 1] >= lo - 1e-12) & (ours[:, 1] <= hi + 1e-12))
    assert np.all(np.abs(ours[:, [0, 2]]) <= np.pi + 1e-12)


@pytest.mark.parametrize("convention", CONVENTIONS)
def test_euler_round_trip_random_and_tiny(convention):
    rng = np.random.default_rng(23)
    angles = rng.uniform(-np.pi, np.pi, (60, 3))
    R = poses.rotation_from_euler(angles, convention)
    back = poses.euler_from_rotation(R, convention)
    np.testing.assert_allclose(poses.rotation_from_euler(back, convention), R, atol=1e-12)
    # tiny angles: the matrix comes back within the gimbal-lock threshold (1e-12) of euler_from_rotation
    tiny = np.array([[1e-9, 2e-9, -3e-9], [1e-14, -1e-14, 1e-14], [0.0, 0.0, 0.0], [1e-7, 0.5, -1e-7]])
    Rt = poses.rotation_from_euler(tiny, convention)
    bt = poses.euler_from_rotation(Rt, convention)
    np.testing.assert_allclose(poses.rotation_from_euler(bt, convention), Rt, atol=1e-12)
    symmetric = convention[-3] == convention[-1]
    if not symmetric:  # asymmetric words: tiny angles are far from the lock, so they come back themselves
        np.testing.assert_allclose(bt[:2], tiny[:2], atol=1e-15, rtol=1e-6)
        np.testing.assert_allclose(bt[3], tiny[3], atol=1e-15, rtol=1e-6)


@pytest.mark.parametrize("convention", CONVENTIONS)
def test_euler_round_trip_gimbal_lock(convention):
    rng = np.random.default_rng(37)
    symmetric = convention[-3] == convention[-1]
    # gimbal lock: middle angle 0 or pi (symmetric words), +-pi/2 (others): common practice, no source
    middles = [0.0, np.pi] if symmetric else [np.pi / 2, -np.pi / 2]
    for middle in middles:
        angles = rng.uniform(-np.pi, np.pi, (20, 3))
        angles[:, 1] = middle
        angles[:3, 1] = middle + np.array([1e-13, -1e-13, 1e-9])  # at and just off the singularity
        R = poses.rotation_from_euler(angles, convention)
        back = poses.euler_from_rotation(R, convention)
        assert np.isfinite(back).all()
        np.testing.assert_allclose(poses.rotation_from_euler(back, convention), R, atol=1e-9)
        # and the independent reconstruction agrees too (scipy from_euler on our angles)
        ref = Rotation.from_euler(scipy_seq(convention), back).as_matrix()
        np.testing.assert_allclose(ref, R, atol=1e-9)
        exact = np.abs(angles[:, 1] - middle) == 0
        np.testing.assert_array_equal(back[exact, 2], 0.0)  # documented: third angle 0 at the lock
        # scipy as_euler also puts the free rotation on the first angle and zeroes the third
        with pytest.warns(UserWarning, match="Gimbal lock"):
            ref_angles = Rotation.from_matrix(R[exact]).as_euler(scipy_seq(convention))
        np.testing.assert_allclose(wrap(back[exact] - ref_angles), 0.0, atol=1e-9)


@pytest.mark.parametrize("bad", ["fixed-xxy", "euler-zzy", "xyz", "fixed-xy", "fixed-abc", "rpy", "euler-xyzx"])
def test_bad_convention_rejected(bad):
    with pytest.raises(PoseError, match="unknown Euler convention"):
        poses.rotation_from_euler([0.0, 0.0, 0.0], bad)
    with pytest.raises(PoseError, match="unknown Euler convention"):
        poses.euler_from_rotation(np.eye(3), bad)


def test_convention_case_insensitive():
    a = [0.1, 0.2, 0.3]
    np.testing.assert_array_equal(poses.rotation_from_euler(a, "Fixed-XYZ"), poses.rotation_from_euler(a, "fixed-xyz"))


def test_wrong_angle_count():
    with pytest.raises(PoseError, match=r"expected 3 Euler angles, got shape \(4,\)"):
        poses.rotation_from_euler([0.0, 0.0, 0.0, 0.0])


def test_pose_from_euler_layout():
    # upper-left 3x3 = orientation, last column = position, bottom row 0 0 0 1: common practice, no source
    xyz = [0.4, -0.2, 1.1]
    T = poses.pose_from_euler(xyz, [0.1, 0.2, 0.3], "euler-zyz")
    assert T.shape == (4, 4) and T.dtype == np.float64
    np.testing.assert_allclose(T[:3, :3], Rotation.from_euler("ZYZ", [0.1, 0.2, 0.3]).as_matrix(), atol=1e-14)
    np.testing.assert_array_equal(T[:3, 3], xyz)
    np.testing.assert_array_equal(T[3], [0, 0, 0, 1])
    poses.validate_pose(T)
    with pytest.raises(PoseError, match=r"position of 3 values, got shape \(2,\)"):
        poses.pose_from_euler([1.0, 2.0], [0, 0, 0])


# ---------------------------------------------------------------- quaternions


def test_quaternion_scalar_first_matches_scipy():
    rot = Rotation.random(30, random_state=3)
    q_xyzw = rot.as_quat()  # scipy: scalar last (x, y, z, w)
    q_wxyz = q_xyzw[:, [3, 0, 1, 2]]
    ref = rot.as_matrix()
    np.testing.assert_allclose(poses.rotation_from_quaternion(q_wxyz), ref, atol=1e-12)
    np.testing.assert_allclose(poses.rotation_from_quaternion(q_wxyz, order="wxyz"), ref, atol=1e-12)
    np.testing.assert_allclose(poses.rotation_from_quaternion(q_xyzw, order="xyzw"), ref, atol=1e-12)
    np.testing.assert_allclose(poses.rotation_from_quaternion(q_wxyz[4]), ref[4], atol=1e-12)
    # q and -q are the same rotation
    np.testing.assert_allclose(poses.rotation_from_quaternion(-q_wxyz), ref, atol=1e-12)


def test_quaternion_order_matters():
    # 90 degrees about z: scipy from_rotvec as the source; read in the wrong order it is another rotation
    q_xyzw = Rotation.from_rotvec([0, 0, np.pi / 2]).as_quat()
    ref = Rotation.from_rotvec([0, 0, np.pi / 2]).as_matrix()
    np.testing.assert_allclose(poses.rotation_from_quaternion(q_xyzw, order="xyzw"), ref, atol=1e-15)
    assert not np.allclose(poses.rotation_from_quaternion(q_xyzw, order="wxyz"), ref, atol=1e-3)


def test_pose_from_quaternion():
    rot = Rotation.random(5, random_state=8)
    xyz = np.arange(15.0).reshape(5, 3)
    T = poses.pose_from_quaternion(xyz, rot.as_quat(), order="xyzw")
    assert T.shape == (5, 4, 4)
    np.testing.assert_allclose(T[:, :3, :3], rot.as_matrix(), atol=1e-12)
    np.testing.assert_array_equal(T[:, :3, 3], xyz)
    np.testing.assert_array_equal(T[:, 3], np.tile([0.0, 0, 0, 1], (5, 1)))


@pytest.mark.parametrize(
    "q, shown",
    [
        ([1.0, 0.1, 0.0, 0.0], "1.00498756"),
        ([0.5, 0.0, 0.0, 0.0], "0.5"),
        ([0.0, 0.0, 0.0, 0.0], "0"),
        ([1.0 + 2e-6, 0.0, 0.0, 0.0], "1.000002"),
        ([np.nan, 0.0, 0.0, 0.0], "nan"),
    ],
)
def test_quaternion_not_unit_rejected(q, shown):
    with pytest.raises(PoseError, match=f"unit norm within 1e-06, got norm {shown}"):
        poses.rotation_from_quaternion(q)
    with pytest.raises(PoseError, match="unit norm"):
        poses.rotation_from_quaternion([[1.0, 0, 0, 0], q])


def test_quaternion_within_tolerance_accepted_not_normalised():
    q = np.array([1.0 + 5e-7, 0.0, 0.0, 0.0])
    R = poses.rotation_from_quaternion(q)
    assert R[1, 1] == 1.0  # (1 - 2(x^2 + z^2)) with x = z = 0: exact, as written in the formula
    with pytest.raises(PoseError, match="expected a quaternion of 4 values"):
        poses.rotation_from_quaternion([1.0, 0.0, 0.0])
    with pytest.raises(PoseError, match="unknown quaternion order 'ijkw'"):
        poses.rotation_from_quaternion([1.0, 0.0, 0.0, 0.0], order="ijkw")


# ---------------------------------------------------------------- validate_pose


def good_pose():
    return poses.pose_from_euler([0.1, 0.2, 0.3], [0.4, -0.5, 0.6])


def test_validate_returns_same_values_float64():
    T = good_pose()
    out = poses.validate_pose(T.tolist())
    assert out.dtype == np.float64
    np.testing.assert_array_equal(out, T)
    ints = poses.validate_pose(np.eye(4, dtype=int))
    assert ints.dtype == np.float64


@pytest.mark.parametrize("shape", [(3, 3), (4,), (4, 3), (3, 4), (2, 4, 3), (16,), ()])
def test_validate_wrong_shape(shape):
    with pytest.raises(PoseError, match=r"expected shape \(4, 4\) or \(n, 4, 4\), got " + repr(shape).replace("(", r"\(").replace(")", r"\)")):
        poses.validate_pose(np.zeros(shape))


def test_validate_unreadable():
    with pytest.raises(PoseError, match="cannot read as a 4x4 matrix"):
        poses.validate_pose([["a", "b", "c", "d"]] * 4)


@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
def test_validate_non_finite(value):
    T = good_pose()
    T[1, 3] = value
    with pytest.raises(PoseError, match=r"non-finite value \(nan or inf\)"):
        poses.validate_pose(T)


@pytest.mark.parametrize("col", [0, 1, 2, 3])
def test_validate_bottom_row(col):
    # bottom row 0 0 0 1: common practice, no source; tolerance 1e-9 (poses.BOTTOM_ROW_TOL)
    T = good_pose()
    T[3, col] += 1e-8
    with pytest.raises(PoseError, match=r"bottom row must be \[0, 0, 0, 1\], got "):
        poses.validate_pose(T)
    T = good_pose()
    T[3, col] += 1e-10
    np.testing.assert_array_equal(poses.validate_pose(T), T)  # accepted and not repaired


def test_validate_not_orthonormal():
    T = good_pose()
    T[0, 1] += 1e-5
    with pytest.raises(PoseError, match=r"not orthonormal: max \|R\^T R - I\| = .* > 1e-06"):
        poses.validate_pose(T)
    T = good_pose()
    T[0, 1] += 1e-7
    np.testing.assert_array_equal(poses.validate_pose(T), T)
    T = good_pose()
    T[:3, :3] *= 1.001  # a scaled rotation
    with pytest.raises(PoseError, match="not orthonormal"):
        poses.validate_pose(T)


def test_validate_reflection():
    T = good_pose()
    T[:3, 2] *= -1.0  # orthonormal, determinant -1
    with pytest.raises(PoseError, match=r"determinant -1, expected \+1 \(a reflection"):
        poses.validate_pose(T)


def test_validate_batch_names_index():
    batch = np.tile(good_pose(), (6, 1, 1))
    batch[3, 3, 0] = 0.5
    batch[5, 0, 0] = np.nan
    with pytest.raises(PoseError, match=r"^pose\[3\]: bottom row") as info:
        poses.validate_pose(batch[:5])
    assert info.value.item == "pose[3]"
    with pytest.raises(PoseError, match=r"^pose\[5\]: contains a non-finite"):
        poses.validate_pose(batch)
    reflected = np.tile(good_pose(), (5, 1, 1))
    reflected[3, :3, 0] *= -1
    with pytest.raises(PoseError, match=r"targets\[3\]: rotation block has determinant"):
        poses.validate_pose(reflected, item="targets")


def test_validate_two_dim_batch_names_full_index():
    batch = np.tile(good_pose(), (2, 3, 1, 1))
    batch[1, 0, 0, 1] += 1e-3
    with pytest.raises(PoseError, match=r"pose\[1, 0\]: rotation block is not orthonormal"):
        poses.validate_pose(batch)


def test_validate_names_item_and_file():
    T = good_pose()
    T[3, 3] = 2.0
    with pytest.raises(PoseError, match=r'^cell\.yaml: target "pick-3": bottom row') as info:
        poses.validate_pose(T, item='target "pick-3"', file="cell.yaml")
    assert info.value.file == "cell.yaml" and info.value.item == 'target "pick-3"'
    assert isinstance(info.value, InputError)
    with pytest.raises(PoseError, match=r"^prog\.csv: row 12: expected shape"):
        poses.pose_from_matrix(np.eye(3), item="row 12", file="prog.csv")


def test_pose_from_matrix_copies():
    T = good_pose()
    out = poses.pose_from_matrix(T)
    out[0, 3] = 99.0
    assert T[0, 3] == 0.1


# ---------------------------------------------------------------- invert and batch shapes


@pytest.mark.parametrize("shape", [(), (7,), (3, 4)])
def test_invert_matches_numpy_inv(shape):
    rng = np.random.default_rng(41)
    world_from_tool = random_poses(rng, shape)
    tool_from_world = poses.invert(world_from_tool)
    assert tool_from_world.shape == world_from_tool.shape
    # independent source: numpy.linalg.inv (general LU inverse)
    np.testing.assert_allclose(tool_from_world, np.linalg.inv(world_from_tool), atol=1e-12)
    eye = np.broadcast_to(np.eye(4), world_from_tool.shape)
    np.testing.assert_allclose(world_from_tool @ tool_from_world, eye, atol=1e-12)
    poses.validate_pose(tool_from_world)


@pytest.mark.parametrize("shape", [(), (5,), (2, 3)])
def test_batch_shapes_equal_loop(shape):
    rng = np.random.default_rng(53)
    n = int(np.prod(shape)) if shape else 1
    angles = rng.uniform(-np.pi, np.pi, (n, 3)).reshape(tuple(shape) + (3,))
    xyz = rng.uniform(-1, 1, (n, 3)).reshape(tuple(shape) + (3,))
    quats = Rotation.random(n, random_state=9).as_quat()[:, [3, 0, 1, 2]].reshape(tuple(shape) + (4,))
    for convention in ("fixed-xyz", "euler-zyz", "euler-xzy"):
        T = poses.pose_from_euler(xyz, angles, convention)
        assert T.shape == tuple(shape) + (4, 4)
        E = poses.euler_from_rotation(T[..., :3, :3], convention)
        assert E.shape == tuple(shape) + (3,)
        for index in np.ndindex(*shape):
            np.testing.assert_array_equal(T[index], poses.pose_from_euler(xyz[index], angles[index], convention))
            np.testing.assert_array_equal(E[index], poses.euler_from_rotation(T[index][:3, :3], convention))
    Q = poses.pose_from_quaternion(xyz, quats)
    Tinv = poses.invert(Q)
    assert poses.validate_pose(Q).shape == tuple(shape) + (4, 4)
    for index in np.ndindex(*shape):
        np.testing.assert_array_equal(Q[index], poses.pose_from_quaternion(xyz[index], quats[index]))
        np.testing.assert_array_equal(Tinv[index], poses.invert(Q[index]))


def test_translation():
    T = poses.translation([1.0, -2.0, 0.5])
    np.testing.assert_array_equal(T, [[1, 0, 0, 1.0], [0, 1, 0, -2.0], [0, 0, 1, 0.5], [0, 0, 0, 1]])
