"""Layout studies: clearance maps over a grid of TCP poses.

A map evaluates every TCP position of a regular 3-D grid (or a plane section: one axis with a single
value) at one or more tool orientations. For every grid pose it records

- ``n_solutions``: the IK branches that exist (closed-form slots, turn variants not counted),
- ``n_within``: those within every joint limit,
- ``n_clear``: those within limits whose every non-allowed pair is clear (status ``clear``),
- ``best_margin``: the best over within-limits branches of the worst pair's margin (certified
  clearance minus required clearance, metres; >= 0 means that branch is clear; ``-inf`` for an
  intrusion of unknown depth; ``nan`` where no branch is within limits).

The grid is cut into chunks of consecutive flat indices; ``evaluate_chunk(cell, grid, start, stop)``
is a pure function of its arguments, so the same code runs serially, in a local process pool
(``jobs=N``) or on a Dask cluster (``dask="ADDRESS"`` or ``"local"``), and every backend gives the
same arrays. Finished chunks can be written to a chunk folder (atomically: a temporary file, then
``os.replace``); a later run with the same grid and cell skips them (resume).

Flat order: ``index = ((o * nx + ix) * ny + iy) * nz + iz`` for orientation ``o`` and grid indices
``ix, iy, iz``; arrays are shaped ``(n_orientations, nx, ny, nz)``.

Geometry (python-fcl objects do not pickle) is built once per process: ``_engine`` keeps one
``ClearanceEngine`` per cell fingerprint (a SHA-256 of the cell's geometry and limits), so a Dask
worker that receives a fresh copy of the cell with every task still builds it only once.

Every within-limits branch gets the clearance engine's worst margin and status (docs/maps.md):
computed by the compiled loop of ``envelope.margins`` for cells of polytopes, half-spaces and zone
meshes, by the engine itself for other cells and for the configurations the loop flags.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
import time
from dataclasses import dataclass, field, fields, is_dataclass
from pathlib import Path

import numpy as np

from .errors import InputError
from .poses import parse_convention, rotation_from_euler
from .units import to_degrees, to_metres, to_mm, to_radians

MAX_POINTS = 50_000_000
"""Default limit on the number of grid poses (positions x orientations) of one map."""
DEFAULT_CHUNK = 2048
"""Default poses per chunk."""
FORMAT_VERSION = 2
"""Version of the chunk and map file layout and of how chunk results are computed (part of the grid
digest). 2: one method (the removed ``method="fast"`` option was part of the digest in version 1)."""

AXES = ("x", "y", "z")


# ============================================================================ the grid
@dataclass(frozen=True, eq=False)
class MapGrid:
    """A validated grid of TCP poses (metres and radians inside; built by ``make_grid``).

    Attributes
    ----------
    origin : (3,) float
        The first grid point (the region's lower corner) in ``frame``, m.
    step : (3,) float
        Grid spacing per axis, m (an axis with one point keeps the step it was given).
    shape : (3,) tuple of int
        Points per axis ``(nx, ny, nz)``.
    angles : (k, 3) float
        Tool orientations as Euler angles (rad) in ``convention``, in ``frame``.
    convention : str
    frame : str
        The frame the region and orientations are given in (``"world"`` is the cell frame).
    world_from_frame : (4, 4) float
    region : (3, 2) float
        The region as given (m): per axis ``min, max``. The last grid point of an axis is the
        largest ``min + i * step`` that is <= ``max`` (+1e-9 m).
    """

    origin: np.ndarray
    step: np.ndarray
    shape: tuple
    angles: np.ndarray
    convention: str
    frame: str
    world_from_frame: np.ndarray
    region: np.ndarray
    _rot: np.ndarray = field(default=None, repr=False)

    @property
    def n_positions(self) -> int:
        return int(np.prod(self.shape))

    @property
    def n_orientations(self) -> int:
        return int(len(self.angles))

    @property
    def size(self) -> int:
        """Number of grid poses: positions x orientations."""
        return self.n_positions * self.n_orientations

    @property
    def array_shape(self) -> tuple:
        """``(n_orientations, nx, ny, nz)``."""
        return (self.n_orientations,) + tuple(self.shape)

    def axis(self, i: int) -> np.ndarray:
        """Coordinates (m, in ``frame``) of the grid points along axis ``i`` (0 x, 1 y, 2 z)."""
        return self.origin[i] + self.step[i] * np.arange(self.shape[i])

    def world_from_tcp(self, start: int, stop: int) -> np.ndarray:
        """``(stop - start, 4, 4)`` TCP poses in the cell frame of flat indices ``start..stop-1``."""
        idx = np.arange(start, stop)
        o, p = np.divmod(idx, self.n_positions)
        ijk = np.stack(np.unravel_index(p, self.shape), axis=-1)
        frame_from_tcp = np.zeros((len(idx), 4, 4))
        frame_from_tcp[:, :3, :3] = self._rot[o]
        frame_from_tcp[:, :3, 3] = self.origin + ijk * self.step
        frame_from_tcp[:, 3, 3] = 1.0
        return self.world_from_frame @ frame_from_tcp

    def describe(self) -> dict:
        """The grid definition in file units (mm, degrees), JSON-ready."""
        return {
            "frame": self.frame,
            "convention": self.convention,
            "region_mm": np.round(to_mm(self.region), 9).tolist(),
            "step_mm": np.round(to_mm(self.step), 9).tolist(),
            "shape": [int(s) for s in self.shape],
            "origin_mm": np.round(to_mm(self.origin), 9).tolist(),
            "orientations_deg": np.round(to_degrees(self.angles), 9).tolist(),
            "world_from_frame": np.round(self.world_from_frame, 12).tolist(),
        }


def make_grid(cell, region_mm, step_mm, orientations_deg=((180.0, 0.0, 0.0),), *, convention: str = "fixed-xyz",
              frame: str = "world", max_points: int = MAX_POINTS) -> MapGrid:
    """A validated ``MapGrid`` from file units.

    Parameters
    ----------
    cell : Cell
        Supplies the named frames.
    region_mm : (3, 2) array_like
        ``[[x_min, x_max], [y_min, y_max], [z_min, z_max]]`` in mm, in ``frame``. ``min == max`` gives
        a single layer (a plane section).
    step_mm : float or (3,) array_like
        Grid spacing in mm, > 0.
    orientations_deg : (3,) or (k, 3) array_like
        Tool orientations, Euler angles in degrees in ``convention`` (default: tool pointing down
        with the fixed-xyz convention, ``[180, 0, 0]``).
    convention : str
        Euler convention (``envelope.poses``): ``"fixed-xyz"``, ``"euler-zyz"`` ...
    frame : str
        ``"world"`` (the cell frame), ``"base"`` or a frame of the cell file.
    max_points : int
        Reject grids with more poses than this.

    Raises
    ------
    InputError
        Bad region, zero or negative step, too many points, unknown frame or convention.
    """
    region = _region(region_mm)
    step = _step(step_mm)
    angles = _orientations(orientations_deg)
    try:
        parse_convention(convention)
    except InputError as exc:
        raise exc.located(item="--convention") from None
    if frame == "world":
        world_from_frame = np.eye(4)
    elif frame in getattr(cell, "frames", {}):
        world_from_frame = np.array(cell.frames[frame], dtype=np.float64)
    else:
        known = ", ".join(sorted(set(getattr(cell, "frames", {})) | {"world"}))
        raise InputError(f"unknown frame {frame!r} (known frames: {known})", item="--frame")
    shape = tuple(int(np.floor((region[i, 1] - region[i, 0]) / step[i] + 1e-9 / step[i])) + 1 for i in range(3))
    total = int(np.prod(shape, dtype=np.int64)) * len(angles)
    if total > max_points:
        raise InputError(
            f"the grid has {total} poses ({shape[0]} x {shape[1]} x {shape[2]} positions x {len(angles)} "
            f"orientations), more than the limit of {max_points}: use a larger step or a smaller region",
            item="--step",
        )
    rot = rotation_from_euler(to_radians(angles, "deg").reshape(-1, 3), convention)
    ro = lambda a: (a.setflags(write=False), a)[1]  # noqa: E731
    return MapGrid(
        origin=ro(region[:, 0].copy()), step=ro(step), shape=shape, angles=ro(to_radians(angles, "deg")),
        convention=str(convention), frame=str(frame), world_from_frame=ro(world_from_frame), region=ro(region),
        _rot=ro(np.ascontiguousarray(rot)),
    )


def _region(region_mm) -> np.ndarray:
    try:
        r = np.array(region_mm, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"region must be 3 ranges min:max (mm) for x, y, z, got {region_mm!r}",
                         item="--region") from None
    if r.shape != (3, 2):
        raise InputError(f"region must be 3 ranges min:max (mm) for x, y, z, i.e. shape (3, 2), got shape {r.shape}",
                         item="--region")
    if not np.isfinite(r).all():
        raise InputError("region contains a non-finite value", item="--region")
    for i, a in enumerate(AXES):
        if r[i, 0] > r[i, 1]:
            raise InputError(f"region {a} range: min {r[i, 0]:g} mm is above max {r[i, 1]:g} mm", item="--region")
    return to_metres(r, "mm")


def _step(step_mm) -> np.ndarray:
    try:
        s = np.array(step_mm, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"step must be a number of mm or 3 numbers, got {step_mm!r}", item="--step") from None
    if s.ndim == 0:
        s = np.full(3, float(s))
    if s.shape != (3,):
        raise InputError(f"step must be one value or 3 values (x, y, z) in mm, got shape {s.shape}", item="--step")
    for i, a in enumerate(AXES):
        if not np.isfinite(s[i]) or s[i] <= 0:
            raise InputError(f"step must be > 0 mm, got {s[i]:g} mm for {a}", item="--step")
    return to_metres(s, "mm")


def _orientations(orientations_deg) -> np.ndarray:
    try:
        a = np.array(orientations_deg, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"orientations must be Euler angle triples in degrees, got {orientations_deg!r}",
                         item="--orientation") from None
    if a.ndim == 1:
        a = a[None]
    if a.ndim != 2 or a.shape[1] != 3 or len(a) == 0:
        raise InputError(f"orientations must be one or more triples of Euler angles (deg), got shape {a.shape}",
                         item="--orientation")
    if not np.isfinite(a).all():
        raise InputError("orientation contains a non-finite value", item="--orientation")
    return a


def parse_region(text: str) -> np.ndarray:
    """``"x0:x1,y0:y1,z0:z1"`` (mm) as a ``(3, 2)`` array; a single value ``"z"`` means ``z:z``."""
    parts = [p.strip() for p in str(text).split(",")]
    if len(parts) != 3:
        raise InputError(f"region must be 3 comma-separated ranges min:max (mm) for x, y, z, got {text!r}",
                         item="--region")
    out = []
    for a, p in zip(AXES, parts):
        lo, sep, hi = p.partition(":")
        try:
            out.append((float(lo), float(hi if sep else lo)))
        except ValueError:
            raise InputError(f"region {a} range must be min:max in mm, got {p!r}", item="--region") from None
    return np.array(out)


def parse_orientations(text: str) -> np.ndarray:
    """``"180,0,0;0,90,0"`` (degrees) as a ``(k, 3)`` array."""
    rows = []
    for p in str(text).split(";"):
        vals = [v.strip() for v in p.split(",")]
        try:
            row = [float(v) for v in vals]
        except ValueError:
            row = []
        if len(row) != 3:
            raise InputError(f"an orientation is 3 comma-separated Euler angles in degrees, got {p.strip()!r}",
                             item="--orientation")
        rows.append(row)
    return np.array(rows)


def parse_step(text: str):
    """``"25"`` or ``"25,25,50"`` (mm) as a float or a ``(3,)`` array (validated by ``make_grid``)."""
    vals = [v.strip() for v in str(text).split(",")]
    try:
        nums = [float(v) for v in vals]
    except ValueError:
        raise InputError(f"step must be one number or 3 comma-separated numbers in mm, got {text!r}",
                         item="--step") from None
    if len(nums) not in (1, 3):
        raise InputError(f"step must be one number or 3 comma-separated numbers in mm, got {text!r}", item="--step")
    return nums[0] if len(nums) == 1 else np.array(nums)


def parse_point(text: str) -> np.ndarray:
    """``"400,0,700"`` (mm) as a ``(3,)`` array (the clear box's centre, ``--point``)."""
    try:
        vals = [float(v) for v in str(text).split(",")]
    except ValueError:
        vals = []
    if len(vals) != 3:
        raise InputError(f"a point is 3 comma-separated numbers x, y, z in mm, got {text!r}", item="--point")
    return np.array(vals)


# ============================================================================ fingerprints
def _feed(h, obj, skip=("_cache", "targets", "programs", "source", "warnings", "inputs", "_rot")):
    if is_dataclass(obj) and not isinstance(obj, type):
        h.update(type(obj).__name__.encode())
        for f in fields(obj):
            if f.name not in skip:
                h.update(f.name.encode())
                _feed(h, getattr(obj, f.name), skip)
    elif isinstance(obj, np.ndarray):
        h.update(str(obj.dtype).encode() + str(obj.shape).encode())
        h.update(np.ascontiguousarray(obj).tobytes())
    elif isinstance(obj, dict):
        for k in sorted(obj, key=str):
            h.update(repr(k).encode())
            _feed(h, obj[k], skip)
    elif isinstance(obj, (frozenset, set)):
        for item in sorted(obj, key=repr):
            _feed(h, item, skip)
    elif isinstance(obj, (tuple, list)):
        h.update(b"(")
        for item in obj:
            _feed(h, item, skip)
        h.update(b")")
    else:
        h.update(repr(obj).encode())


def cell_fingerprint(cell) -> str:
    """SHA-256 (hex) of everything in ``cell`` a map depends on: arm, mount, bodies, tool, zones, frames,
    clearances (not targets, programs or file names)."""
    h = hashlib.sha256()
    _feed(h, cell)
    return h.hexdigest()


def grid_digest(cell, grid: MapGrid, chunk_size: int) -> str:
    """SHA-256 (hex) identifying a map's chunks: grid definition, cell fingerprint, chunking, format."""
    h = hashlib.sha256()
    h.update(json.dumps(grid.describe(), sort_keys=True).encode())
    h.update(np.ascontiguousarray(grid.angles).tobytes() + np.ascontiguousarray(grid.origin).tobytes())
    h.update(np.ascontiguousarray(grid.step).tobytes() + np.ascontiguousarray(grid.world_from_frame).tobytes())
    h.update(cell_fingerprint(cell).encode())
    h.update(f"chunk={int(chunk_size)};format={FORMAT_VERSION}".encode())
    return h.hexdigest()


# ============================================================================ one chunk
@dataclass(frozen=True, eq=False)
class ChunkResult:
    """The results of flat indices ``start..stop-1`` (arrays ``(stop - start,)``)."""

    start: int
    stop: int
    n_solutions: np.ndarray
    n_within: np.ndarray
    n_clear: np.ndarray
    best_margin: np.ndarray
    n_configs: int = 0
    n_engine: int = 0
    seconds: float = 0.0


_ENGINES: dict = {}
"""Per-process engine cache: cell fingerprint -> ClearanceEngine (a few cells at most)."""


def _engine(cell, key: str | None = None):
    from .clearance import ClearanceEngine

    key = key or cell_fingerprint(cell)
    eng = _ENGINES.get(key)
    if eng is None:
        if len(_ENGINES) >= 4:
            _ENGINES.pop(next(iter(_ENGINES)))
        eng = _ENGINES[key] = ClearanceEngine(cell, prune=True)
    return eng


_COMPILED: dict = {}


def _compiled(cell, key, engine):
    """The cell's ``CompiledMargins`` (None when its shapes need the engine), one per process."""
    from .margins import CompiledMargins

    key = key or cell_fingerprint(cell)
    if key not in _COMPILED:
        if len(_COMPILED) >= 4:
            _COMPILED.pop(next(iter(_COMPILED)))
        _COMPILED[key] = CompiledMargins.build(engine)
    return _COMPILED[key]


def _exact_margins(cell, key, engine, q):
    """``(worst_margin, overall, n_engine)`` of configurations ``q``: the compiled loop where the cell
    allows it (``envelope.margins``), the engine for the configurations it flags and for other cells."""
    cm = _compiled(cell, key, engine)
    if cm is None:
        worst, overall = engine.worst_margins(q)
        return worst, overall, len(q)
    worst, overall, approx = cm.worst_margins(q)
    if approx.any():
        worst[approx], overall[approx] = engine.worst_margins(q[approx])
    return worst, overall, int(approx.sum())


def evaluate_chunk(cell, grid: MapGrid, start: int, stop: int, *, cell_key: str | None = None) -> ChunkResult:
    """Map results of the grid poses with flat indices ``start..stop-1`` (a pure function).

    Every existing branch is solved (batch closed-form IK), and every within-limits branch gets the
    clearance engine's worst margin and status (``ClearanceEngine(cell, prune=True)``, whose pruning
    never changes a status nor the worst pair), computed by the compiled loop of ``envelope.margins``
    where the cell's shapes allow it (statuses equal to the engine's, margins within 1e-5 m of its
    values). ``n_configs`` counts the within-limits branches, ``n_engine`` those left to the engine
    (all of them on cells the loop does not support). ``cell_key`` (the cell fingerprint) saves
    recomputing it per chunk.
    """
    from .clearance import STATUS_CLEAR

    t0 = time.perf_counter()
    world_from_tcp = grid.world_from_tcp(start, stop)
    ik = cell.arm.ik(cell.base_from_flange(world_from_tcp))
    ok = ik.valid & ik.within_limits.all(axis=-1)  # (m, 8)
    n = stop - start
    margin = np.full(ok.shape, -np.inf)
    clear = np.zeros(ok.shape, dtype=bool)
    n_cfg = int(ok.sum())
    n_engine = 0
    if n_cfg:
        engine = _engine(cell, cell_key)
        worst, overall, n_engine = _exact_margins(cell, cell_key, engine, ik.q[ok])
        margin[ok] = worst
        clear[ok] = overall == STATUS_CLEAR
    n_within = ok.sum(axis=1)
    best = np.where(n_within > 0, margin.max(axis=1), np.nan)
    return ChunkResult(
        start=int(start), stop=int(stop), n_solutions=ik.valid.sum(axis=1).astype(np.int8),
        n_within=n_within.astype(np.int8), n_clear=clear.sum(axis=1).astype(np.int8), best_margin=best.reshape(n),
        n_configs=n_cfg, n_engine=n_engine, seconds=time.perf_counter() - t0,
    )


# ---------------------------------------------------------------------------- workers
_WORKER: dict = {}


def _init_worker(cell, key):
    _WORKER["cell"], _WORKER["key"] = cell, key
    _engine(cell, key)


def _pool_task(grid, start, stop):
    return evaluate_chunk(_WORKER["cell"], grid, start, stop, cell_key=_WORKER["key"])


def _dask_task(cell, grid, start, stop, key):
    return evaluate_chunk(cell, grid, start, stop, cell_key=key)


# ============================================================================ chunk files
def _chunk_path(folder: Path, i: int) -> Path:
    return folder / f"chunk-{i:06d}.npz"


def _save_chunk(folder: Path, i: int, r: ChunkResult, digest: str) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".chunk-{i:06d}-", suffix=".npz.tmp", dir=folder)
    try:
        with os.fdopen(fd, "wb") as fh:
            np.savez(fh, digest=np.array(digest), start=r.start, stop=r.stop, n_solutions=r.n_solutions,
                     n_within=r.n_within, n_clear=r.n_clear, best_margin=r.best_margin)
        os.replace(tmp, _chunk_path(folder, i))
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def _load_chunk(folder: Path, i: int, start: int, stop: int, digest: str) -> ChunkResult | None:
    p = _chunk_path(folder, i)
    if not p.is_file():
        return None
    try:
        with np.load(p, allow_pickle=False) as z:
            if str(z["digest"]) != digest or int(z["start"]) != start or int(z["stop"]) != stop:
                return None
            arrays = {k: np.array(z[k]) for k in ("n_solutions", "n_within", "n_clear", "best_margin")}
    except (OSError, ValueError, KeyError):
        return None  # unreadable or foreign: computed again and overwritten
    if any(a.shape != (stop - start,) for a in arrays.values()):
        return None
    return ChunkResult(start=start, stop=stop, **arrays)


# ============================================================================ the map
@dataclass(frozen=True, eq=False)
class MapResult:
    """A finished map. Arrays are ``(n_orientations, nx, ny, nz)`` (see the module docstring).

    ``best_margin`` is in metres. ``chunks_computed`` / ``chunks_reused`` count the chunks evaluated
    in this run and those read back from the chunk folder; ``seconds`` is the run's wall time.
    """

    grid: MapGrid
    digest: str
    cell_name: str
    n_solutions: np.ndarray
    n_within: np.ndarray
    n_clear: np.ndarray
    best_margin: np.ndarray
    chunks_computed: int
    chunks_reused: int
    seconds: float
    backend: str

    @property
    def clear(self) -> np.ndarray:
        """``(k, nx, ny, nz)`` bool: at least one clear branch."""
        return self.n_clear > 0

    @property
    def reachable(self) -> np.ndarray:
        """``(k, nx, ny, nz)`` bool: at least one branch within limits."""
        return self.n_within > 0


def run_map(cell, grid: MapGrid, *, jobs: int = 1, dask: str | None = None, chunk_size: int = DEFAULT_CHUNK,
            chunk_dir=None, progress=None) -> MapResult:
    """Evaluate every pose of ``grid`` (see the module docstring).

    Parameters
    ----------
    cell : Cell
    grid : MapGrid
        From ``make_grid``.
    jobs : int
        Worker processes of a local process pool (1: this process). With ``dask="local"``, the
        number of workers of the LocalCluster (default 2 when ``jobs`` is 1).
    dask : str, optional
        A Dask scheduler address (``"tcp://host:8786"``), or ``"local"`` to start a
        ``distributed.LocalCluster`` (one thread per worker process). Needs ``envelope[dask]``.
    chunk_size : int
        Poses per chunk (part of the grid digest: resume needs the same value).
    chunk_dir : path, optional
        Folder for finished chunks; chunks already there with the same digest are not recomputed.
    progress : callable(done, total, rate, eta), optional
        Called after every chunk with poses done, poses in all, poses per second (chunks computed
        in this run) and the estimated seconds left (``nan`` before the first computed chunk).

    Returns
    -------
    MapResult
        The same arrays for every backend, ``jobs`` and resume history.
    """
    if not isinstance(grid, MapGrid):
        raise InputError(f"grid must be a MapGrid from make_grid, got {type(grid).__name__}", item="grid")
    if int(chunk_size) < 1:
        raise InputError(f"chunk size must be >= 1 pose, got {chunk_size}", item="--chunk")
    if int(jobs) < 1:
        raise InputError(f"jobs must be >= 1, got {jobs}", item="--jobs")
    chunk_size, jobs = int(chunk_size), int(jobs)
    t0 = time.perf_counter()
    key = cell_fingerprint(cell)
    digest = grid_digest(cell, grid, chunk_size)
    total = grid.size
    bounds = [(s, min(s + chunk_size, total)) for s in range(0, total, chunk_size)]
    folder = None if chunk_dir is None else Path(chunk_dir)
    parts: dict = {}
    if folder is not None:
        for i, (s, e) in enumerate(bounds):
            r = _load_chunk(folder, i, s, e, digest)
            if r is not None:
                parts[i] = r
    reused = len(parts)
    todo = [i for i in range(len(bounds)) if i not in parts]
    state = {"done": sum(e - s for i, (s, e) in enumerate(bounds) if i in parts), "computed": 0, "t": time.perf_counter()}

    def finished(i, r):
        if folder is not None:
            _save_chunk(folder, i, r, digest)
        parts[i] = r
        state["done"] += r.stop - r.start
        state["computed"] += r.stop - r.start
        if progress is not None:
            dt = time.perf_counter() - state["t"]
            rate = state["computed"] / dt if dt > 0 else float("nan")
            eta = (total - state["done"]) / rate if rate and rate > 0 else float("nan")
            progress(state["done"], total, rate, eta)

    if dask is not None:
        backend = "dask-local" if dask == "local" else "dask"
        _run_dask(cell, grid, bounds, todo, key, dask, jobs, finished)
    elif jobs > 1 and len(todo) > 1:
        backend = f"processes-{jobs}"
        _run_pool(cell, grid, bounds, todo, key, jobs, finished)
    else:
        backend = "serial"
        for i in todo:
            s, e = bounds[i]
            finished(i, evaluate_chunk(cell, grid, s, e, cell_key=key))

    shape = grid.array_shape
    cat = lambda name: np.concatenate([getattr(parts[i], name) for i in range(len(bounds))]).reshape(shape)  # noqa: E731
    return MapResult(
        grid=grid, digest=digest, cell_name=str(getattr(cell, "name", "")), n_solutions=cat("n_solutions"),
        n_within=cat("n_within"), n_clear=cat("n_clear"), best_margin=cat("best_margin").astype(np.float64),
        chunks_computed=len(todo), chunks_reused=reused, seconds=time.perf_counter() - t0, backend=backend,
    )


def _run_pool(cell, grid, bounds, todo, key, jobs, finished):
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    with ProcessPoolExecutor(jobs, initializer=_init_worker, initargs=(cell, key)) as pool:
        pending = {}
        queue = list(todo)
        try:
            while queue or pending:
                while queue and len(pending) < 2 * jobs:  # bounded look-ahead: an interrupt loses little
                    i = queue.pop(0)
                    pending[pool.submit(_pool_task, grid, *bounds[i])] = i
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for f in done:
                    finished(pending.pop(f), f.result())
        except BaseException:
            for f in pending:
                f.cancel()
            raise


def _run_dask(cell, grid, bounds, todo, key, address, jobs, finished):
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise InputError("a Dask run needs the 'distributed' package: pip install 'envelope[dask]'",
                         item="--dask") from None
    cluster = None
    if address == "local":
        cluster = LocalCluster(n_workers=jobs if jobs > 1 else 2, threads_per_worker=1, processes=True,
                               dashboard_address=":0")
        client = Client(cluster)
    else:
        try:
            client = Client(address, timeout=30)
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"cannot connect to the Dask scheduler at {address!r} ({exc})", item="--dask") from None
    try:
        cell_f = client.scatter(cell, broadcast=True)
        grid_f = client.scatter(grid, broadcast=True)
        futures = {client.submit(_dask_task, cell_f, grid_f, s, e, key, key=f"envelope-map-{key[:8]}-{i}-{s}", pure=False): i
                   for i in todo for (s, e) in [bounds[i]]}
        try:
            for f in as_completed(futures):
                finished(futures[f], f.result())
        except BaseException:
            client.cancel(list(futures))
            raise
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


