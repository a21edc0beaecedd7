"""Write the demo cell's mesh files (STL) into this folder, from trimesh primitives.

    python meshes/make_demo_meshes.py

The demo arm is invented (no real model): an ortho-parallel six-axis arm with a spherical wrist whose
DH table is in envelope/demo/cell.toml (standard DH, mm): a = 75, 420, 40, 0, 0, 0;
alpha = -90, 0, -90, 90, -90, 0 deg; d = 400, 0, 0, 440, 0, 80; offset of joint 2 = -90 deg.

Each link mesh is the convex hull of a few cylinders laid out along the arm in its zero pose, then
expressed in the link's own DH frame (metres: the cell file loads them with ``mesh_units = "m"``).
The cell parts (machine with a door opening, outfeed chute) are in millimetres, in the cell frame.
The output is deterministic: running the script again rewrites identical files.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import trimesh

from envelope.kinematics import Arm

HERE = Path(__file__).resolve().parent

DEMO_ARM = dict(
    a=[0.075, 0.42, 0.04, 0.0, 0.0, 0.0],
    alpha=np.radians([-90, 0, -90, 90, -90, 0]),
    d=[0.4, 0.0, 0.0, 0.44, 0.0, 0.08],
    offset=np.radians([0, -90, 0, 0, 0, 0]),
)
"""The demo arm's DH table (metres, radians); must match envelope/demo/cell.toml."""

SECTIONS = 40
"""Facets around each cylinder: the hulls come out at a few hundred triangles each."""


def _cylinder(p0, p1, radius):
    """Vertices of a cylinder between points p0 and p1 (metres)."""
    segment = np.stack([np.asarray(p0, float), np.asarray(p1, float)])
    cyl = trimesh.creation.cylinder(radius=radius, segment=segment, sections=SECTIONS)
    return np.asarray(cyl.vertices)


def _hull(*vertex_sets) -> trimesh.Trimesh:
    return trimesh.convex.convex_hull(np.vstack(vertex_sets))


def arm_link_meshes() -> dict:
    """``{link index: Trimesh in that link's DH frame}`` for links 0..6."""
    arm = Arm.from_dh(DEMO_ARM["a"], DEMO_ARM["alpha"], DEMO_ARM["d"], DEMO_ARM["offset"])
    base_from_frame = arm.frames(np.zeros(6))
    # Layout in the base frame at the zero pose: upper arm vertical, forearm pointing along +x.
    shoulder = np.array([0.075, 0.0, 0.40])
    elbow = np.array([0.075, 0.0, 0.82])
    forearm = np.array([0.075, 0.0, 0.86])
    wrist = np.array([0.515, 0.0, 0.86])
    flange = np.array([0.595, 0.0, 0.86])
    y = np.array([0.0, 1.0, 0.0])
    x = np.array([1.0, 0.0, 0.0])
    in_base = {
        0: _hull(_cylinder([0, 0, 0], [0, 0, 0.22], 0.16)),
        1: _hull(_cylinder([0, 0, 0.22], [0, 0, 0.34], 0.14),
                 _cylinder(shoulder - 0.12 * y, shoulder + 0.12 * y, 0.11)),
        2: _hull(_cylinder(shoulder - 0.10 * y, shoulder + 0.10 * y, 0.10),
                 _cylinder(elbow - 0.09 * y, elbow + 0.09 * y, 0.085)),
        3: _hull(_cylinder(elbow - 0.08 * y, elbow + 0.08 * y, 0.08), _cylinder(forearm, forearm + 0.17 * x, 0.075)),
        # the forearm tapers off 90 mm before the wrist centre; the joint 5 fork is a slim cylinder, so
        # that the flange and tool clear it when the wrist bends
        4: _hull(_cylinder(forearm + 0.17 * x, wrist - 0.09 * x, 0.055),
                 _cylinder(wrist - 0.06 * y, wrist + 0.06 * y, 0.042)),
        5: _hull(_cylinder(wrist - 0.045 * y, wrist + 0.045 * y, 0.04), _cylinder(wrist, wrist + 0.06 * x, 0.04)),
        6: _hull(_cylinder(flange - 0.008 * x, flange, 0.04)),
    }
    out = {}
    for i, mesh in in_base.items():
        frame_from_base = np.linalg.inv(base_from_frame[i])
        m = mesh.copy()
        m.apply_transform(frame_from_base)
        out[i] = m
    return out


