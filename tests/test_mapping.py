"""Clearance maps over a grid of TCP poses (envelope.mapping): grid, backends, resume, files, errors."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest

from envelope.cell import Target, load_cell
from envelope.check import CLEAR, INTRUSION, OUTSIDE_LIMITS, UNREACHABLE, run_check
from envelope.demo import demo_cell_path
from envelope.errors import InputError
from envelope import mapping as M

# An invented arm (the demo arm's DH table) with generated capsule links, a fence, a table and a
# keep-out pillar. The wrist capsules of a spherical wrist meet at the wrist centre by construction,
# so those self pairs are allowed. The compiled loop of envelope.margins does not support capsules:
# maps of this cell run every within-limits branch through the clearance engine.
CELL_TOML = """
name = "map test cell"
allowed_self_pairs = [["link 4", "link 6"], ["link 2", "link 4"], ["link 1", "link 4"], ["link 3", "link 5"],
                      ["link 4", "probe"]]

[arm]
convention = "standard"
capsule_radius = 50

[[arm.joints]]
a = 75
alpha = -90
d = 400
min = -170
max = 170

[[arm.joints]]
a = 420
alpha = 0
d = 0
offset = -90
min = -80
max = 145

[[arm.joints]]
a = 40
alpha = -90
d = 0
min = -120
max = 155

[[arm.joints]]
a = 0
alpha = 90
d = 440
min = -190
max = 190

[[arm.joints]]
a = 0
alpha = -90
d = 0
min = -125
max = 125

[[arm.joints]]
a = 0
alpha = 0
d = 80
min = -360
max = 360

[arm.mount]
xyz = [0, 0, 0]

[tool]
name = "probe"
shape = "capsule"
p0 = [0, 0, 0]
p1 = [0, 0, 100]
radius = 20

[tool.tcp]
xyz = [0, 0, 100]

[frames.table-top]
xyz = [300, 300, 500]

[[zones]]
name = "floor"
kind = "floor"
shape = "half-space"
point = [0, 0, 0]
normal = [0, 0, 1]
allowed = ["link 0", "link 1"]

[[zones]]
name = "east fence"
kind = "fence"
shape = "box"
min = [900, -1000, 0]
max = [940, 1000, 2000]

[[zones]]
name = "table"
kind = "fixture"
shape = "box"
min = [300, 300, 0]
max = [700, 700, 500]