# ============================================================================ summary
@dataclass(frozen=True)
class MapSummary:
    """Figures of a map for the report (file units: mm).

    Attributes
    ----------
    n_positions, n_orientations : int
    reachable_fraction, clear_fraction : tuple of float
        Per orientation: the fraction of grid positions with >= 1 within-limits branch, and with
        >= 1 clear branch (the reachable-and-clear fraction).
    clear_all_fraction : float
        Fraction of positions with >= 1 clear branch at every orientation.
    point_index : tuple of int
        The grid point ``(ix, iy, iz)`` the clear box is centred on.
    point_mm : tuple of float
        Its coordinates in the grid's frame.
    box_half_steps : int
        The largest ``k`` such that every grid point with ``|i - i0| <= k`` on each axis that has more
        than one point (the box of ``2k + 1`` points per such axis, centred on the point) lies in the
        grid and has >= 1 clear branch at every orientation. -1 if the point itself is not clear.
    box_half_mm : tuple of float
        ``k * step`` per axis (0 on single-layer axes); the box spans point -/+ these.
    box_limit : str
        What stopped the box: ``"region boundary"``, ``"a point with no clear branch"`` or
        ``"the point has no clear branch"``.
    """

    n_positions: int
    n_orientations: int
    reachable_fraction: tuple
    clear_fraction: tuple
    clear_all_fraction: float
    point_index: tuple
    point_mm: tuple
    box_half_steps: int
    box_half_mm: tuple
    box_limit: str

    def as_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def grid_index(grid: MapGrid, point_mm=None) -> tuple:
    """Grid indices ``(ix, iy, iz)`` of a point given in mm in the grid's frame (default: the grid point
    nearest the region's centre). A given point must be a grid point (within 1e-6 mm)."""
    if point_mm is None:
        centre = grid.region.mean(axis=1)
        return tuple(int(np.clip(np.rint((centre[i] - grid.origin[i]) / grid.step[i]), 0, grid.shape[i] - 1))
                     for i in range(3))
    p = np.array(point_mm, dtype=np.float64)
    if p.shape != (3,) or not np.isfinite(p).all():
        raise InputError(f"the box centre must be 3 finite values x, y, z in mm, got {point_mm!r}", item="--point")
    pm = to_metres(p, "mm")
    idx = np.rint((pm - grid.origin) / grid.step).astype(np.int64)
    inside = (idx >= 0) & (idx < np.array(grid.shape))
    near = grid.origin + np.clip(idx, 0, np.array(grid.shape) - 1) * grid.step
    if not inside.all() or np.abs(near - pm).max() > 1e-9:
        raise InputError(
            f"the box centre {p.tolist()} mm is not a grid point; the nearest grid point is "
            f"{np.round(to_mm(near), 6).tolist()} mm",
            item="--point",
        )
    return tuple(int(i) for i in idx)


