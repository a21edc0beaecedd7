"""The space check: spaces, fence panels, keep-out zones, devices and suggested axis limits.

The invented cell tests/data/space-cell.toml: the minimal test arm (capsules) 100 mm above the floor,
a 1600 mm fence along y = 1900 mm, a keep-out box east of the arm and two targets to the south.
Over the mechanical limits the restricted space reaches over the fence; a suggestion must fix that.
"""

from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path

import numpy as np
import pytest

from envelope.cell import load_cell
from envelope.check import run_check
from envelope.errors import InputError
from envelope.spacecheck import (
    CRUSHING_CSV_COLUMNS,
    FENCES_CSV_COLUMNS,
    crushing_csv_text,
    fences_csv_text,
    panel_distance_ok,
    run_space_check,
    space_summary,
    suggest_axis_limits,
    write_space_outputs,
)
from envelope.units import to_mm

DATA = Path(__file__).parent / "data"
CELL_FILE = DATA / "space-cell.toml"
PITCH = 0.04

DEVICE = """
[[devices]]
name = "south curtain"
kind = "perpendicular"
response_time = 0.02
stopping_time = 0.3
detection_capability = 30
points = [[-2500, -1700], [2500, -1700]]
"""


@pytest.fixture(scope="module")
def cell():
    return load_cell(CELL_FILE)


@pytest.fixture(scope="module")
def check(cell):
    return run_check(cell)


@pytest.fixture(scope="module")
def sc(cell, check):
    return run_space_check(cell, result=check, pitch=PITCH)


def _soft_cell(tmp_path: Path, limits_rad) -> Path:
    """The test cell with soft limits on joints 1..3 from ``limits_rad`` (written in degrees)."""
    text = CELL_FILE.read_text()
    blocks = text.split("[[arm.joints]]\n")
    deg = np.degrees(np.asarray(limits_rad))
    for j in range(3):
        blocks[j + 1] = blocks[j + 1].replace("max = ", f"soft_min = {float(deg[j, 0])!r}\nsoft_max = {float(deg[j, 1])!r}\nmax = ", 1)
    path = tmp_path / "soft-cell.toml"
    path.write_text("[[arm.joints]]\n".join(blocks))
    return path


# ---------------------------------------------------------------------- the check over mechanical limits
def test_mechanical_limits_reach_over_the_fence(sc):
    assert sc.limits_source == "mechanical limits" and sc.risk == "high"
    (panel,) = sc.panels
    assert panel.verdict == "fail" and not panel_distance_ok(panel)
    # the fence is 1900 mm from the base; the arm reaches about 1.2 m: ISO 13857 high risk, b = 1600,
    # c = 900 mm for hazard heights 1000..2200 mm (envelope.standards, confidence U: from memory)
    assert panel.c_mm == 900.0 and panel.margin_mm < 0
    assert "below margin" in sc.findings() and not sc.passes
    np.testing.assert_array_equal(sc.restricted.limits, np.asarray(sc.maximum.limits))
    assert sc.restricted.allowance == pytest.approx(0.05)


def test_keepout_distance_is_a_lower_bound_of_the_exact_cube_distance(sc, cell):
    (ko,) = sc.keepouts
    zone = next(z for z in cell.zones if z.name == "east keep-out")
    box = zone.shapes[0]
    lo = box.pose[:3, 3] - 0.5 * box.extents
    hi = box.pose[:3, 3] + 0.5 * box.extents
    space = sc.restricted
    cubes_lo = space.voxel_centers(space.marked_indices()) - 0.5 * space.pitch
    cubes_hi = cubes_lo + space.pitch
    # distance between axis-aligned boxes: the norm of the per-axis gaps (handbook formula)
    gap = np.maximum(np.maximum(lo - cubes_hi, cubes_lo - hi), 0.0)
    exact = float(np.sqrt((gap ** 2).sum(axis=1)).min())
    assert ko.distance_mm <= float(to_mm(exact)) + 1e-9
    assert ko.distance_mm >= float(to_mm(exact - space.half_diagonal)) - 1e-9
    assert ko.passes == (ko.distance_mm >= 50.0)