[[zones]]
name = "pillar keep-out"
kind = "keep-out"
shape = "box"
min = [-500, -700, 0]
max = [-300, -500, 2000]
"""

# Offsets of 13 mm keep grid poses off the zones' round coordinates (no exact touching contacts).
REGION = [[113, 813], [-287, 413], [313, 713]]
STEP = 100
ORIENTATIONS = [[180, 0, 0], [0, 90, 0]]
CHUNK = 64


@pytest.fixture(scope="module")
def cell(tmp_path_factory):
    p = tmp_path_factory.mktemp("mapcell") / "cell.toml"
    p.write_text(CELL_TOML)
    return load_cell(p)


@pytest.fixture(scope="module")
def grid(cell):
    return M.make_grid(cell, REGION, STEP, ORIENTATIONS)


@pytest.fixture(scope="module")
def serial(cell, grid):
    return M.run_map(cell, grid, chunk_size=CHUNK)


def _same(a, b):
    for name in ("n_solutions", "n_within", "n_clear"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    np.testing.assert_array_equal(a.best_margin, b.best_margin)  # nan == nan here
    assert a.digest == b.digest


# ---------------------------------------------------------------------------- the grid
def test_grid_shape_and_poses_against_scipy(cell, grid):
    assert grid.shape == (8, 8, 5)
    assert grid.size == 8 * 8 * 5 * 2
    W = grid.world_from_tcp(0, grid.size)
    # flat order: orientation, then x, y, z (C order)
    o, ix, iy, iz = np.unravel_index(np.arange(grid.size), grid.array_shape)
    expect = np.column_stack([113 + 100 * ix, -287 + 100 * iy, 313 + 100 * iz]) * 1e-3
    np.testing.assert_allclose(W[:, :3, 3], expect, atol=1e-12)
    # fixed-xyz is scipy's extrinsic "xyz" (scipy.spatial.transform.Rotation, an independent library)
    from scipy.spatial.transform import Rotation

    R = Rotation.from_euler("xyz", np.array(ORIENTATIONS, dtype=float), degrees=True).as_matrix()
    np.testing.assert_allclose(W[:, :3, :3], R[o], atol=1e-12)


def test_named_frame_shifts_the_grid(cell):
    g = M.make_grid(cell, [[-187, -187], [-587, -387], [-187, 213]], 100, [0, 90, 0], frame="table-top")
    W = g.world_from_tcp(0, g.size)
    np.testing.assert_allclose(W[0, :3, 3], np.array([113, -287, 313]) * 1e-3, atol=1e-12)
    gw = M.make_grid(cell, [[113, 113], [-287, -87], [313, 713]], 100, [0, 90, 0])
    np.testing.assert_allclose(W, gw.world_from_tcp(0, gw.size), atol=1e-12)


def test_plane_section_and_uneven_step(cell):
    g = M.make_grid(cell, [[0, 250], [100, 100], [0, 0]], [100, 50, 10], [180, 0, 0])
    assert g.shape == (3, 1, 1)  # 0, 100, 200: the last point is the largest one <= max
    np.testing.assert_allclose(M.to_mm(g.axis(0)), [0, 100, 200])


# ---------------------------------------------------------------------------- against run_check
def _check_grid_point(cell, grid, res, i, atol):
    """The map's counts and best margin at flat index ``i`` against ``run_check`` of the same pose
    written as a target: same counts, best margin within ``atol`` (both nan: no branch within limits).
    A check row of an intrusion of unknown depth (a touched zone mesh, note "overlap, depth unknown")
    shows the engine's sentinel distance -0.0 minus the required clearance; the map records such a
    branch's margin as -inf (docs/maps.md)."""
    W = grid.world_from_tcp(i, i + 1)[0]
    one = dataclasses.replace(cell, targets=(Target("grid point", W),), programs=())
    rows = [r for r in run_check(one).rows if r.twin_of == -1]  # branches, not turn variants
    within = [r for r in rows if r.status not in (OUTSIDE_LIMITS, UNREACHABLE)]
    assert res.n_solutions.ravel()[i] == len([r for r in rows if r.status != UNREACHABLE])
    assert res.n_within.ravel()[i] == len(within)
    assert res.n_clear.ravel()[i] == len([r for r in within if r.status == CLEAR])
    unknown = lambda r: r.status == INTRUSION and "overlap, depth unknown" in r.note  # noqa: E731
    best = max((-np.inf if unknown(r) else r.margin for r in within), default=np.nan)
    got = res.best_margin.ravel()[i]
    if np.isnan(best) or np.isinf(best):
        assert got == best or (np.isnan(got) and np.isnan(best)), (i, got, best)
    else:
        assert got == pytest.approx(best, abs=atol), i


def test_grid_points_match_run_check(cell, grid, serial):
    """A grid point's counts and best margin equal the check of the same pose as a target (this cell
    runs on the engine, as run_check does: the same margin to 1e-9 m)."""
    rng = np.random.default_rng(11)
    flat_clear = np.flatnonzero(serial.n_clear.ravel() > 0)
    flat_within_not_clear = np.flatnonzero((serial.n_within.ravel() > 0) & (serial.n_clear.ravel() == 0))
    flat_none = np.flatnonzero(serial.n_within.ravel() == 0)
    assert len(flat_clear) and len(flat_within_not_clear) and len(flat_none)
    picks = [rng.choice(flat_clear), rng.choice(flat_clear), rng.choice(flat_within_not_clear), rng.choice(flat_none)]
    for i in picks:
        _check_grid_point(cell, grid, serial, i, 1e-9)