def largest_clear_box(clear_xyz: np.ndarray, index: tuple) -> tuple[int, str]:
    """``(k, limit)``: the half-size in grid steps of the largest clear box centred on ``index``.

    ``clear_xyz`` is ``(nx, ny, nz)`` bool; see ``MapSummary.box_half_steps`` for the definition.
    """
    shape = clear_xyz.shape
    i0 = np.array(index)
    if not clear_xyz[tuple(i0)]:
        return -1, "the point has no clear branch"
    grow = np.array([s > 1 for s in shape])
    if not grow.any():
        return 0, "region boundary"
    k = 0
    while True:
        k1 = k + 1
        lo, hi = i0 - k1 * grow, i0 + k1 * grow
        if (lo < 0).any() or (hi >= np.array(shape)).any():
            return k, "region boundary"
        if not clear_xyz[lo[0]:hi[0] + 1, lo[1]:hi[1] + 1, lo[2]:hi[2] + 1].all():
            return k, "a point with no clear branch"
        k = k1


def summarize(result: MapResult, point_mm=None) -> MapSummary:
    """The report figures of a map; the clear box is centred on ``point_mm`` (see ``grid_index``)."""
    g = result.grid
    idx = grid_index(g, point_mm)
    n = g.n_positions
    clear = result.clear
    clear_all = clear.all(axis=0)
    k, limit = largest_clear_box(clear_all, idx)
    step = np.where(np.array(g.shape) > 1, g.step, 0.0)
    point = g.origin + np.array(idx) * g.step
    return MapSummary(
        n_positions=n, n_orientations=g.n_orientations,
        reachable_fraction=tuple(float(v) for v in result.reachable.reshape(g.n_orientations, -1).mean(axis=1)),
        clear_fraction=tuple(float(v) for v in clear.reshape(g.n_orientations, -1).mean(axis=1)),
        clear_all_fraction=float(clear_all.mean()), point_index=idx,
        point_mm=tuple(float(v) for v in np.round(to_mm(point), 6)),
        box_half_steps=int(k), box_half_mm=tuple(float(v) for v in np.round(to_mm(max(k, 0) * step), 6)),
        box_limit=limit,
    )


