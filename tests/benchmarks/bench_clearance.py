"""Benchmark of the clearance engine on an invented reference cell (not collected by pytest).

Cell: an invented ortho-parallel six-axis arm with 7 links as capsules (base post + one per joint),
20 box keep-out zones around it, self pairs between links whose frames differ by 2 or more (two
wrist pairs allowed): 7 x 20 + 13 = 153 pairs. A second run uses link meshes of ~500 triangles each
(a capsule mesh per link; the engine replaces each by its convex hull).

Reports, in one run: configurations per second of ``ClearanceEngine.evaluate`` (batch), the time of
the bare python-fcl queries for the same pairs (FK, set every transform, one ``fcl.distance`` per
pair with a fresh request/result), their ratio, and the per-pair minimum table.

    /work/venv/bin/python tests/benchmarks/bench_clearance.py [--n 2000] [--rows 15]
"""

from __future__ import annotations

import argparse
import time

import fcl
import numpy as np
import trimesh

from envelope.cell import Cell, Tool
from envelope.clearance import STATUS_NAMES, ClearanceEngine
from envelope.geometry import Body, Box, Capsule, TriMesh, Zone
from envelope.kinematics import Arm

# invented ortho-parallel arm (standard DH)
A = [0.15, 0.60, 0.12, 0.0, 0.0, 0.0]
ALPHA = [-np.pi / 2, 0.0, -np.pi / 2, np.pi / 2, -np.pi / 2, 0.0]
D = [0.45, 0.0, 0.0, 0.62, 0.0, 0.10]
OFFSET = [0.0, -np.pi / 2, 0.0, 0.0, 0.0, 0.0]
RADII = [0.15, 0.12, 0.10, 0.09, 0.08, 0.07, 0.05]
WRIST_ALLOWED = frozenset({frozenset({"link4", "link6"}), frozenset({"link2", "link4"})})


def link_capsules():
    out = [Capsule([0, 0, 0], [0, 0, 0.2], RADII[0])]
    for i in range(6):
        ca, sa = np.cos(ALPHA[i]), np.sin(ALPHA[i])
        rx = np.array([[1, 0, 0], [0, ca, -sa], [0, sa, ca]])
        out.append(Capsule(rx.T @ np.array([-A[i], 0.0, -D[i]]), [0, 0, 0], RADII[i + 1]))
    return out