def test_demo_map_compiled_serial_and_pool_match_run_check():
    """The bundled demo cell (polytopes, half-spaces, zone meshes: the compiled loop of
    envelope.margins): a serial map and a 2-process map are identical, and grid points of every kind
    agree with run_check on the same pose (counts equal, best margin within 1e-5 m)."""
    cell = load_cell(demo_cell_path())
    g = M.make_grid(cell, [[-187, 913], [-587, 613], [113, 713]], 200, [[180, 0, 0], [0, 90, 0]])
    one_chunk = M.evaluate_chunk(cell, g, 0, g.size)
    assert one_chunk.n_configs > 0 and one_chunk.n_engine < one_chunk.n_configs  # the compiled loop ran
    serial = M.run_map(cell, g, chunk_size=48)
    pooled = M.run_map(cell, g, jobs=2, chunk_size=48)
    assert (serial.backend, pooled.backend) == ("serial", "processes-2")
    _same(serial, pooled)
    for name in ("n_solutions", "n_within", "n_clear"):  # a single chunk gives the same arrays too
        np.testing.assert_array_equal(getattr(one_chunk, name), getattr(serial, name).ravel(), err_msg=name)
    np.testing.assert_array_equal(one_chunk.best_margin, serial.best_margin.ravel())
    n_clear, n_within, best = serial.n_clear.ravel(), serial.n_within.ravel(), serial.best_margin.ravel()
    kinds = {
        "clear": np.flatnonzero(n_clear > 0),
        "below margin or intruding, depth known": np.flatnonzero((n_within > 0) & (n_clear == 0) & np.isfinite(best)),
        "intrusion of unknown depth": np.flatnonzero(np.isneginf(best)),
        "no branch within limits": np.flatnonzero(n_within == 0),
    }
    assert all(len(v) for v in kinds.values()), {k: len(v) for k, v in kinds.items()}
    rng = np.random.default_rng(4)
    picks = [int(i) for v in kinds.values() for i in rng.choice(v, min(2, len(v)), replace=False)]
    for i in picks:
        _check_grid_point(cell, g, serial, i, 1e-5)


# ---------------------------------------------------------------------------- backends
def test_process_pool_identical(cell, grid, serial):
    pooled = M.run_map(cell, grid, jobs=2, chunk_size=CHUNK)
    assert pooled.backend == "processes-2"
    _same(serial, pooled)


def test_dask_local_cluster_identical(cell, grid, serial):
    pytest.importorskip("distributed")
    dasked = M.run_map(cell, grid, jobs=2, dask="local", chunk_size=CHUNK)
    assert dasked.backend == "dask-local"
    _same(serial, dasked)


def test_chunk_size_does_not_change_results(cell, grid, serial):
    other = M.run_map(cell, grid, chunk_size=37)
    for name in ("n_solutions", "n_within", "n_clear"):
        np.testing.assert_array_equal(getattr(serial, name), getattr(other, name))
    np.testing.assert_allclose(serial.best_margin, other.best_margin, atol=1e-9, equal_nan=True)


# ---------------------------------------------------------------------------- resume
class _Stop(Exception):
    pass


