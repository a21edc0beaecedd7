"""The fast map method (envelope.mapping.FastBounds) against the full clearance engine on samples.

The shortcut must give the engine's verdict for every within-limits branch and a best margin within
1 mm of the engine's (project requirement); its per-pair bounds must bracket the engine's values.
The vectorised distance is checked against scipy's SLSQP minimisation of |a - b| over two convex hulls
(scipy.optimize, an independent general-purpose solver).
"""

from __future__ import annotations

import numpy as np
import pytest

from envelope import mapping as M
from envelope.cell import load_cell
from envelope.clearance import ClearanceEngine
from envelope.demo import demo_cell_path

from test_mapping import CELL_TOML


@pytest.fixture(scope="module")
def cells(tmp_path_factory):
    p = tmp_path_factory.mktemp("fastcell") / "cell.toml"
    p.write_text(CELL_TOML)
    return {"capsules": load_cell(p), "demo": load_cell(demo_cell_path())}


def _configs(cell, n, seed):
    """Within-limits IK branches of random TCP poses in front of the arm (seeded)."""
    rng = np.random.default_rng(seed)
    xyz = np.column_stack([rng.uniform(-0.2, 1.0, n), rng.uniform(-0.8, 0.8, n), rng.uniform(0.12, 1.3, n)])
    from scipy.spatial.transform import Rotation

    R = Rotation.from_euler("xyz", rng.uniform(-180, 180, (n, 3)), degrees=True).as_matrix()
    W = np.zeros((n, 4, 4))
    W[:, :3, :3], W[:, :3, 3], W[:, 3, 3] = R, xyz, 1.0
    ik = cell.arm.ik(cell.base_from_flange(W))
    ok = ik.valid & ik.within_limits.all(-1)
    return ik.q[ok], np.nonzero(ok)[0]


@pytest.mark.parametrize("name, n", [("capsules", 400), ("demo", 120)])
def test_fast_verdicts_and_best_margin_match_the_engine(cells, name, n):
    cell = cells[name]
    q, owner = _configs(cell, n, seed=3)
    engine = ClearanceEngine(cell, prune=True)
    fast = M.FastBounds(cell, engine)
    assert fast.usable
    ref = engine.evaluate(q)
    lo, hi, clear, n_engine = fast.worst_margins(q, owner, engine)
    np.testing.assert_array_equal(clear, ref.overall == 0)
    assert n_engine < len(q)  # the shortcut decided some configurations itself
    best_fast = np.full(n, -np.inf)
    best_ref = np.full(n, -np.inf)
    np.maximum.at(best_fast, owner, lo)
    np.maximum.at(best_ref, owner, ref.worst_margin)
    has = np.zeros(n, bool)
    has[owner] = True
    f, r = best_fast[has], best_ref[has]
    np.testing.assert_array_equal(np.isneginf(f), np.isneginf(r))
    fin = np.isfinite(r)
    diff = f[fin] - r[fin]
    assert diff.max() <= 1e-3 and diff.min() >= -1e-3


@pytest.mark.parametrize("name", ["capsules", "demo"])
def test_pair_bounds_bracket_the_engine(cells, name):
    """hi >= the engine's value everywhere (the engine never exceeds the true distance, hi is the
    length of a difference of two points of the solids); half-space values equal the engine's; the
    zone-mesh lower bound (a part of the engine's own bound) never exceeds the engine's value; the
    convex lower bound never exceeds the true distance (scipy SLSQP, independent)."""
    from scipy.optimize import minimize

    cell = cells[name]
    q, _ = _configs(cell, 60, seed=8)
    engine = ClearanceEngine(cell, prune=False)
    fast = M.FastBounds(cell, engine)
    ref = engine.evaluate(q)
    keep = np.flatnonzero(~engine.allowed)
    R, t, lo, hi = fast.bounds(q)
    conv = ~(fast.sp_half | fast.sp_mesh)
    rows, cols = np.nonzero(np.broadcast_to(conv, lo.shape))
    fast.refine(R, t, (rows, cols), lo, hi)
    fast.mesh_lower(R, t, np.nonzero(np.broadcast_to(fast.sp_mesh, lo.shape)), lo)
    one = np.bincount(fast.sp_pair, minlength=fast.n_pairs)[fast.sp_pair] == 1  # single-shape pairs
    E = ref.distance[:, keep][:, fast.sp_pair]
    d_lo, d_hi = lo - fast.pad, hi - fast.pad
    assert not (one[None] & (E > d_hi + 1e-12)).any()
    half = one & fast.sp_half
    np.testing.assert_allclose(d_lo[:, half], E[:, half], atol=1e-8)
    mesh = one[None] & fast.sp_mesh[None] & np.isfinite(d_lo)
    assert mesh.sum() > 0 if name == "demo" else True
    assert not (mesh & (E < d_lo - 1e-12)).any()
    if name == "demo":
        return  # hulls of ~100 vertices make SLSQP slow: the random-hull test below covers them
    # convex pairs: the lower bound against the true distance of a few separated pairs
    rng = np.random.default_rng(2)
    cand = np.argwhere(conv[None] & (d_lo > 0) & (d_hi - d_lo < 1e-3))
    for i, m in cand[rng.choice(len(cand), 4, replace=False)]:
        a, b = fast.sp_a[m], fast.sp_b[m]
        VA = fast._V[a] @ R[i, a].T + t[i, a]
        VB = fast._V[b] @ R[i, b].T + t[i, b]
        ra, rb = fast._r[a], fast._r[b]
        na, nb = len(VA), len(VB)

        def f(w):
            x = w[:na] @ VA - w[na:] @ VB
            return x @ x

        cons = [{"type": "eq", "fun": lambda w: w[:na].sum() - 1}, {"type": "eq", "fun": lambda w: w[na:].sum() - 1}]
        sol = minimize(f, np.concatenate([np.full(na, 1 / na), np.full(nb, 1 / nb)]), bounds=[(0, 1)] * (na + nb),
                       constraints=cons, method="SLSQP", options={"ftol": 1e-15, "maxiter": 1000})
        true = np.sqrt(sol.fun) - ra - rb  # hull distance, minus the radii of rounded shapes
        assert lo[i, m] <= true + 1e-7 and true <= hi[i, m] + 1e-6