def gripper_mesh() -> trimesh.Trimesh:
    """The gripper in the flange frame (metres): adapter, palm and two fingers ending at z = 150 mm."""
    adapter = trimesh.creation.cylinder(radius=0.045, height=0.06, sections=SECTIONS)
    adapter.apply_translation([0, 0, 0.03])
    palm = trimesh.creation.box(extents=[0.12, 0.05, 0.04])
    palm.apply_translation([0, 0, 0.08])
    fingers = []
    for sx in (-1, 1):
        f = trimesh.creation.box(extents=[0.015, 0.03, 0.05])
        f.apply_translation([sx * 0.0425, 0, 0.125])
        fingers.append(f)
    return trimesh.util.concatenate([adapter, palm] + fingers)


def _grid_solid(xs, ys, zs, empty) -> trimesh.Trimesh:
    """A watertight mesh of the union of grid cells ``[xs[i], xs[i+1]] x ...`` except the ``empty`` ones.

    Faces are written between a solid cell and an empty cell or the outside; cells share grid edges,
    so the result is closed (no booleans needed).
    """
    nx, ny, nz = len(xs) - 1, len(ys) - 1, len(zs) - 1
    solid = np.ones((nx, ny, nz), bool)
    for idx in empty:
        solid[idx] = False
    grids = (np.asarray(xs, float), np.asarray(ys, float), np.asarray(zs, float))
    verts, faces = [], []

    def filled(i, j, k):
        return 0 <= i < nx and 0 <= j < ny and 0 <= k < nz and solid[i, j, k]

    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                if not solid[i, j, k]:
                    continue
                cell = (i, j, k)
                for axis in range(3):
                    for side in (0, 1):
                        nb = list(cell)
                        nb[axis] += 1 if side else -1
                        if filled(*nb):
                            continue
                        lo = [grids[a][cell[a]] for a in range(3)]
                        hi = [grids[a][cell[a] + 1] for a in range(3)]
                        u, v = [a for a in range(3) if a != axis]
                        quad = []
                        for cu, cv in ((0, 0), (1, 0), (1, 1), (0, 1)):
                            p = [0.0, 0.0, 0.0]
                            p[axis] = hi[axis] if side else lo[axis]
                            p[u] = hi[u] if cu else lo[u]
                            p[v] = hi[v] if cv else lo[v]
                            quad.append(p)
                        # corners run u then v, so the face normal is e_u x e_v: +e_axis when (axis, u, v)
                        # is cyclic; flip where that is not the outward side
                        if (axis == 1) == bool(side):
                            quad = quad[::-1]
                        base = len(verts)
                        verts.extend(quad)
                        faces.extend([[base, base + 1, base + 2], [base, base + 2, base + 3]])
    return trimesh.Trimesh(np.array(verts), np.array(faces), process=True)


def machine_mesh() -> trimesh.Trimesh:
    """The machine (mm, cell frame): a 1200 x 1300 x 2000 block whose front face (x = 700) has a
    600 x 500 door opening into a 600 deep cavity (y -300..300, z 800..1300)."""
    xs = [700, 1300, 1900]
    ys = [-650, -300, 300, 650]
    zs = [0, 800, 1300, 2000]
    return _grid_solid(xs, ys, zs, empty=[(0, 1, 1)])


def chute_mesh() -> trimesh.Trimesh:
    """The outfeed chute (mm, cell frame): a slab whose top falls from z 750 at y -350 to z 500 at y -900."""
    pts = []
    for x in (200.0, 550.0):
        pts += [[x, -350.0, 750.0], [x, -900.0, 500.0], [x, -350.0, 450.0], [x, -900.0, 200.0]]
    return trimesh.convex.convex_hull(np.array(pts))


def write_all(folder: Path = HERE) -> list:
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for i, mesh in arm_link_meshes().items():
        written.append(folder / f"demo-link{i}.stl")
        mesh.export(written[-1])
    for name, mesh in (("demo-gripper", gripper_mesh()), ("demo-machine", machine_mesh()),
                       ("demo-chute", chute_mesh())):
        written.append(folder / f"{name}.stl")
        mesh.export(written[-1])
    return written


if __name__ == "__main__":
    for path in write_all():
        m = trimesh.load_mesh(path)
        print(f"{path.name}: {len(m.faces)} triangles, watertight={m.is_watertight}")
