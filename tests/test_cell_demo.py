"""The bundled demo cell and the starter cell of ``envelope init``."""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest
import trimesh
from scipy.spatial import Delaunay

from envelope.cell import load_cell
from envelope.demo import demo_cell_path
from envelope.errors import InputError
from envelope.geometry import ZONE_KINDS, Convex, TriMesh
from envelope.starter import write_starter

REPO = Path(__file__).resolve().parents[1]


def winding_number(vertices, faces, point) -> float:
    """Winding number of a closed triangle mesh about ``point``: 1 inside, 0 outside.

    The sum of the solid angles of its triangles seen from the point over 4 pi, each solid angle by
    the formula of Van Oosterom and Strackee (IEEE Trans. Biomed. Eng. 30(2), 1983): independent of
    trimesh's ray test.
    """
    t = np.asarray(vertices, dtype=np.float64)[np.asarray(faces)] - np.asarray(point, dtype=np.float64)
    a, b, c = t[:, 0], t[:, 1], t[:, 2]
    la, lb, lc = (np.linalg.norm(x, axis=1) for x in (a, b, c))
    num = np.einsum("ij,ij->i", a, np.cross(b, c))
    den = la * lb * lc + np.einsum("ij,ij->i", a, b) * lc + np.einsum("ij,ij->i", a, c) * lb \
        + np.einsum("ij,ij->i", b, c) * la
    return float(np.sum(2 * np.arctan2(num, den)) / (4 * np.pi))


@pytest.fixture(scope="module")
def demo():
    return load_cell(demo_cell_path())


def test_demo_loads_cleanly_from_another_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    cell = load_cell(demo_cell_path())
    assert cell.warnings == ()
    assert [b.name for b in cell.bodies] == [f"link {i}" for i in range(7)] + ["gripper", "part"]
    assert {z.kind for z in cell.zones} <= set(ZONE_KINDS)
    names = {z.name for z in cell.zones}
    assert {"floor", "pedestal", "north fence", "south fence", "fence door", "machine", "infeed table", "outfeed chute",
            "operator keep-out", "load station", "cabinet"} <= names
    # every file read is recorded: the cell, the CSV and the ten meshes
    assert len(cell.inputs) == 12 and all(len(sha) == 64 for _, sha in cell.inputs)


def test_demo_arm_is_an_ortho_parallel_arm_with_about_a_metre_of_reach(demo):
    arm = demo.arm
    # spherical wrist: axes 4, 5, 6 meet in one point (a4 = a5 = d5 = 0), so frames 4 and 5 share an origin
    rng = np.random.default_rng(3)
    for q in rng.uniform(-1, 1, (5, 6)):
        F = arm.frames(q)
        np.testing.assert_allclose(F[4][:3, 3], F[5][:3, 3], atol=1e-12)
    # horizontal reach from axis 1 to the wrist centre at full stretch: a1 + a2 + hypot(a3, d4)
    # (geometry of the ortho-parallel arm, common practice, no source), about 0.9 m
    reach = arm.a[0] + arm.a[1] + math.hypot(arm.a[2], arm.d[3])
    assert 0.85 < reach < 1.0
    assert arm.limits[5].tolist() == pytest.approx([-2 * math.pi, 2 * math.pi])
    np.testing.assert_allclose(demo.tool.flange_from_tcp[:3, 3], [0, 0, 0.15])
    np.testing.assert_allclose(demo.world_from_base[:3, :3], np.eye(3))  # floor mount: base z up
    np.testing.assert_allclose(demo.world_from_base[:3, 3], [0, 0, 0.4])  # on the 400 mm pedestal


def test_demo_link_meshes_follow_the_dh_links(demo):
    # at the zero pose, each link's hull (scipy's Delaunay point location) holds the midpoint of the
    # segment between the DH frame origins that link spans
    F = demo.arm.frames(np.zeros(6))
    for i in (2, 3, 4, 5):
        link = demo.links[i]
        assert isinstance(link.shapes[0], Convex) and link.padding == pytest.approx(0.005)
        world = link.shapes[0].vertices @ F[i][:3, :3].T + F[i][:3, 3]
        mid = (F[i - 1][:3, 3] + F[i][:3, 3]) / 2
        assert Delaunay(world).find_simplex(mid) >= 0, f"link {i}"


def test_demo_meshes_are_what_the_script_makes(tmp_path):
    spec = importlib.util.spec_from_file_location("make_demo_meshes", REPO / "meshes" / "make_demo_meshes.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    written = module.write_all(tmp_path)
    shipped = demo_cell_path().parent / "meshes"
    for path in written:
        assert path.read_bytes() == (shipped / path.name).read_bytes(), path.name
        mesh = trimesh.load_mesh(path)
        assert mesh.is_watertight, path.name
        if path.name.startswith("demo-link"):
            assert 100 <= len(mesh.faces) <= 600, path.name
    # the machine: a 1.2 x 1.3 x 2.0 m block with a 0.6 x 0.6 x 0.5 m cavity behind its door (mm^3)
    machine = trimesh.load_mesh(tmp_path / "demo-machine.stl")
    assert machine.volume == pytest.approx(1200 * 1300 * 2000 - 600 * 600 * 500)
    assert winding_number(machine.vertices, machine.faces, [1000, 0, 1050]) == pytest.approx(0.0, abs=1e-9)
    assert winding_number(machine.vertices, machine.faces, [1600, 0, 1050]) == pytest.approx(1.0)  # behind it


def test_demo_zone_meshes_are_watertight_solids(demo):
    for z in demo.zones:
        for s in z.shapes:
            if isinstance(s, TriMesh):
                assert s.watertight, z.name


def test_demo_targets_and_program(demo):
    names = [t.name for t in demo.targets]
    for intent in ("infeed-pick", "machine-load", "near-fence", "into-cabinet", "limit-blocked", "out-of-reach",
                   "wrist-flip", "outfeed-drop"):
        assert intent in names
    # "into-cabinet" puts the TCP inside the cabinet box (the intrusion the demo is meant to show)
    cabinet = next(z for z in demo.zones if z.name == "cabinet").shapes[0]
    tcp = demo.target("into-cabinet").world_from_tcp[:3, 3]
    local = np.linalg.solve(cabinet.pose, np.r_[tcp, 1.0])[:3]
    assert (np.abs(local) < cabinet.extents / 2).all()
    (program,) = demo.programs
    assert all(m.to in names for m in program.moves)
    assert {m.motion for m in program.moves} == {"joint", "linear"}


# ---------------------------------------------------------------------- starter
def test_starter_writes_a_cell_that_loads(tmp_path):
    paths = write_starter(tmp_path / "new cell")
    assert [p.name for p in paths] == ["cell.toml", "targets.csv"]
    cell = load_cell(paths[0])
    assert cell.warnings == ()
    assert {t.name for t in cell.targets} == {"table-pick", "table-approach", "side-place"}
    assert cell.settings["generated_links"] == tuple(f"link {i}" for i in range(7))
    assert cell.programs[0].name == "pick-cycle"


def test_starter_refuses_to_overwrite(tmp_path):
    (tmp_path / "targets.csv").write_text("mine\n")
    with pytest.raises(InputError, match=r"targets\.csv: envelope init: already exists: will not overwrite"):
        write_starter(tmp_path)
    assert not (tmp_path / "cell.toml").exists()
    assert (tmp_path / "targets.csv").read_text() == "mine\n"
    with pytest.raises(InputError, match=r"is a file, not a folder"):
        write_starter(tmp_path / "targets.csv")