def capsule_mesh(c: Capsule, count=(16, 16)) -> TriMesh:
    """A triangle mesh of a capsule (~500 faces), placed on the capsule's segment."""
    d = c.p1 - c.p0
    length = float(np.linalg.norm(d))
    m = trimesh.creation.capsule(height=max(length, 1e-6), radius=c.radius, count=count)
    z = d / length if length > 0 else np.array([0.0, 0.0, 1.0])
    a = np.array([1.0, 0.0, 0.0]) if abs(z[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    x = np.cross(a, z)
    x /= np.linalg.norm(x)
    T = np.eye(4)
    T[:3, :3] = np.column_stack([x, np.cross(z, x), z])
    T[:3, 3] = 0.5 * (c.p0 + c.p1)
    m.apply_transform(T)
    return TriMesh(m.vertices, m.faces, watertight=bool(m.is_watertight), source="generated capsule")


def zones(rng):
    out = []
    for k in range(20):
        ang = 2 * np.pi * k / 20
        T = np.eye(4)
        r = rng.uniform(1.1, 1.8)
        T[:3, 3] = [r * np.cos(ang), r * np.sin(ang), rng.uniform(0.0, 1.6)]
        c, s = np.cos(ang), np.sin(ang)
        T[:3, :3] = [[c, -s, 0], [s, c, 0], [0, 0, 1]]
        out.append(Zone(f"box{k:02d}", "keep-out", (Box(rng.uniform(0.15, 0.6, 3), T),), 0.05))
    return tuple(out)


def reference_cell(meshes: bool = False) -> Cell:
    rng = np.random.default_rng(2026)
    caps = link_capsules()
    shapes = [capsule_mesh(c) if meshes else c for c in caps]
    links = tuple(Body(f"link{i}", i, (s,)) for i, s in enumerate(shapes))
    arm = Arm.from_dh(A, ALPHA, D, OFFSET, name="invented-6")
    return Cell(name="reference", arm=arm, world_from_base=np.eye(4), links=links, tool=Tool(np.eye(4)),
                zones=zones(rng), self_pairs_allowed=WRIST_ALLOWED, self_clearance=0.01)


def bare_fcl_time(engine: ClearanceEngine, q) -> float:
    """Seconds for FK + setting transforms + one python-fcl distance query per pair, per configuration."""
    slots = engine._slots  # the engine's own python-fcl objects (same geometry, same pairs)
    sp_a, sp_b = engine._sp_a.tolist(), engine._sp_b.tolist()
    nb = engine._n_body_slots
    frames = [slots[s].frame for s in range(nb)]
    t0 = time.perf_counter()
    W = engine.cell.world_from_base @ engine.cell.arm.frames(q)
    for i in range(len(q)):
        for s in range(nb):
            M = W[i, frames[s]] @ slots[s].frame_from_obj
            slots[s].obj.setTransform(fcl.Transform(M[:3, :3], M[:3, 3]))
        for a, b in zip(sp_a, sp_b):
            req = fcl.DistanceRequest(enable_nearest_points=True, enable_signed_distance=True)
            res = fcl.DistanceResult()
            fcl.distance(slots[a].obj, slots[b].obj, req, res)
    return (time.perf_counter() - t0) / len(q)


def run(label: str, cell: Cell, q, rows: int) -> None:
    engine = ClearanceEngine(cell)
    engine.evaluate(q[:8])  # warm-up
    t0 = time.perf_counter()
    res = engine.evaluate(q)
    t_engine = (time.perf_counter() - t0) / len(q)
    n_bare = min(len(q), 300)
    t_bare = bare_fcl_time(engine, q[:n_bare])
    print(f"\n== {label}: {len(engine.pairs)} pairs, {len(q)} configurations")
    print(f"engine     : {t_engine * 1e6:8.1f} us/config  ({1 / t_engine:8.0f} configs/s), "
          f"exact queries on {100 * (1 - res.pruned.mean()):.1f} % of pairs")
    print(f"bare fcl   : {t_bare * 1e6:8.1f} us/config  (FK + {len(engine._sp_a)} fcl.distance, {n_bare} configs)")
    print(f"ratio      : {t_engine / t_bare:8.3f}  (engine / bare python-fcl)")
    print(f"vs C++ 62 us/config: {t_engine / 62e-6:.2f} x")
    overall = np.bincount(res.overall, minlength=3)
    print("overall    : " + ", ".join(f"{STATUS_NAMES[k]} {overall[k]}" for k in range(3)))
    # per-pair minimum table (lower bounds; pruned values are cheap lower bounds, never above the truth)
    margin_min = res.margin.min(axis=0)
    worst_count = np.bincount(res.worst[res.worst >= 0], minlength=len(engine.pairs))
    order = np.argsort(margin_min)
    print(f"{'pair':>4} {'body':>6} {'other':>7} {'kind':>5} {'min dist mm':>12} {'req mm':>7} "
          f"{'min margin mm':>14} {'worst in':>8} {'pruned %':>8}")
    for p in order[:rows]:
        pr = engine.pairs[p]
        print(f"{p:4d} {pr.body:>6} {pr.other:>7} {pr.kind:>5} {1e3 * res.distance[:, p].min():12.2f} "
              f"{1e3 * pr.required:7.1f} {1e3 * margin_min[p]:14.2f} {worst_count[p]:8d} "
              f"{100 * res.pruned[:, p].mean():8.1f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=2000, help="configurations (default 2000)")
    ap.add_argument("--rows", type=int, default=15, help="rows of the per-pair table")
    args = ap.parse_args()
    rng = np.random.default_rng(7)
    q = rng.uniform(-np.pi, np.pi, (args.n, 6))
    q[:, 1] *= 0.5  # shoulder and elbow within +-90 deg: fewer folded-over self-intrusions
    q[:, 2] *= 0.5
    run("capsule links, 20 box zones", reference_cell(False), q, args.rows)
    run("~500-triangle link meshes (convex hulls), 20 box zones", reference_cell(True), q[: max(args.n // 4, 8)],
        args.rows)


if __name__ == "__main__":
    main()