def test_operating_space_holds_the_used_configurations(sc, check, cell):
    op = sc.operating
    used = [r for r in check.rows if r.status not in ("outside limits", "unreachable") and r.twin_of < 0]  # no soft limits here
    assert sc.operating_count == len(used) > 0
    Q = np.array([r.q for r in used])
    frames = np.asarray(cell.world_from_base) @ cell.arm.frames(Q)  # (n, 7, 4, 4)
    origins = frames[:, 1:, :3, 3].reshape(-1, 3)  # on the generated capsules of links 1..6
    assert op.contains(origins).all()
    assert op.occupancy.sum() < sc.restricted.occupancy.sum()


# ---------------------------------------------------------------------- the suggestion
def test_a_suggestion_is_found_and_names_its_distances(sc):
    sug = sc.suggestion
    assert sug.found and sug.verified and sug.blocking_targets == ()
    assert 1 in sug.joints
    assert {t for t, _ in sug.branches} == {"south-west", "south"}
    # the arm must not point north (towards the fence, azimuth 90 deg): joint 1 stays below it
    assert math.degrees(sug.limits[0, 1]) < 90.0
    assert all(panel_distance_ok(v) for v in sug.panels) and all(k.passes for k in sug.keepouts)
    assert "north fence/panel 1" in sug.reason and "set joint 1" in sug.reason
    # on the 5 degree grid
    steps = np.degrees(sug.limits[list(j - 1 for j in sug.joints)]) / 5.0
    np.testing.assert_allclose(steps, np.round(steps), atol=1e-9)


def test_the_suggestion_verified_by_rerunning_with_those_soft_limits(sc, tmp_path):
    soft_cell = load_cell(_soft_cell(tmp_path, sc.suggestion.limits))
    np.testing.assert_allclose(soft_cell.settings["soft_limits"], sc.suggestion.limits, atol=1e-12)
    check2 = run_check(soft_cell)
    soft = soft_cell.settings["soft_limits"]
    for target in ("south-west", "south"):
        ok = [r for r in check2.rows if r.target == target and r.status == "clear"
              and np.all((r.q >= soft[:, 0] - 1e-9) & (r.q <= soft[:, 1] + 1e-9))]
        assert ok, target
    sc2 = run_space_check(soft_cell, result=check2, pitch=PITCH, suggest=False)
    assert sc2.limits_source == "soft limits"
    assert [v.verdict for v in sc2.panels] == ["pass"]
    assert all(k.passes for k in sc2.keepouts)
    assert sc2.passes and sc2.findings() == []


def test_no_suggestion_names_the_target_that_prevents_it(tmp_path):
    # a target due north (towards the fence): its only clear branches have q1 = 90 deg, where the
    # restricted space reaches over the fence whatever joints 2 and 3 do
    path = tmp_path / "north.toml"
    path.write_text(CELL_FILE.read_text() + '\n[[targets]]\nname = "north"\nxyz = [0, 800, 500]\neuler = [180, 0, 0]\n')
    cell = load_cell(path)
    check = run_check(cell)
    assert any(r.target == "north" and r.status == "clear" for r in check.rows)
    sug = suggest_axis_limits(cell, check, pitch=0.06)  # a coarser search: none is found either way
    assert not sug.found and sug.limits is None
    assert sug.blocking_targets == ("north",)
    assert "target 'north'" in sug.reason and "north fence/panel 1" in sug.reason


def test_a_target_without_a_clear_branch_prevents_a_suggestion(tmp_path):
    path = tmp_path / "far.toml"
    path.write_text(CELL_FILE.read_text() + '\n[[targets]]\nname = "far"\nxyz = [3000, 0, 500]\n')
    cell = load_cell(path)
    sug = suggest_axis_limits(cell, run_check(cell), pitch=PITCH)
    assert not sug.found and sug.blocking_targets == ("far",)
    assert "have no clear branch" in sug.reason