def test_resume_after_interruption(cell, grid, serial, tmp_path):
    n_chunks = -(-grid.size // CHUNK)
    calls = []

    def stop_after_three(done, total, rate, eta):
        calls.append((done, total, rate, eta))
        if len(calls) == 3:
            raise _Stop

    with pytest.raises(_Stop):
        M.run_map(cell, grid, chunk_size=CHUNK, chunk_dir=tmp_path, progress=stop_after_three)
    files = sorted(tmp_path.glob("chunk-*.npz"))
    assert len(files) == 3 and not list(tmp_path.glob(".*tmp"))
    assert [c[0] for c in calls] == [CHUNK, 2 * CHUNK, 3 * CHUNK] and all(c[1] == grid.size for c in calls)
    assert all(c[2] > 0 and c[3] >= 0 for c in calls)

    resumed = M.run_map(cell, grid, chunk_size=CHUNK, chunk_dir=tmp_path)
    assert (resumed.chunks_reused, resumed.chunks_computed) == (3, n_chunks - 3)
    _same(serial, resumed)

    # a removed chunk is computed again, and only that one
    (tmp_path / "chunk-000002.npz").unlink()
    again = M.run_map(cell, grid, chunk_size=CHUNK, chunk_dir=tmp_path)
    assert (again.chunks_reused, again.chunks_computed) == (n_chunks - 1, 1)
    _same(serial, again)


def test_digest_changes_with_chunking_and_format(cell, grid, monkeypatch):
    d = M.grid_digest(cell, grid, CHUNK)
    assert d == M.grid_digest(cell, M.make_grid(cell, REGION, STEP, ORIENTATIONS), CHUNK)  # same input
    assert d != M.grid_digest(cell, grid, CHUNK + 1)
    monkeypatch.setattr(M, "FORMAT_VERSION", M.FORMAT_VERSION + 1)  # chunks of another format: not reused
    assert d != M.grid_digest(cell, grid, CHUNK)


def test_chunks_of_another_grid_are_not_reused(cell, grid, tmp_path):
    small = M.make_grid(cell, REGION, STEP, ORIENTATIONS[:1])
    M.run_map(cell, small, chunk_size=CHUNK, chunk_dir=tmp_path)
    other = M.run_map(cell, grid, chunk_size=CHUNK, chunk_dir=tmp_path)
    assert other.chunks_reused == 0
    moved = dataclasses.replace(cell, world_from_base=cell.world_from_base @ np.diag([1.0, 1.0, 1.0, 1.0]))
    same = M.run_map(moved, grid, chunk_size=CHUNK, chunk_dir=tmp_path)
    assert same.chunks_computed == 0  # the same geometry (another Cell object): every chunk reused
    lifted = np.array(cell.world_from_base)
    lifted[2, 3] += 0.01
    changed = M.run_map(dataclasses.replace(cell, world_from_base=lifted), grid, chunk_size=CHUNK, chunk_dir=tmp_path)
    assert changed.chunks_reused == 0


# ---------------------------------------------------------------------------- summary and files
def _brute_force_box(clear, idx):
    """Independent implementation: try every half-size, check every point of the box one by one."""
    best = -1
    for k in range(max(clear.shape)):
        ok = True
        for i in range(idx[0] - k, idx[0] + k + 1) if clear.shape[0] > 1 else [idx[0]]:
            for j in range(idx[1] - k, idx[1] + k + 1) if clear.shape[1] > 1 else [idx[1]]:
                for m in range(idx[2] - k, idx[2] + k + 1) if clear.shape[2] > 1 else [idx[2]]:
                    inside = 0 <= i < clear.shape[0] and 0 <= j < clear.shape[1] and 0 <= m < clear.shape[2]
                    ok = ok and inside and bool(clear[i, j, m])
        if not ok:
            break
        best = k
    return best


def test_largest_clear_box_against_brute_force():
    rng = np.random.default_rng(5)
    for trial in range(40):
        shape = tuple(int(v) for v in rng.integers(1, 9, 3))
        clear = rng.random(shape) < rng.uniform(0.6, 1.0)
        idx = tuple(int(rng.integers(0, s)) for s in shape)
        k, limit = M.largest_clear_box(clear, idx)
        assert k == _brute_force_box(clear, idx), (trial, shape, idx)
        assert (k == -1) == (limit == "the point has no clear branch")


def test_summary_fractions(serial):
    s = M.summarize(serial)
    g = serial.grid
    assert s.n_positions == 8 * 8 * 5 and s.n_orientations == 2
    for o in range(2):
        assert s.clear_fraction[o] == pytest.approx((serial.n_clear[o] > 0).sum() / s.n_positions)
        assert s.reachable_fraction[o] >= s.clear_fraction[o]
    assert s.clear_all_fraction == pytest.approx((serial.n_clear > 0).all(axis=0).mean())
    assert s.point_index == M.grid_index(g, s.point_mm)
    k, _ = M.largest_clear_box((serial.n_clear > 0).all(axis=0), s.point_index)
    assert s.box_half_steps == k
    assert s.box_half_mm == tuple(max(k, 0) * 100.0 for _ in range(3))


def test_write_map_files(cell, serial, tmp_path):
    files = M.write_map(serial, tmp_path / "out", cell=cell)
    with np.load(files.npz) as z:
        np.testing.assert_array_equal(z["n_clear"], serial.n_clear)
        np.testing.assert_allclose(z["best_margin_mm"], serial.best_margin * 1e3, equal_nan=True)
        np.testing.assert_allclose(z["x_mm"], 113 + 100 * np.arange(8))
        np.testing.assert_allclose(z["orientations_deg"], ORIENTATIONS)
        assert str(z["convention"]) == "fixed-xyz" and str(z["frame"]) == "world"
        assert str(z["digest"]) == serial.digest
    import matplotlib.image

    for png in (files.plan_png, files.elevation_png):
        img = matplotlib.image.imread(png)
        assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 200
    doc = json.loads(Path(files.summary_json).read_text())
    assert doc["summary"]["box_half_steps"] == M.summarize(serial).box_half_steps
    assert doc["grid"]["shape"] == [8, 8, 5]


def test_zone_outlines_of_a_box(cell):
    outlines = {name: poly for name, kind, poly in M.zone_outlines(cell, np.eye(4), (0, 1))}
    table = outlines["table"]
    np.testing.assert_allclose(np.sort(table[:, 0]), [0.3, 0.3, 0.7, 0.7])
    np.testing.assert_allclose(np.sort(table[:, 1]), [0.3, 0.3, 0.7, 0.7])
    side = {name: poly for name, kind, poly in M.zone_outlines(cell, np.eye(4), (0, 2))}
    floor = side["floor"]
    np.testing.assert_allclose(floor[:, 1], [0.0, 0.0])  # the floor's boundary z = 0 as a line


# ---------------------------------------------------------------------------- bad input
@pytest.mark.parametrize(
    "region, step, kwargs, match",
    [
        ([[500, 100], [0, 10], [0, 10]], 10, {}, r"region x range: min 500 mm is above max 100 mm"),
        ([[0, 100], [0, 10]], 10, {}, r"shape \(3, 2\), got shape \(2, 2\)"),
        ([[0, 100], [0, np.nan], [0, 10]], 10, {}, r"non-finite"),
        ([[0, 100], [0, 10], [0, 10]], 0, {}, r"step must be > 0 mm, got 0 mm for x"),
        ([[0, 100], [0, 10], [0, 10]], [10, -5, 10], {}, r"step must be > 0 mm, got -5 mm for y"),
        ([[0, 100], [0, 10], [0, 10]], [10, 10], {}, r"one value or 3 values"),
        ([[0, 1000], [0, 1000], [0, 1000]], 1, {}, r"1003003001 poses .* more than the limit"),
        ([[0, 100], [0, 10], [0, 10]], 10, {"frame": "mezzanine"}, r"unknown frame 'mezzanine'.*table-top"),
        ([[0, 100], [0, 10], [0, 10]], 10, {"convention": "fixed-xxy"}, r"unknown Euler convention"),
        ([[0, 100], [0, 10], [0, 10]], 10, {"orientations_deg": [[0, 90]]}, r"triples of Euler angles"),
    ],
)
def test_bad_grid_input(cell, region, step, kwargs, match):
    with pytest.raises(InputError, match=match):
        M.make_grid(cell, region, step, **kwargs)


def test_too_many_points_limit_is_a_parameter(cell):
    with pytest.raises(InputError, match=r"121 poses \(11 x 11 x 1 positions x 1 orientations\).* limit of 100"):
        M.make_grid(cell, [[0, 100], [0, 100], [0, 0]], 10, max_points=100)


def test_parse_region_and_orientations():
    np.testing.assert_allclose(M.parse_region("0:100, -50:50, 700"), [[0, 100], [-50, 50], [700, 700]])
    np.testing.assert_allclose(M.parse_orientations("180,0,0; 0,90,0"), [[180, 0, 0], [0, 90, 0]])
    with pytest.raises(InputError, match=r"3 comma-separated ranges"):
        M.parse_region("0:100,0:100")
    with pytest.raises(InputError, match=r"region y range must be min:max in mm, got 'a:b'"):
        M.parse_region("0:1,a:b,0:1")
    with pytest.raises(InputError, match=r"3 comma-separated Euler angles"):
        M.parse_orientations("180,0")
    assert M.parse_step("25") == 25.0
    np.testing.assert_allclose(M.parse_step("25, 25,50"), [25, 25, 50])
    with pytest.raises(InputError, match=r"one number or 3 comma-separated numbers"):
        M.parse_step("25,25")
    np.testing.assert_allclose(M.parse_point("400, 0, 700"), [400, 0, 700])
    with pytest.raises(InputError, match=r"3 comma-separated numbers x, y, z"):
        M.parse_point("400,0")


def test_box_centre_must_be_a_grid_point(grid):
    assert M.grid_index(grid, [213, -187, 413]) == (1, 1, 1)
    with pytest.raises(InputError, match=r"not a grid point; the nearest grid point is \[213.0, -187.0, 413.0\]"):
        M.grid_index(grid, [210, -187, 413])


def test_bad_run_arguments(cell, grid):
    with pytest.raises(InputError, match="chunk size must be >= 1"):
        M.run_map(cell, grid, chunk_size=0)
    with pytest.raises(InputError, match="jobs must be >= 1"):
        M.run_map(cell, grid, jobs=0)
