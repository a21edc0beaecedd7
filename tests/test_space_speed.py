"""The compiled and shared parts of the space check give exactly what the array code they replace gave.

Each fast path is compared with a plain numpy reference written here (the array formulation the
module used before): the revolved marking per azimuth-bin field, the posed and turned sphere marks,
the radius classes, the voxels nearest a shape, the clear-row look-ups and the operating-space rows.
Equality is exact (same voxels, same minimum and the same first voxel), not approximate.
"""

from __future__ import annotations

import gc
import math
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from envelope import fences as F
from envelope import geometry as g
from envelope import space as S
from envelope import spacecheck as SC
from envelope.cell import load_cell
from envelope.demo import demo_cell_path

DATA = Path(__file__).parent / "data"
PITCH = 0.04


@pytest.fixture(scope="module")
def cell():
    return load_cell(DATA / "space-cell.toml")


@pytest.fixture(scope="module")
def demo():
    return load_cell(demo_cell_path())


def _configurations(cell, n, seed):
    lim = np.asarray(cell.arm.limits)
    return np.random.default_rng(seed).uniform(lim[:, 0], lim[:, 1], size=(n, 6))


# ---------------------------------------------------------------------- revolved marking
def _bins_reference(mer, order, class_r, r_, ph, z_, q1_lo, q1_hi, thr):
    """The per-field array loop: every point tried against the fields in order until one marks it."""
    done = np.zeros(len(r_), dtype=bool)
    for b, c in order:
        rest = np.flatnonzero(~done)
        if len(rest) == 0:
            break
        start, length = mer.bin_arc(b, q1_lo, q1_hi)
        gam = np.minimum(S._angle_gap(ph[rest], start, length), 0.5 * math.pi)
        rr = r_[rest]
        side = rr * np.sin(gam)
        near = side - class_r[c] <= thr
        if not near.any():
            continue
        rest, gam, rr, side = rest[near], gam[near], rr[near], side[near]
        d2 = mer.lookup(mer.fields[(b, c)], rr * np.cos(gam), z_[rest])
        done[rest[np.hypot(side, d2) - class_r[c] <= thr]] = True
    return done


@pytest.mark.parametrize("q1_deg", [(-100.0, 60.0), (-170.0, 170.0), (10.0, 14.0)])
def test_bins_kernel_marks_exactly_what_the_array_loop_marks(cell, q1_deg):
    model = S._swept_model(cell, cell.arm.limits, PITCH)
    mer = model.mer
    lo, hi = (math.radians(v) for v in q1_deg)
    rng = np.random.default_rng(3)
    n = 20000
    r_ = rng.uniform(0.0, model.rho_reach + 0.2, n)
    ph = rng.uniform(-math.pi, math.pi, n)
    z_ = rng.uniform(model.z_lo - 0.2, model.z_hi + 0.2, n)
    arcs = [mer.bin_arc(b, lo, hi) for b, _ in model.order]
    thr = 0.5 * math.sqrt(3.0) * PITCH + 0.05
    got = S._bins_kernel(r_, ph, z_, mer.stack, model.f_index, np.array([a[0] for a in arcs]),
                         np.array([a[1] for a in arcs]), model.f_radius, mer.h, mer.z0, mer.raster_error,
                         mer.rho_max, mer.z_min, mer.z_max, thr)
    want = _bins_reference(mer, model.order, model.class_r, r_, ph, z_, lo, hi, thr)
    assert 0 < want.sum() < n  # both outcomes occur
    np.testing.assert_array_equal(got, want)


def test_maximum_and_restricted_space_share_one_model_per_cell(cell):
    mech = np.asarray(cell.arm.limits, dtype=np.float64)
    first = S._swept_model(cell, mech, PITCH)
    joint1 = mech.copy()
    joint1[0] = [-1.0, 0.5]
    joint1[5] = [-1.0, 1.0]  # joints 1 and 4..6 do not change the model
    assert S._swept_model(cell, joint1, PITCH) is first
    joint2 = mech.copy()
    joint2[1, 1] -= 0.1
    assert S._swept_model(cell, joint2, PITCH) is not first
    other = load_cell(DATA / "space-cell.toml")
    assert S._swept_model(other, mech, PITCH) is not S._swept_model(cell, mech, PITCH)
    key = next(k for k, v in S._MODELS.items() if v[0]() is other)
    del other
    gc.collect()
    assert key not in S._MODELS  # dropped with its cell