def test_gjk_distance_against_scipy():
    """The vectorised distance of two convex hulls against SLSQP on the convex-combination weights."""
    from scipy.optimize import minimize

    from envelope import geometry as gm
    from envelope.cell import Cell, Tool
    from envelope.geometry import Body, Zone
    from envelope.kinematics import Arm

    rng = np.random.default_rng(21)
    arm = Arm.from_dh([0] * 6, [0] * 6, [0] * 6, [0] * 6)
    for trial in range(6):
        va = rng.normal(size=(12, 3)) * 0.1
        vb = rng.normal(size=(9, 3)) * 0.1 + rng.normal(size=3) * 0.4 + [0.5, 0, 0]
        cell = Cell(name="two hulls", arm=arm, world_from_base=np.eye(4),
                    links=(Body("a", 0, (gm.Convex(va),)),), tool=Tool(np.eye(4)),
                    zones=(Zone("b", "fixture", (gm.Convex(vb),), 0.01),))
        engine = ClearanceEngine(cell)
        fast = M.FastBounds(cell, engine)
        R, t, lo, hi = fast.bounds(np.zeros((1, 6)))
        ok = fast.refine(R, t, (np.array([0]), np.array([0])), lo, hi, tol=1e-6)

        def f(w):
            x = w[:12] @ va - w[12:] @ vb
            return x @ x

        cons = [{"type": "eq", "fun": lambda w: w[:12].sum() - 1}, {"type": "eq", "fun": lambda w: w[12:].sum() - 1}]
        w0 = np.concatenate([np.full(12, 1 / 12), np.full(9, 1 / 9)])
        sol = minimize(f, w0, bounds=[(0, 1)] * 21, constraints=cons, method="SLSQP",
                       options={"ftol": 1e-14, "maxiter": 500})
        d = np.sqrt(sol.fun)
        if d < 1e-3:
            continue  # overlapping hulls: the fast path does not claim a distance
        assert ok[0]
        assert lo[0, 0] - 1e-6 <= d + M.ENGINE_EPS and d <= hi[0, 0] + 1e-9
        assert hi[0, 0] - d < 2e-6


def test_fast_map_equals_exact_map_on_a_grid(cells):
    """A whole map (capsule cell, tool down, grid reaching the floor) with both methods: same counts,
    same -inf places, best margin within 1 mm (regression: a floor penetration as the best branch)."""
    cell = cells["capsules"]
    g = M.make_grid(cell, [[-587, 1413], [-993, 1007], [13, 2013]], 2000 / 13, [[180, 0, 0]])
    fast = M.run_map(cell, g, method="fast")
    exact = M.run_map(cell, g, method="exact")
    for name in ("n_solutions", "n_within", "n_clear"):
        np.testing.assert_array_equal(getattr(fast, name), getattr(exact, name))
    f, e = fast.best_margin, exact.best_margin
    np.testing.assert_array_equal(np.isnan(f), np.isnan(e))
    np.testing.assert_array_equal(np.isneginf(f), np.isneginf(e))
    fin = np.isfinite(e)
    assert (e[fin] < 0).any() and (e[fin] > 0).any()
    assert (f[fin] - e[fin]).min() >= -1e-3 and (f[fin] - e[fin]).max() <= 1e-3