# ---------------------------------------------------------------------- devices
def test_device_distance_and_iso13855_minimum(tmp_path):
    path = tmp_path / "device.toml"
    path.write_text(CELL_FILE.read_text() + DEVICE)
    cell = load_cell(path)
    sc = run_space_check(cell, pitch=0.06, suggest=False)
    (dev,) = sc.devices
    # ISO 13855:2010 perpendicular approach, d <= 40 mm: S = 2000 T + 8 (d - 14) = 768 mm > 500, so
    # S = 1600 T + 8 (d - 14) = 1600 * 0.32 + 128 = 640 mm (formula from the standard, via [S6])
    assert dev.check.required.S_mm == pytest.approx(640.0, abs=1e-9)
    # the restricted space's mesh is the union of its cubes: its distance from the vertical plane
    # y = -1.7 m is attained at a mesh vertex (independent of the column bound used by the check)
    ys = np.asarray(sc.restricted.mesh.vertices)[:, 1]
    exact_mm = float(to_mm(ys.min() + 1.7))
    assert dev.distance_mm <= exact_mm + 1e-6
    assert dev.distance_mm >= exact_mm - float(to_mm(sc.restricted.pitch)) / math.sqrt(2.0) - 1e-6
    assert dev.passes == (dev.distance_mm >= 640.0)
    assert sc.passes is False  # the fence still fails over the mechanical limits


# ---------------------------------------------------------------------- summary and files
def test_summary_is_json_ready_in_mm_and_deterministic(sc):
    a = space_summary(sc)
    b = space_summary(sc)
    assert json.dumps(a, sort_keys=True) == json.dumps(b, sort_keys=True)
    assert list(a) == sorted(a)
    np.testing.assert_allclose(a["spaces"]["restricted"]["bounds_mm"], to_mm(sc.restricted.bounds), atol=1e-3)
    assert a["pitch_mm"] == 40.0 and a["risk"] == "high" and a["passes"] is False
    assert a["panels"][0]["confidence"] == "U" and a["panels"][0]["verdict"] == "fail"
    assert a["suggestion"]["found"] is True
    assert "from memory and unverified" in a["caution"]


def test_a_rerun_gives_the_same_summary(cell, check):
    one = run_space_check(cell, result=check, pitch=0.08, suggest=False)
    two = run_space_check(cell, result=check, pitch=0.08, suggest=False)
    assert json.dumps(space_summary(one), sort_keys=True) == json.dumps(space_summary(two), sort_keys=True)


def test_written_files(sc, tmp_path):
    trimesh = pytest.importorskip("trimesh")
    files = write_space_outputs(sc, tmp_path)
    for kind in ("maximum", "restricted", "operating"):
        mesh = trimesh.load(files[f"{kind}-space.stl"], force="mesh")
        assert len(mesh.faces) == len(getattr(sc, kind).mesh.faces)
        np.testing.assert_allclose(mesh.bounds, to_mm(getattr(sc, kind).bounds), atol=1e-3)  # files in mm
        assert files[f"{kind}-space.glb"].stat().st_size > 0
    rows = list(csv.reader(io.StringIO(fences_csv_text(sc))))
    assert tuple(rows[0]) == FENCES_CSV_COLUMNS and len(rows) == 1 + len(sc.panels)
    assert rows[1][FENCES_CSV_COLUMNS.index("verdict")] == "fail"
    assert tuple(next(csv.reader(io.StringIO(crushing_csv_text(sc))))) == CRUSHING_CSV_COLUMNS
    assert json.loads(files["space.json"].read_text()) == space_summary(sc)
    assert not list(tmp_path.glob(".*.tmp"))


# ---------------------------------------------------------------------- bad input
def test_bad_arguments(cell, check):
    with pytest.raises(InputError, match=r"risk: expected risk 'high' or 'low', got 'medium'"):
        run_space_check(cell, risk="medium", pitch=0.1, suggest=False)
    other = load_cell(CELL_FILE)
    with pytest.raises(InputError, match=r"result: the check result is of another cell object"):
        run_space_check(other, result=check, pitch=0.1)
    with pytest.raises(InputError, match=r"configurations: expected configurations of shape \(n, 6\), got \(2, 5\)"):
        run_space_check(cell, configurations=np.zeros((2, 5)), pitch=0.1, suggest=False)
    with pytest.raises(InputError, match=r"pitch"):
        run_space_check(cell, pitch=-1.0, suggest=False)


def test_without_a_check_there_is_no_suggestion_but_extra_configurations_count(cell):
    sc = run_space_check(cell, pitch=0.1, configurations=np.zeros(6), grow=0.01)
    assert not sc.suggestion.found and "no check result" in sc.suggestion.reason
    assert sc.operating_count == 1 and sc.operating is not None