def test_a_shared_model_gives_the_same_spaces_as_a_fresh_one(cell):
    limits = np.asarray(cell.arm.limits, dtype=np.float64).copy()
    limits[0] = np.radians([-120.0, 45.0])
    warm = S.restricted_space(cell, limits, 0.03, pitch=PITCH)  # after the maximum space built the model
    S._MODELS.clear()
    cold = S.restricted_space(cell, limits, 0.03, pitch=PITCH)
    np.testing.assert_array_equal(warm.occupancy, cold.occupancy)
    np.testing.assert_array_equal(warm.origin, cold.origin)
    assert warm.method == cold.method and warm.over_approximation == cold.over_approximation


# ---------------------------------------------------------------------- posed and turned spheres
def test_posed_marks_equal_mark_spheres_of_the_posed_centres(demo, monkeypatch):
    Q = _configurations(demo, 300, seed=5)
    cover = 0.25 * PITCH
    fr, local, radii = S._frame_spheres(demo, tuple(range(1, 7)), cover)
    W = np.asarray(demo.world_from_base) @ demo.arm.frames(Q)
    Wf = W[:, fr]
    C = (np.einsum("nkij,kj->nki", Wf[..., :3, :3], local) + Wf[..., :3, 3]).reshape(-1, 3)
    want_origin, want = S.mark_spheres(C, np.tile(radii, len(Q)), PITCH, 0.02)
    got_origin, got = S._mark_posed(demo, Q, fr, local, radii, PITCH, 0.02)
    np.testing.assert_array_equal(got_origin, want_origin)
    np.testing.assert_array_equal(got, want)
    monkeypatch.setattr(S, "_POSE_CHUNK", 7)  # posed chunk by chunk, twice
    chunked_origin, chunked = S._mark_posed(demo, Q, fr, local, radii, PITCH, 0.02)
    np.testing.assert_array_equal(chunked_origin, want_origin)
    np.testing.assert_array_equal(chunked, want)


def test_turned_marks_equal_mark_spheres_of_the_turned_centres(cell):
    inst = S._swept_model(cell, cell.arm.limits, PITCH).inst
    ca = inst.centres[::7] + np.array([0.1, -0.05, 0.0])
    radii = inst.radii[::7]
    angles = np.arange(6) * 0.017
    c, s = np.cos(angles), np.sin(angles)
    X = c[:, None] * ca[None, :, 0] - s[:, None] * ca[None, :, 1]
    Y = s[:, None] * ca[None, :, 0] + c[:, None] * ca[None, :, 1]
    C = np.stack([X, Y, np.broadcast_to(ca[None, :, 2], X.shape)], axis=-1).reshape(-1, 3)
    want_origin, want = S.mark_spheres(C, np.tile(radii, len(angles)), PITCH, 0.05)
    got_origin, got = S._mark_turned(ca, radii, angles, PITCH, 0.05)
    np.testing.assert_array_equal(got_origin, want_origin)
    np.testing.assert_array_equal(got, want)


def test_radius_classes_are_those_of_the_sorted_bands():
    radii = np.random.default_rng(2).uniform(0.02, 0.4, 5000)
    labels, reps = S._radius_classes(radii, 0.01)
    band = np.floor((radii - radii.min()) / 0.01).astype(np.int64)
    used, inverse = np.unique(band, return_inverse=True)
    np.testing.assert_array_equal(labels, inverse)
    np.testing.assert_array_equal(reps, [radii[inverse == k].max() for k in range(len(used))])


# ---------------------------------------------------------------------- voxels nearest a shape
def _shapes(space):
    """Shapes around and inside the space: every kind the distance bound knows, some rotated."""
    mid = 0.5 * (space.bounds[0] + space.bounds[1])
    rot = np.eye(4)
    a = 0.6
    rot[:3, :3] = [[math.cos(a), -math.sin(a), 0], [math.sin(a) * 0.8, math.cos(a) * 0.8, -0.6],
                   [math.sin(a) * 0.6, math.cos(a) * 0.6, 0.8]]
    rot[:3, 3] = mid + [1.5, 0.3, 0.2]
    inside = np.eye(4)
    inside[:3, 3] = mid
    cube = np.array([[x, y, z] for x in (0, 1) for y in (0, 1) for z in (0, 1)], dtype=float) * 0.3
    return [
        g.Sphere(mid, 0.05),  # inside the space: the nearest voxels are interior ones
        g.Sphere(mid + [2.5, 0, 0], 0.2),
        g.Capsule(mid + [-2.0, -1.0, 0], mid + [-2.0, 1.0, 0.5], 0.1),
        g.Box([0.05, 2.0, 1.6], rot),
        g.Box([0.4, 0.4, 0.4], inside),
        g.Cylinder(0.2, 1.0, rot),
        g.HalfSpace([0.0, 0.0, 1.0], float(mid[2])),
        g.Convex(cube @ rot[:3, :3].T + rot[:3, 3] + [0.5, 0.5, 0]),
    ]