# ============================================================================ files
@dataclass(frozen=True)
class MapFiles:
    """Paths written by ``write_map``."""

    npz: Path
    plan_png: Path
    elevation_png: Path
    summary_json: Path


def _atomic(path: Path, write) -> None:
    fd, tmp = tempfile.mkstemp(prefix="." + path.name + "-", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_map(result: MapResult, out_dir, *, point_mm=None, cell=None) -> MapFiles:
    """Write ``map.npz``, ``map-plan.png``, ``map-elevation.png`` and ``map-summary.json`` to ``out_dir``.

    ``map.npz`` holds the arrays (``best_margin_mm`` in mm) and the grid definition (``x_mm``, ``y_mm``,
    ``z_mm``, ``orientations_deg``, ``convention``, ``frame``, ``world_from_frame_mm``: translation in
    mm, ``digest``). The PNGs need ``cell`` to draw the zones (outlines: the convex hull of each zone
    shape's projection onto the drawing plane). Every file is written atomically.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    g = result.grid
    summary = summarize(result, point_mm)
    wff = np.array(g.world_from_frame)
    wff[:3, 3] = to_mm(wff[:3, 3])
    arrays = dict(
        n_solutions=result.n_solutions, n_within=result.n_within, n_clear=result.n_clear,
        best_margin_mm=to_mm(result.best_margin), x_mm=to_mm(g.axis(0)), y_mm=to_mm(g.axis(1)), z_mm=to_mm(g.axis(2)),
        step_mm=to_mm(g.step), region_mm=to_mm(g.region), orientations_deg=to_degrees(g.angles),
        convention=np.array(g.convention), frame=np.array(g.frame), world_from_frame_mm=wff,
        digest=np.array(result.digest), cell_name=np.array(result.cell_name),
        axes=np.array("orientation, x, y, z"),
    )
    files = MapFiles(out / "map.npz", out / "map-plan.png", out / "map-elevation.png", out / "map-summary.json")

    def save_npz(tmp):
        with open(tmp, "wb") as fh:
            np.savez_compressed(fh, **arrays)

    _atomic(files.npz, save_npz)
    plot_slices(result, summary, files.plan_png, files.elevation_png, cell=cell)
    doc = {"grid": g.describe(), "digest": result.digest, "cell": result.cell_name, "summary": summary.as_dict(),
           "seconds": round(result.seconds, 3), "backend": result.backend}
    _atomic(files.summary_json, lambda tmp: Path(tmp).write_text(json.dumps(doc, indent=2) + "\n"))
    return files


CATEGORY_NAMES = ("no branch within limits", "within limits, none clear", "clear")
"""Categories drawn in the slices: per position, the worst over orientations."""


def categories(result: MapResult) -> np.ndarray:
    """``(nx, ny, nz)`` int: 0 no within-limits branch, 1 within limits but not clear, 2 clear; each the
    worst over the orientations."""
    cat = np.where(result.clear, 2, np.where(result.reachable, 1, 0))
    return cat.min(axis=0)


def zone_outlines(cell, frame_from_world: np.ndarray, axes: tuple) -> list:
    """``[(zone name, kind, (m, 2) polygon in m)]``: each zone shape projected onto the plane of
    ``axes`` (two of 0, 1, 2) of the frame, as the convex hull of its projection. Half-spaces
    appear as a line where their boundary is perpendicular to the plane, else not at all."""
    from scipy.spatial import ConvexHull, QhullError  # scipy: 2-D convex hull of projected points

    from . import geometry as gm

    out = []
    for z in cell.zones:
        for s in z.shapes:
            pts = _shape_points(gm, s)
            if pts is None:
                line = _half_space_line(gm, s, frame_from_world, axes)
                if line is not None:
                    out.append((z.name, z.kind, line))
                continue
            local = pts @ frame_from_world[:3, :3].T + frame_from_world[:3, 3]
            p2 = local[:, list(axes)]
            try:
                hull = ConvexHull(p2)
                out.append((z.name, z.kind, p2[hull.vertices]))
            except (QhullError, ValueError):
                out.append((z.name, z.kind, p2[[np.argmin(p2[:, 0]), np.argmax(p2[:, 0])]]))
    return out


def _shape_points(gm, s):
    """Points whose convex hull contains the shape's projection (vertices, or sampled circles)."""
    if isinstance(s, gm.HalfSpace):
        return None
    if isinstance(s, gm.Box):
        c = np.array(np.meshgrid([-0.5, 0.5], [-0.5, 0.5], [-0.5, 0.5], indexing="ij")).reshape(3, -1).T * s.extents
        return c @ s.pose[:3, :3].T + s.pose[:3, 3]
    if isinstance(s, (gm.Convex, gm.TriMesh)):
        return np.asarray(s.vertices)
    # round shapes: circles of 64 points about three axes around every centre; the hull of their
    # projection is within 0.12 % of the true outline (cos(pi/64)), drawn slightly inside
    t = np.linspace(0, 2 * np.pi, 64, endpoint=False)
    ring = np.concatenate([np.column_stack([np.cos(t), np.sin(t), 0 * t]), np.column_stack([np.cos(t), 0 * t, np.sin(t)]),
                           np.column_stack([0 * t, np.cos(t), np.sin(t)])])
    if isinstance(s, gm.Sphere):
        return s.center + s.radius * ring
    if isinstance(s, gm.Capsule):
        return np.concatenate([s.p0 + s.radius * ring, s.p1 + s.radius * ring])
    if isinstance(s, gm.Cylinder):
        disc = np.column_stack([np.cos(t), np.sin(t), 0 * t]) * s.radius
        pts = np.concatenate([disc + [0, 0, -s.length / 2], disc + [0, 0, s.length / 2]])
        return pts @ s.pose[:3, :3].T + s.pose[:3, 3]
    return None


def _half_space_line(gm, s, frame_from_world, axes):
    if not isinstance(s, gm.HalfSpace):
        return None
    n = frame_from_world[:3, :3] @ s.normal
    off = s.offset + n @ frame_from_world[:3, 3]  # n_f . x_f <= offset + n_f . t
    other = ({0, 1, 2} - set(axes)).pop()
    if abs(n[other]) > 1e-9:
        return None  # the boundary is not perpendicular to the drawing plane
    a, b = n[list(axes)]
    big = 1e3
    if abs(b) >= abs(a):
        xs = np.array([-big, big])
        return np.column_stack([xs, (off - a * xs) / b])
    ys = np.array([-big, big])
    return np.column_stack([(off - b * ys) / a, ys])


def plot_slices(result: MapResult, summary: MapSummary, plan_png, elevation_png, *, cell=None) -> None:
    """Plan (x-y at the box centre's z) and elevation (x-z at its y) slices as PNG images.

    Cells are coloured by ``categories``; the zone outlines (``zone_outlines``), the box centre and
    the largest clear box are drawn over them. Coordinates in mm in the grid's frame.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch, Rectangle

    g = result.grid
    cat = categories(result)
    ix, iy, iz = summary.point_index
    frame_from_world = np.linalg.inv(g.world_from_frame)
    cmap = ListedColormap(["#d9d9d9", "#e4572e", "#4daf4a"])
    views = (
        (plan_png, (0, 1), cat[:, :, iz], f"plan at z = {summary.point_mm[2]:g} mm"),
        (elevation_png, (0, 2), cat[:, iy, :], f"elevation at y = {summary.point_mm[1]:g} mm"),
    )
    for path, (a0, a1), sl, title in views:
        fig, ax = plt.subplots(figsize=(7.5, 6.5), dpi=110)
        h0 = 0.5 * g.step[a0] if g.shape[a0] > 1 else 0.5 * g.step[a0]
        h1 = 0.5 * g.step[a1]
        c0, c1 = to_mm(g.axis(a0)), to_mm(g.axis(a1))
        extent = [c0[0] - to_mm(h0), c0[-1] + to_mm(h0), c1[0] - to_mm(h1), c1[-1] + to_mm(h1)]
        ax.imshow(sl.T, origin="lower", extent=extent, cmap=cmap, vmin=0, vmax=2, interpolation="nearest",
                  aspect="equal")
        if cell is not None:
            for name, kind, poly in zone_outlines(cell, frame_from_world, (a0, a1)):
                poly = to_mm(poly)
                closed = np.vstack([poly, poly[:1]]) if len(poly) > 2 else poly
                style = "-" if kind in ("fence", "guard", "wall") else "--"
                ax.plot(closed[:, 0], closed[:, 1], style, color="black" if style == "-" else "#1f4e9c", lw=1.0)
        p = np.array(summary.point_mm)
        ax.plot(p[a0], p[a1], "k+", ms=10, mew=1.5)
        if summary.box_half_steps >= 0:
            hb = np.array(summary.box_half_mm)
            hs = to_mm(0.5 * g.step)
            w0, w1 = hb[a0] + (hs[a0] if g.shape[a0] > 1 else 0), hb[a1] + (hs[a1] if g.shape[a1] > 1 else 0)
            ax.add_patch(Rectangle((p[a0] - w0, p[a1] - w1), 2 * w0, 2 * w1, fill=False, ec="k", lw=1.2, ls=":"))
        ax.set_xlim(extent[0], extent[1])
        ax.set_ylim(extent[2], extent[3])
        ax.set_xlabel(f"{AXES[a0]} (mm, frame {g.frame})")
        ax.set_ylabel(f"{AXES[a1]} (mm, frame {g.frame})")
        ax.set_title(f"{result.cell_name}: {title}", fontsize=10)
        handles = [Patch(color=cmap(i), label=CATEGORY_NAMES[i]) for i in range(3)]
        handles.append(Patch(fill=False, ec="black", label="fences, guards (solid); zones (dashed): projections"))
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.1), fontsize=8, ncol=2, frameon=False)
        fig.tight_layout()
        _atomic(Path(path), lambda tmp: fig.savefig(tmp, format="png"))
        plt.close(fig)
