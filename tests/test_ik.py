"""Inverse kinematics of envelope.kinematics.Arm: round trips, solution counts, batches, limits,
turn variants, unreachable reasons and singular flags.

Independent sources: scipy.optimize.least_squares (PyPI: scipy) as a many-start numerical search for the
solution count; the reach of a planar two-link arm (common practice, no source).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from scipy.optimize import least_squares

from envelope.errors import InputError, PoseError
from envelope.kinematics import Arm
from envelope.kinematics.branches import BRANCH_LABELS
from envelope.poses import pose_from_euler

PI = np.pi
# an invented ortho-parallel industrial layout (standard DH), metres / radians
ORTHO = dict(a=[0.15, 0.6, 0.12, 0, 0, 0], alpha=[-PI / 2, 0, -PI / 2, PI / 2, -PI / 2, 0],
             d=[0.45, 0, 0, 0.65, 0, 0.1], offset=[0, -PI / 2, 0, 0, 0, 0])
# the same arm in modified (Craig) DH: row i holds a_(i-1), alpha_(i-1)
ORTHO_MOD = dict(a=[0, 0.15, 0.6, 0.12, 0, 0], alpha=[0, -PI / 2, 0, -PI / 2, PI / 2, -PI / 2],
                 d=[0.45, 0, 0, 0.65, 0, 0.1], offset=[0, -PI / 2, 0, 0, 0, 0])


def ortho(convention="standard", limits=None):
    t = ORTHO if convention == "standard" else ORTHO_MOD
    return Arm.from_dh(t["a"], t["alpha"], t["d"], t["offset"], limits, convention)


def general_spherical(seed, convention):
    """Random twists and offsets for joints 1-3 and the tool; axes 4, 5, 6 meet in a point."""
    rng = np.random.default_rng(seed)
    a, al = rng.uniform(-0.5, 0.5, 6), rng.uniform(-PI, PI, 6)
    d, off = rng.uniform(-0.5, 0.5, 6), rng.uniform(-PI, PI, 6)
    if convention == "standard":
        a[3] = a[4] = d[4] = 0.0
    else:
        a[4] = a[5] = d[4] = 0.0
    return Arm.from_dh(a, al, d, off, convention=convention)


def non_spherical():
    t = ORTHO
    return Arm.from_dh([0.15, 0.6, 0.12, 0.03, 0.02, 0], t["alpha"], [0.45, 0, 0, 0.65, 0.04, 0.1], t["offset"])


ARMS = {
    "ortho-standard": lambda: ortho("standard"),
    "ortho-modified": lambda: ortho("modified"),
    "a1-zero": lambda: Arm.from_dh([0, 0.6, 0.12, 0, 0, 0], ORTHO["alpha"], ORTHO["d"], ORTHO["offset"]),
    "alpha1-zero": lambda: Arm.from_dh([0.3, 0.6, 0.12, 0, 0, 0], [0, -PI / 2, -PI / 2, PI / 2, -PI / 2, 0],
                                       [0.45, 0.1, 0.05, 0.65, 0, 0.1], np.zeros(6)),
    "general-standard": lambda: general_spherical(21, "standard"),
    "general-modified": lambda: general_spherical(22, "modified"),
}


def wrapdiff(a, b):
    return np.abs(np.remainder(a - b + PI, 2 * PI) - PI)


def pose_err(A, B):
    return np.abs(A[..., :3, 3] - B[..., :3, 3]).max(-1), np.abs(A[..., :3, :3] - B[..., :3, :3]).max((-1, -2))


def check_round_trip(arm, q, tol=1e-10):
    T = arm.fk(q)
    res = arm.ik(T)
    assert res.method == ("closed-form" if arm.spherical_wrist else "numeric")
    qq = np.where(res.valid[..., None], res.q, 0.0)
    ep, er = pose_err(arm.fk(qq), T[:, None])
    assert np.where(res.valid, ep, 0).max() < tol
    assert np.where(res.valid, er, 0).max() < tol
    found = (np.nan_to_num(wrapdiff(res.q, q[:, None]), nan=9.0).max(-1) < 1e-6).any(-1)
    return res, found


@pytest.mark.parametrize("name", list(ARMS))
def test_round_trip_random_poses(name):
    arm = ARMS[name]()
    assert arm.spherical_wrist
    rng = np.random.default_rng(31)
    q = rng.uniform(-PI, PI, (1500, 6))
    res, found = check_round_trip(arm, q)
    assert found.all()  # the configuration that made the pose is among the solutions
    # labels come from the geometry: the branch of the generating configuration is reproduced
    assert res.code.dtype == np.int8 and set(np.unique(res.code[res.valid])) <= set(range(8))


def test_round_trip_non_spherical_numeric():
    arm = non_spherical()
    assert not arm.spherical_wrist
    rng = np.random.default_rng(32)
    q = rng.uniform(-PI, PI, (1000, 6))
    res, found = check_round_trip(arm, q)
    assert res.complete is False and res.starts == 32
    assert found.mean() > 0.9  # numerical search: not guaranteed complete
    one = arm.ik(arm.fk(q[0]))
    assert one.method == "numeric" and not one.complete and one.starts == 64 and one.reachable


@pytest.mark.parametrize("name", ["ortho-standard", "general-modified"])
def test_wrist_near_singular(name):
    arm = ARMS[name]()
    rng = np.random.default_rng(33)
    q = rng.uniform(-PI, PI, (1000, 6))
    q[:, 4] = rng.uniform(-1e-7, 1e-7, 1000) - arm.offset[4]  # theta_5 within 1e-7 of 0
    res, found = check_round_trip(arm, q)
    if name == "ortho-standard":  # theta5 = 0 is the singularity of this wrist: flagged, one representative
        arm_match = np.nan_to_num(wrapdiff(res.q[..., :3], q[:, None, :3]), nan=9.0).max(-1) < 1e-6
        sum46 = wrapdiff(res.q[..., 3] + res.q[..., 5], (q[:, 3] + q[:, 5])[:, None]) < 1e-6
        assert (arm_match & sum46).any(-1).all()
        assert (arm_match.sum(-1) == 1).all()  # one representative, not two wrist solutions
        assert res.singular_wrist[arm_match].all()
    else:  # random twists: at theta5 = 0 axes 4, 5, 6 are coplanar and the two wrist solutions merge
        # at a singularity the joints are fixed only to ~sqrt(rounding): 1e-5 rad, while FK(IK) = T to 1e-10
        match = np.nan_to_num(wrapdiff(res.q, q[:, None]), nan=9.0).max(-1) < 1e-5
        assert match.any(-1).all()
        assert res.singular_wrist[match].all()


def test_stretched_elbow_and_shoulder_singular():
    arm = ortho()
    rng = np.random.default_rng(34)
    q = rng.uniform(-PI, PI, (1000, 6))
    # fully stretched: in link 3 the wrist centre is at (a3, d4); stretched when that points along link 2
    q[:, 2] = -np.arctan2(0.65, 0.12)
    res, _ = check_round_trip(arm, q)
    single = arm.ik(arm.fk(q[0]))
    match = wrapdiff(single.q, q[0]).max(-1) < 1e-6
    assert match.any() and single.singular_elbow[match].all()
    # wrist centre on axis 1: choose it there, with a random orientation
    R = pose_from_euler([0, 0, 0], rng.uniform(-PI, PI, (1000, 3)))
    T = R.copy()
    T[:, :3, 3] = np.array([0.0, 0.0, 0.9]) + 0.1 * R[:, :3, 2]  # flange = wrist centre + d6 z6
    b = arm.ik(T)
    qq = np.where(b.valid[..., None], b.q, 0.0)
    ep, er = pose_err(arm.fk(qq), T[:, None])
    assert b.valid.any(-1).all()
    assert np.where(b.valid, ep, 0).max() < 1e-10 and np.where(b.valid, er, 0).max() < 1e-10
    assert b.singular_shoulder[b.valid].all()
    one = arm.ik(T[0])
    assert one.singular_shoulder.all() and one.reachable


def distinct_solutions_scipy(arm, T, n_starts, seed):
    """Many-start search with scipy.optimize.least_squares (source: scipy), deduplicated."""
    rng = np.random.default_rng(seed)

    def residual(q):
        F = arm.fk(q)
        return np.concatenate([F[:3, 3] - T[:3, 3], (F[:3, :3] - T[:3, :3]).ravel()])

    sols = []
    for q0 in rng.uniform(-PI, PI, (n_starts, 6)):
        r = least_squares(residual, q0, xtol=1e-14, ftol=1e-14, gtol=1e-14, method="lm")
        if np.abs(r.fun).max() < 1e-9 and not any(wrapdiff(r.x, s).max() < 1e-5 for s in sols):
            sols.append(r.x)
    return sols


@pytest.mark.parametrize("name", ["ortho-standard", "general-standard", "general-modified"])
def test_solution_count_matches_scipy_many_start(name):
    arm = ARMS[name]()
    rng = np.random.default_rng(35)
    for i in range(2):
        T = arm.fk(rng.uniform(-PI, PI, 6))
        ours = arm.ik(T)
        ref = distinct_solutions_scipy(arm, T, 80, seed=i)
        assert len(ours) == len(ref)
        for s in ref:  # every solution scipy found is one of ours
            assert (wrapdiff(ours.q, s).max(-1) < 1e-6).any()


def test_batch_equals_loop_at_0_1_2_batch_dims():
    arm = ortho(limits=np.radians([[-170, 170], [-120, 150], [-170, 160], [-190, 190], [-125, 125], [-170, 170]]))
    rng = np.random.default_rng(36)
    T = arm.fk(rng.uniform(-PI, PI, (3, 4, 6)))
    b2 = arm.ik(T)
    assert b2.q.shape == (3, 4, 8, 6) and b2.valid.shape == (3, 4, 8) and b2.reachable.shape == (3, 4)
    b1 = arm.ik(T.reshape(12, 4, 4))
    np.testing.assert_array_equal(b2.q.reshape(12, 8, 6), b1.q)
    for k in range(12):
        single = arm.ik(T.reshape(12, 4, 4)[k])
        np.testing.assert_allclose(b1.q[k][b1.valid[k]], single.q[single.is_representative], atol=1e-12)
        assert list(b1.labels[k][b1.valid[k]]) == [single.labels[i] for i in np.flatnonzero(single.is_representative)]
        np.testing.assert_array_equal(b1.within_limits[k][b1.valid[k]], single.within_limits[single.is_representative])
        assert b1.reachable[k] == single.reachable


def test_labels_from_geometry_not_index():
    arm = ortho()
    # home: wrist centre in front of axis 1, elbow above the shoulder-wrist line, theta5 > 0
    q = np.array([0.3, 0.2, 0.1, 0.4, 0.5, 0.6])
    res = arm.ik(arm.fk(q))
    i = int(np.argmin(wrapdiff(res.q, q).max(-1)))
    assert res.labels[i] == "front-up-pos"
    assert sorted(res.labels) == sorted(BRANCH_LABELS)  # an 8-solution pose has each label once
    q2 = q.copy()
    q2[4] = -0.5
    res2 = arm.ik(arm.fk(q2))
    i2 = int(np.argmin(wrapdiff(res2.q, q2).max(-1)))
    assert res2.labels[i2] == "front-up-neg"
    # same pose under the modified-convention table: the same labels for the same configurations
    resm = ortho("modified").ik(arm.fk(q))
    assert sorted(zip(resm.labels, np.round(resm.q, 9).tolist())) == sorted(zip(res.labels, np.round(res.q, 9).tolist()))


def test_joint_limits_placement_and_excess():
    lim = np.radians([[0, 340], [-120, 150], [-170, 160], [-190, 190], [-125, 125], [-170, 170]])
    arm = ortho(limits=lim)
    q = np.array([np.radians(-10.0), 0.2, 0.1, 0.4, 0.5, 0.6])  # joint 1 at -10 deg = 350 deg: outside [0, 340]
    res = arm.ik(arm.fk(q))
    i = int(np.argmin(wrapdiff(res.q, q).max(-1)))
    assert not res.within_limits[i, 0] and res.within_limits[i, 1:].all()
    assert np.degrees(res.excess[i, 0]) == pytest.approx(10.0, abs=1e-9)  # nearest of -10 and 350 deg to [0, 340]
    assert np.degrees(res.q[i, 0]) == pytest.approx(-10.0, abs=1e-9)  # wrapped to [-180, 180]
    # back branches: joint 1 at 170 deg lies inside [0, 340] and is placed there
    inside = res.within_limits[:, 0]
    assert inside.any() and (res.q[inside, 0] >= lim[0, 0]).all() and (res.q[inside, 0] <= lim[0, 1]).all()
    # placement of a joint with range [0, 340 deg]: 350 deg -> excess 10 deg; 200 deg -> kept (not -160)
    res2 = arm.ik(arm.fk(np.radians([200.0, 10, -20, 30, 40, 50])))
    j = int(np.argmin(wrapdiff(res2.q, np.radians([200.0, 10, -20, 30, 40, 50])).max(-1)))
    assert np.degrees(res2.q[j, 0]) == pytest.approx(200.0, abs=1e-9) and res2.within_limits[j].all()


def test_turn_variants_of_a_360_deg_joint():
    lim = np.radians([[-170, 170], [-120, 150], [-170, 160], [-190, 190], [-125, 125], [-360, 360]])
    arm = ortho(limits=lim)
    q = np.radians([10.0, 20, -30, 40, 50, 60])
    res = arm.ik(arm.fk(q))
    reps = np.flatnonzero(res.is_representative)
    variants = np.flatnonzero(~res.is_representative)
    # joint 6 in [-360, 360]: each in-limit branch has exactly one twin 360 deg away (joint 4 +-190: none here)
    in_lim = res.all_within_limits[reps]
    assert len(variants) == in_lim.sum()
    for v in variants:
        t = res.twin[v]
        assert res.twin[t] == t
        assert abs(abs(res.q[v, 5] - res.q[t, 5]) - 2 * PI) < 1e-12
        np.testing.assert_array_equal(res.q[v, :5], res.q[t, :5])
        np.testing.assert_allclose(arm.frames(res.q[v]), arm.frames(res.q[t]), atol=1e-12)  # same geometry
        assert res.labels[v] == res.labels[t] and res.within_limits[v].all()


def test_unreachable_beyond_reach_reason():
    arm = ortho()
    # planar two-link reach (common practice, no source): the wrist centre is at most
    # a2 + hypot(a3, d4) from the shoulder point (a1 from axis 1, height d1)
    reach = 0.15 + 0.6 + np.hypot(0.12, 0.65)
    T = np.eye(4)
    T[:3, 3] = [reach + 0.25, 0.0, 0.45 + 0.1]  # flange 0.1 above the wrist centre (z6 = base z)
    res = arm.ik(T)
    assert len(res) == 0 and not res.reachable
    gap = float(re.search(r"beyond reach by ([0-9.]+) mm", res.reason).group(1))
    assert gap == pytest.approx(250.0, abs=1e-3)
    b = arm.ik(T[None])
    assert not b.valid.any() and not b.reachable[0] and np.isnan(b.q).all()


def test_unreachable_inner_region_reason():
    # a1 = 0 and a long upper arm: wrist centres closer than a2 - hypot(a3, d4) to the shoulder are
    # unreachable (planar two-link inner radius, common practice, no source)
    arm = Arm.from_dh([0, 0.9, 0.05, 0, 0, 0], ORTHO["alpha"], [0.45, 0, 0, 0.3, 0, 0.1], ORTHO["offset"])
    inner = 0.9 - np.hypot(0.05, 0.3)
    T = np.eye(4)
    T[:3, 3] = [0.2, 0.0, 0.45 + 0.1]
    res = arm.ik(T)
    assert len(res) == 0 and not res.reachable
    gap = float(re.search(r"inside the inner unreachable region, ([0-9.]+) mm", res.reason).group(1))
    assert gap == pytest.approx((inner - 0.2) * 1e3, abs=1e-3)


def test_every_branch_outside_limits_reason():
    lim = np.radians([[-10, 10], [-120, 150], [-170, 160], [-190, 190], [-125, 125], [-360, 360]])
    arm = ortho(limits=lim)
    res = arm.ik(arm.fk(np.radians([90.0, 10, -20, 30, 40, 50])))
    assert len(res) > 0 and not res.reachable and not res.all_within_limits.any()
    m = re.search(r"joint 1 at (-?[0-9.]+) deg, ([0-9.]+) deg outside", res.reason)
    assert m and float(m.group(2)) == pytest.approx(80.0, abs=1e-6)
    assert np.degrees(res.excess[:, 0]).min() == pytest.approx(80.0, abs=1e-6)


def test_wrist_singular_returns_one_representative():
    arm = ortho()
    q = np.radians([10.0, 20, -30, 40, 0, 60])  # theta5 = 0 exactly
    res = arm.ik(arm.fk(q))
    reps = res.is_representative
    np.testing.assert_allclose(arm.fk(res.q), np.broadcast_to(arm.fk(q), (len(res), 4, 4)), atol=1e-10)
    same_arm = wrapdiff(res.q[:, :3], q[:3]).max(-1) < 1e-9
    # the arm solution that made the pose has theta5 = 0: one representative, theta4 + theta6 kept
    assert (same_arm & reps).sum() == 1 and res.singular_wrist[same_arm].all()
    k = int(np.flatnonzero(same_arm & reps)[0])
    assert wrapdiff(res.q[k, 3] + res.q[k, 5], q[3] + q[5]) < 1e-9
    assert not res.singular_wrist[~same_arm].any()
    away = arm.ik(arm.fk(np.radians([10.0, 20, -30, 40, 30, 60])))
    assert not away.singular_wrist.any() and not away.singular_elbow.any() and not away.singular_shoulder.any()
    # the same arm solutions, each with two wrist solutions away from the singularity
    assert away.is_representative.sum() == reps.sum() + 1


def test_bad_input():
    arm = ortho()
    with pytest.raises(PoseError, match=r"expected shape \(4, 4\)"):
        arm.ik(np.eye(3))
    bad = np.eye(4)
    bad[3, 0] = 1.0
    with pytest.raises(PoseError, match="bottom row"):
        arm.ik(bad)
    with pytest.raises(PoseError, match=r"\[1\]: bottom row"):
        arm.ik(np.stack([np.eye(4), bad]))
    with pytest.raises(InputError, match="axis 3"):
        Arm.from_dh([0, 0.5, 0, 0, 0, 0], ORTHO["alpha"], [0.4, 0, 0, 0, 0, 0.1], np.zeros(6)).ik(np.eye(4))


def test_unreachable_wrist_orientation_reason():
    # a spherical wrist with twists 90 and 30 deg: axis 6 keeps an angle of 60..120 deg to axis 4
    arm = Arm.from_dh(ORTHO["a"], [-PI / 2, 0, -PI / 2, PI / 2, PI / 6, 0], ORTHO["d"], ORTHO["offset"])
    assert arm.spherical_wrist
    rng = np.random.default_rng(37)
    w = np.array([0.9, 0.2, 0.8])
    R = pose_from_euler(np.zeros(3), rng.uniform(-PI, PI, (300, 3)))
    T = R.copy()
    T[:, :3, 3] = w + 0.1 * R[:, :3, 2]  # same wrist centre, many orientations
    b = arm.ik(T)
    none = np.flatnonzero(~b.valid.any(-1))
    assert 0 < len(none) < 300
    res = arm.ik(T[none[0]])
    assert len(res) == 0 and "wrist cannot reach the orientation" in res.reason
    # independent: a many-start scipy.optimize.least_squares search (source: scipy) finds no solution either
    assert distinct_solutions_scipy(arm, T[none[0]], 20, seed=5) == []


# ---------------------------------------------------------------------------------- ik_each
FIELDS = ("q", "labels", "code", "within_limits", "excess", "singular_wrist", "singular_shoulder", "singular_elbow",
          "singular_measure", "twin", "method", "complete", "starts", "reachable", "reason", "wrist_centre")


def assert_same_solutions(a, b):
    for name in FIELDS:
        x, y = getattr(a, name), getattr(b, name)
        if isinstance(x, np.ndarray):
            assert x.dtype == y.dtype and x.shape == y.shape, name
            np.testing.assert_array_equal(x, y, err_msg=name)  # bit for bit, nan where nan
        else:
            assert x == y, name


def turn_variants_by_loop(arm, sol):
    """Rows of ``sol`` rebuilt one branch at a time with itertools.product (a plain second enumeration)."""
    from itertools import product

    from envelope.kinematics.branches import turn_counts

    reps = np.flatnonzero(sol.is_representative)
    q, twin = [sol.q[reps]], [reps]
    m_lo, m_hi = turn_counts(sol.q[reps], arm.limits)
    for r, i in enumerate(reps):
        if not sol.within_limits[i].all():
            continue
        for ms in product(*[range(m_lo[r, j], m_hi[r, j] + 1) for j in range(6)]):
            if any(ms):
                q.append(sol.q[i] + 2 * np.pi * np.array(ms, dtype=float))
                twin.append([i])
    return np.vstack([np.reshape(v, (-1, 6)) for v in q]), np.concatenate(twin)


def mixed_poses(arm, n, seed):
    """Reachable, wrist-singular, shoulder-singular, stretched-elbow and unreachable poses."""
    rng = np.random.default_rng(seed)
    q = rng.uniform(-PI, PI, (n, 6))
    q[: n // 10, 4] = -arm.offset[4]  # theta5 = 0
    T = arm.fk(q)
    k = n // 10
    T[k : 2 * k, :3, 3] *= 4.0  # beyond reach (each reason computed per pose)
    # wrist centre on axis 1 (at the height of the wrist centre at q = 0), random orientations
    G0, G6inv = arm.chain.link_matrix(0), np.linalg.inv(arm.chain.link_matrix(6))
    w0 = (arm.fk(np.zeros(6)) @ G6inv)[:3, 3]
    w = G0[:3, 3] + ((w0 - G0[:3, 3]) @ G0[:3, 2]) * G0[:3, 2]
    R = pose_from_euler([0, 0, 0], rng.uniform(-PI, PI, (k, 3)))
    T[2 * k : 3 * k, :3, :3] = R[:, :3, :3]
    T[2 * k : 3 * k, :3, 3] = w - R[:, :3, :3] @ G6inv[:3, 3]
    return T


LIMITS_360 = np.radians([[-170, 170], [-120, 150], [-170, 160], [-360, 360], [-125, 125], [-400, 400]])
LIMITS_NARROW = np.radians([[-10, 10], [-120, 150], [-170, 160], [-190, 190], [-125, 125], [-360, 360]])


@pytest.mark.parametrize("name, limits", [("ortho-standard", LIMITS_360), ("ortho-modified", LIMITS_NARROW),
                                          ("ortho-standard", None), ("general-standard", None), ("a1-zero", None),
                                          ("alpha1-zero", LIMITS_360)])
def test_ik_each_equals_loop_over_ik(name, limits):
    arm = ARMS[name]()
    if limits is not None:
        arm = arm.with_limits(limits)
    T = mixed_poses(arm, 200, seed=40)
    each = arm.ik_each(T)
    assert len(each) == len(T)
    for k, P in enumerate(T):
        assert_same_solutions(each[k], arm.ik(P))
    # the cases are present: unreachable (with a reason), turn variants, outside-limit and singular rows
    assert any(not s.reachable and s.reason for s in each)
    assert any(s.singular_wrist.any() for s in each)
    assert any(s.singular_shoulder.any() for s in each) or not name.startswith("ortho")
    if limits is LIMITS_360:
        assert sum((~s.is_representative).sum() for s in each) > len(T)
    if limits is LIMITS_NARROW:
        assert any(len(s) and not s.reachable and "outside the joint limits" in s.reason for s in each)
    # rows and twins agree with a per-branch itertools.product enumeration of the turn variants
    for s in each:
        q, twin = turn_variants_by_loop(arm, s)
        np.testing.assert_array_equal(s.q, q)
        np.testing.assert_array_equal(s.twin, twin)


def test_ik_each_numeric_and_bad_input():
    arm = non_spherical()
    T = arm.fk(np.random.default_rng(41).uniform(-PI, PI, (3, 6)))
    T[2, :3, 3] *= 5.0  # unreachable: the numerical search finds nothing
    each = arm.ik_each(T, n_starts=16)
    for k in range(3):
        assert_same_solutions(each[k], arm.ik(T[k], n_starts=16))
    assert each[0].reachable and not each[2].reachable and "16 starts" in each[2].reason
    assert ortho().ik_each(np.empty((0, 4, 4))) == []
    with pytest.raises(InputError, match=r"shape \(n, 4, 4\), got \(4, 4\)"):
        ortho().ik_each(np.eye(4))
    bad = np.stack([np.eye(4)] * 3)
    bad[1, 3, 0] = 1.0
    with pytest.raises(PoseError, match=r"\[1\]: bottom row"):
        ortho().ik_each(bad)


@pytest.mark.parametrize("name", ["ortho-standard", "alpha1-zero", "general-modified"])
def test_wrist_centre_gap_matches_scipy_least_squares(name):
    """The nearest reachable wrist centre against scipy.optimize.least_squares (source: scipy) started
    from every point of a coarse joint grid."""
    from envelope.kinematics.ik import wrist_centre_gaps, wrist_centre_of

    arm = ARMS[name]()
    rng = np.random.default_rng(42)
    wc = rng.normal(size=(4, 3))
    wc *= (2.5 + rng.uniform(0, 1, (4, 1))) / np.linalg.norm(wc, axis=1, keepdims=True)  # beyond reach
    gap, beyond = wrist_centre_gaps(arm, wc)
    g = np.linspace(-PI, PI, 9)[:-1]
    grid = np.stack(np.meshgrid(g, g, g, indexing="ij"), -1).reshape(-1, 3)
    for k in range(4):
        ref = min((least_squares(lambda t: wrist_centre_of(arm, t)[0] - wc[k], t0, xtol=1e-15, ftol=1e-15, gtol=1e-15)
                   for t0 in grid[np.argsort(np.linalg.norm(wrist_centre_of(arm, grid)[0] - wc[k], axis=1))[:8]]),
                  key=lambda r: r.cost)
        assert gap[k] == pytest.approx(np.sqrt(2 * ref.cost), abs=1e-9)
    assert beyond.all()