@pytest.mark.parametrize("which", ["restricted", "cell zones"])
def test_nearest_voxels_give_the_minimum_and_first_voxel_of_all_voxels(demo, which):
    limits, _ = SC._soft_limits(demo)
    space = S.restricted_space(demo, limits, demo.stopping_allowance, pitch=PITCH)
    shapes = _shapes(space) if which == "restricted" else [s for z in demo.zones for s in z.shapes]
    pts = space.marked_centers()
    assert len(pts) > 8 * F._BLOCK ** 3  # the blocked path
    for shape in shapes:
        full = F.distance_to_shape_lower(shape, pts)
        index, d = F._near_voxels(space, shape)
        assert len(index) < len(pts) or isinstance(shape, g.HalfSpace)
        np.testing.assert_array_equal(d, full[index])
        assert float(d.min()) == float(full.min())
        assert index[int(np.argmin(d))] == int(np.argmin(full))
        hd = space.half_diagonal
        assert index[int(np.argmin(d - hd))] == int(np.argmin(full - hd))


def test_distance_3d_of_a_small_space_is_that_of_every_voxel(demo):
    occ = np.zeros((5, 4, 3), dtype=bool)
    occ[1:4, 1:3, 1] = True
    space = S.Space("restricted", np.zeros(3), 0.1, occ, None, np.zeros((2, 3)), None, 0.0, 0.0, "test")
    shape = g.Sphere([0.12, 0.31, 0.4], 0.05)
    d, at = F._distance_3d(space, shape)
    full = F.distance_to_shape_lower(shape, space.marked_centers()) - space.half_diagonal
    assert d == float(full.min())
    np.testing.assert_array_equal(at, space.marked_centers()[int(np.argmin(full))])


# ---------------------------------------------------------------------- rows of the check
def test_operating_rows_use_a_turn_variant_only_for_a_twin_left_out():
    lim = np.array([[-1.0, 1.0]] * 6)
    q = np.zeros(6)
    rows = (
        SimpleNamespace(q=q + 2.0, status="clear", twin_of=-1),  # outside the soft limits
        SimpleNamespace(q=q + 0.1, status="clear", twin_of=0),  # its variants: the first stands in
        SimpleNamespace(q=q + 0.2, status="below margin", twin_of=0),
        SimpleNamespace(q=q, status="intrusion", twin_of=-1),
        SimpleNamespace(q=q + 0.3, status="clear", twin_of=3),  # its twin is used: left out
        SimpleNamespace(q=q - 0.5, status="outside limits", twin_of=-1),
        SimpleNamespace(q=np.full(6, np.nan), status="unreachable", twin_of=-1),
    )
    got = SC._row_configurations(SimpleNamespace(rows=rows), lim)
    np.testing.assert_array_equal(got, [q + 0.1, q])
    assert SC._row_configurations(SimpleNamespace(rows=()), lim).shape == (0, 6)


def test_clear_index_picks_the_first_clear_row_within_the_limits():
    rng = np.random.default_rng(4)
    clear = SC._ClearRows()
    for t in range(40):
        clear[f"t{t}"] = [(f"b{k}", rng.uniform(-3, 3, 6)) for k in range(int(rng.integers(0, 5)))]
    for _ in range(20):
        lim = np.sort(rng.uniform(-3, 3, (6, 2)), axis=1)
        lim[3:] = [-3, 3]
        picks, missing = [], []
        for target, entries in clear.items():  # the row loop
            hit = next(((b, q) for b, q in entries if SC._within(q, lim)), None)
            (missing.append(target) if hit is None else picks.append((target, hit[0])))
        assert SC._covering(clear, lim) == (picks, missing)
        assert SC._covering(dict(clear), lim) == (picks, missing)
