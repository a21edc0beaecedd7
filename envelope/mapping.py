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

Two methods (docs/maps.md): ``"exact"`` (default) gives every within-limits branch the clearance
engine's worst margin and status (compiled, ``envelope.margins``, for cells of polytopes, half-spaces
and zone meshes); ``"fast"`` first brackets every branch's worst margin with vectorised bounds
(``FastBounds``) and runs the engine only where they cannot decide the verdict or the pose's best
margin to 0.5 mm.
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
FORMAT_VERSION = 1
"""Version of the chunk and map file layout (part of the grid digest)."""

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


def grid_digest(cell, grid: MapGrid, chunk_size: int, method: str = "exact") -> str:
    """SHA-256 (hex) identifying a map's chunks: grid definition, cell fingerprint, chunking, method, format."""
    h = hashlib.sha256()
    h.update(json.dumps(grid.describe(), sort_keys=True).encode())
    h.update(np.ascontiguousarray(grid.angles).tobytes() + np.ascontiguousarray(grid.origin).tobytes())
    h.update(np.ascontiguousarray(grid.step).tobytes() + np.ascontiguousarray(grid.world_from_frame).tobytes())
    h.update(cell_fingerprint(cell).encode())
    h.update(f"chunk={int(chunk_size)};method={method};format={FORMAT_VERSION}".encode())
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


_FAST: dict = {}


def _fast(cell, key, engine):
    key = key or cell_fingerprint(cell)
    fb = _FAST.get(key)
    if fb is None:
        if len(_FAST) >= 4:
            _FAST.pop(next(iter(_FAST)))
        fb = _FAST[key] = FastBounds(cell, engine)
        fb.usable = fb.usable and bool((fb.required > 0).all())
    return fb


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


def evaluate_chunk(cell, grid: MapGrid, start: int, stop: int, *, method: str = "exact",
                   cell_key: str | None = None) -> ChunkResult:
    """Map results of the grid poses with flat indices ``start..stop-1`` (a pure function).

    Every existing branch is solved (batch closed-form IK). With ``method="exact"`` every
    within-limits branch gets the clearance engine's worst margin and status (``ClearanceEngine(cell,
    prune=True)``, whose pruning never changes a status nor the worst pair), computed by the
    compiled loop of ``envelope.margins`` where the cell's shapes allow it (the engine's values to
    about 1e-6 m; ``n_engine`` counts the configurations left to the engine). With ``"fast"``,
    ``FastBounds`` brackets each branch's worst margin and only branches it cannot decide (the
    verdict, or the pose's best margin to ``FAST_TOL``) go to the engine; the verdicts are the
    engine's and the best margin is within ``FAST_TOL`` below the engine's. ``cell_key`` (the cell
    fingerprint) saves recomputing it per chunk.
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
    n_engine = n_cfg
    if n_cfg:
        engine = _engine(cell, cell_key)
        fast = _fast(cell, cell_key, engine) if method == "fast" else None
        if fast is not None and fast.usable:
            owner = np.nonzero(ok)[0]
            lo, _, cl, n_engine = fast.worst_margins(ik.q[ok], owner, engine)
            margin[ok] = lo
            clear[ok] = cl
        else:
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


def _pool_task(grid, start, stop, method):
    return evaluate_chunk(_WORKER["cell"], grid, start, stop, method=method, cell_key=_WORKER["key"])


def _dask_task(cell, grid, start, stop, method, key):
    return evaluate_chunk(cell, grid, start, stop, method=method, cell_key=key)


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


METHODS = ("exact", "fast")


def run_map(cell, grid: MapGrid, *, jobs: int = 1, dask: str | None = None, chunk_size: int = DEFAULT_CHUNK,
            chunk_dir=None, progress=None, method: str = "exact") -> MapResult:
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
    method : {"exact", "fast"}
        ``"exact"`` (default): the clearance engine on every within-limits branch. ``"fast"``:
        vectorised bounds first, the engine only where they cannot decide (same verdicts; best
        margin within ``FAST_TOL`` = 0.5 mm below the engine's). See ``evaluate_chunk``. With the
        current engine ``"exact"`` is the faster of the two on the demo cell (docs/maps.md).

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
    if method not in METHODS:
        raise InputError(f"method must be one of {METHODS}, got {method!r}", item="--method")
    chunk_size, jobs = int(chunk_size), int(jobs)
    t0 = time.perf_counter()
    key = cell_fingerprint(cell)
    digest = grid_digest(cell, grid, chunk_size, method)
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
        _run_dask(cell, grid, bounds, todo, key, dask, jobs, finished, method)
    elif jobs > 1 and len(todo) > 1:
        backend = f"processes-{jobs}"
        _run_pool(cell, grid, bounds, todo, key, jobs, finished, method)
    else:
        backend = "serial"
        for i in todo:
            s, e = bounds[i]
            finished(i, evaluate_chunk(cell, grid, s, e, method=method, cell_key=key))

    shape = grid.array_shape
    cat = lambda name: np.concatenate([getattr(parts[i], name) for i in range(len(bounds))]).reshape(shape)  # noqa: E731
    return MapResult(
        grid=grid, digest=digest, cell_name=str(getattr(cell, "name", "")), n_solutions=cat("n_solutions"),
        n_within=cat("n_within"), n_clear=cat("n_clear"), best_margin=cat("best_margin").astype(np.float64),
        chunks_computed=len(todo), chunks_reused=reused, seconds=time.perf_counter() - t0, backend=backend,
    )


def _run_pool(cell, grid, bounds, todo, key, jobs, finished, method):
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    with ProcessPoolExecutor(jobs, initializer=_init_worker, initargs=(cell, key)) as pool:
        pending = {}
        queue = list(todo)
        try:
            while queue or pending:
                while queue and len(pending) < 2 * jobs:  # bounded look-ahead: an interrupt loses little
                    i = queue.pop(0)
                    pending[pool.submit(_pool_task, grid, *bounds[i], method)] = i
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for f in done:
                    finished(pending.pop(f), f.result())
        except BaseException:
            for f in pending:
                f.cancel()
            raise


def _run_dask(cell, grid, bounds, todo, key, address, jobs, finished, method):
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
        futures = {client.submit(_dask_task, cell_f, grid_f, s, e, method, key, key=f"envelope-map-{key[:8]}-{i}-{s}", pure=False): i
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


# ============================================================================ fast bounds
FAST_TOL = 0.5e-3
"""Width (m) of the interval a fast-path best margin is known to lie in before it is accepted (<= 1 mm)."""
ENGINE_EPS = 1e-4
"""Allowed shortfall (m) of the engine's certified bound below the true distance of two separated
convex solids (python-fcl 0.7 capsule-box witnesses were seen 1.3e-5 m short); checked by the tests."""
FW_ITERATIONS = 48
"""Most iterations of the vectorised distance solver per pair before the engine is asked instead."""


class FastBounds:
    """Vectorised bounds ``[lo, hi]`` on the engine's worst margin of configurations (``method="fast"``).

    Built from the cell and checked against ``engine.pairs`` (same pairs, same order, same required
    clearances); ``usable`` is False when they do not match (the map then uses the engine alone).

    Per pair (a body shape against a zone shape or another body shape, padding subtracted):

    - half-space zones: the engine's exact value ``-h_A(-n) - offset`` (support over the body's hull);
    - other convex shapes: the distance of the two solids bracketed by a vectorised Gilbert /
      Frank-Wolfe iteration on their Minkowski difference (upper: the length of a difference of two
      points of the solids; lower: the support gap along the current direction), or only by the
      bounding-sphere bound (which the engine's value never goes below) where not refined;
    - zone meshes: the bounding-sphere bound only (the engine's mesh bound can be below the true
      distance, so a configuration whose worst pair may be such a pair goes to the engine).

    The engine's value ``E`` of a pair satisfies ``E <= true distance <= hi`` always, and
    ``E >= lo - ENGINE_EPS`` for separated convex pairs (python-fcl's witness direction), so
    intervals that are narrow enough decide the verdict and the best margin without the engine.
    """

    def __init__(self, cell, engine):
        from . import geometry as gm

        self.cell = cell
        self.arm = cell.arm
        self.world_from_base = np.asarray(cell.world_from_base, dtype=np.float64)
        bodies = tuple(cell.bodies)
        slots = []  # dict(kind, shape, frame (-1 zone), center, radius, pad)
        body_slots = []
        self.usable = True
        for b in bodies:
            ids = []
            for s in b.shapes:
                if isinstance(s, gm.TriMesh):
                    s = gm.convex_hull(s)
                c, r = gm.bounding_sphere(s)
                kind = "convex" if isinstance(s, (gm.Convex, gm.Box, gm.Sphere, gm.Capsule)) else "other"
                slots.append(dict(kind=kind, shape=s, frame=int(b.frame), center=np.array(c), radius=float(r),
                                  pad=float(b.padding)))
                ids.append(len(slots) - 1)
            body_slots.append(ids)
        zone_slots = []
        for z in cell.zones:
            ids = []
            for s in z.shapes:
                if isinstance(s, gm.HalfSpace):
                    kind, c, r = "half", np.zeros(3), np.inf
                else:
                    c, r = gm.bounding_sphere(s)
                    kind = ("mesh" if isinstance(s, gm.TriMesh) else
                            "convex" if isinstance(s, (gm.Convex, gm.Box, gm.Sphere, gm.Capsule)) else "other")
                slots.append(dict(kind=kind, shape=s, frame=-1, center=np.array(c), radius=float(r), pad=0.0))
                ids.append(len(slots) - 1)
            zone_slots.append(ids)
        pairs = []  # (body, other, required, allowed, [(a, b) slot pairs])
        for bi, b in enumerate(bodies):
            if not body_slots[bi]:
                continue
            for zi, z in enumerate(cell.zones):
                for sid in zone_slots[zi]:
                    pairs.append((b.name, z.name, float(z.clearance), b.name in z.allowed,
                                  [(a, sid) for a in body_slots[bi]]))
        allowed_self = {frozenset(p) for p in cell.self_pairs_allowed}
        for i in range(len(bodies)):
            for j in range(i + 1, len(bodies)):
                bi, bj = bodies[i], bodies[j]
                if abs(int(bi.frame) - int(bj.frame)) < 2 or frozenset((bi.name, bj.name)) in allowed_self:
                    continue
                if not body_slots[i] or not body_slots[j]:
                    continue
                pairs.append((bi.name, bj.name, float(cell.self_clearance), False,
                              [(a, b_) for a in body_slots[i] for b_ in body_slots[j]]))
        ep = engine.pairs
        if len(ep) != len(pairs) or any(
            (p.body, p.other, p.allowed) != (q[0], q[1], q[3]) or abs(p.required - q[2]) > 1e-12 for p, q in zip(ep, pairs)
        ):
            self.usable = False
        if any(s["kind"] == "other" for s in slots):
            self.usable = False
        self.slots = slots
        keep = [p for p in range(len(pairs)) if not pairs[p][3]]  # allowed pairs never count
        self.required = np.array([pairs[p][2] for p in keep])
        sp_a, sp_b, sp_pair = [], [], []
        for k, p in enumerate(keep):
            for a, b_ in pairs[p][4]:
                sp_a.append(a)
                sp_b.append(b_)
                sp_pair.append(k)
        self.sp_a, self.sp_b, self.sp_pair = np.array(sp_a, int), np.array(sp_b, int), np.array(sp_pair, int)
        self.n_pairs = len(keep)
        self.pad = np.array([slots[a]["pad"] + slots[b_]["pad"] for a, b_ in zip(sp_a, sp_b)])
        kinds = np.array([s["kind"] for s in slots])
        self.sp_half = kinds[self.sp_b] == "half"
        self.sp_mesh = kinds[self.sp_b] == "mesh"
        self.S_center = np.array([s["center"] for s in slots]).reshape(-1, 3)
        self.S_radius = np.array([s["radius"] for s in slots])
        self.S_frame = np.array([s["frame"] for s in slots])
        self.S_moving = self.S_frame >= 0
        outer = [_outer_box(gm, s["shape"]) for s in slots]
        self.S_oc = np.array([o[0] for o in outer])
        self.S_ow = np.array([o[1] for o in outer])  # (S, 3, 3): rows are half-axis vectors
        self.S_or = np.array([o[2] for o in outer])

    # ------------------------------------------------------------------ posing and supports
    def _poses(self, q):
        F = self.world_from_base @ self.arm.frames(q)  # (n, 7, 4, 4)
        n, S = len(q), len(self.slots)
        R = np.broadcast_to(np.eye(3), (n, S, 3, 3)).copy()
        t = np.zeros((n, S, 3))
        mv = np.flatnonzero(self.S_moving)
        Fm = F[:, self.S_frame[mv]]
        R[:, mv] = Fm[..., :3, :3]
        t[:, mv] = Fm[..., :3, 3]
        return R, t

    def _support(self, slot, R, t, u):
        """World support points ``(k, 3)`` of ``slot`` posed by ``R (k, 3, 3)``, ``t (k, 3)`` along ``u (k, 3)``."""
        from . import geometry as gm

        shape = self.slots[slot]["shape"]
        if self.slots[slot]["frame"] < 0:
            return gm.support_point(shape, u)
        local = np.einsum("kji,kj->ki", R, u)
        p = gm.support_point(shape, local)
        return np.einsum("kij,kj->ki", R, p) + t

    def _support_many(self, slots, R, t, u):
        out = np.empty_like(u)
        for s in np.unique(slots):
            m = slots == s
            out[m] = self._support(int(s), R[m], t[m], u[m])
        return out

    # ------------------------------------------------------------------ bounds
    def bounds(self, q):
        """``lo, hi (n, P')`` bounds on the engine's ``distance - required`` of every non-allowed pair,
        ``exact (n, P')`` bool where the pair is known to within FAST_TOL, and ``mesh (n, P')`` bool
        where only the sphere bound is available (zone meshes)."""
        n = len(q)
        R, t = self._poses(q)
        a, b = self.sp_a, self.sp_b
        ca = np.einsum("nsij,sj->nsi", R[:, a], self.S_center[a]) + t[:, a]
        cb = np.einsum("nsij,sj->nsi", R[:, b], self.S_center[b]) + t[:, b]
        d = cb - ca
        lo = np.sqrt((d * d).sum(-1)) - self.S_radius[a] - self.S_radius[b] - 1e-9
        hi = np.full(lo.shape, np.inf)
        # half-spaces: exact
        for m in np.flatnonzero(self.sp_half):
            hs = self.slots[b[m]]["shape"]
            p = self._support(int(a[m]), R[:, a[m]], t[:, a[m]], np.broadcast_to(-hs.normal, (n, 3)).copy())
            val = p @ hs.normal - hs.offset
            lo[:, m] = val - 1e-9
            hi[:, m] = val + 1e-9
        return R, t, lo, hi

    def obb_lower(self, R, t, items, lo):
        """Raise ``lo`` at ``items`` (convex shape pairs) to the support gap of the shapes' outer boxes
        (exact for boxes, capsules and spheres) along the centre direction and both boxes' axes: a
        lower bound on the distance of separated convex solids."""
        rows, cols = items
        ac, bc = self.sp_a[cols], self.sp_b[cols]
        Ra, Rb = R[rows, ac], R[rows, bc]
        oa = np.einsum("kij,kj->ki", Ra, self.S_oc[ac]) + t[rows, ac]
        ob = np.einsum("kij,kj->ki", Rb, self.S_oc[bc]) + t[rows, bc]
        wa = self.S_ow[ac] @ np.swapaxes(Ra, 1, 2)  # (k, 3, 3) world half-axes (rows)
        wb = self.S_ow[bc] @ np.swapaxes(Rb, 1, 2)
        dc = ob - oa
        u0 = dc / np.maximum(np.sqrt(_dot(dc, dc)), 1e-300)[:, None]
        U = np.concatenate([u0[:, None], _unit_rows(wa), _unit_rows(wb)], axis=1)  # (k, 7, 3)
        sg = np.sign(_dot(U, dc[:, None]))
        U = U * np.where(sg == 0, 1.0, sg)[..., None]
        ha = _dot(U, oa[:, None]) + self.S_or[ac][:, None]
        hb = -_dot(U, ob[:, None]) + self.S_or[bc][:, None]
        for j in range(3):
            ha = ha + np.abs(_dot(U, wa[:, None, j]))
            hb = hb + np.abs(_dot(U, wb[:, None, j]))
        gap = (-hb - ha).max(axis=-1) - 1e-9
        lo[rows, cols] = np.where(gap > 0, np.maximum(lo[rows, cols], gap), lo[rows, cols])  # separated only

    def mesh_lower(self, R, t, items, lo, need=None):
        """Raise ``lo`` at ``items`` (body shape against a zone mesh) to a bound the engine's value never
        goes below: the part of its own mesh bound that does not use python-fcl (per triangle, the best
        support gap along the triangle normal, both signs, and the direction from the body's centre,
        or the sphere bound; the minimum over triangles). Where the body may lie inside the mesh, or
        the mesh inside the body (the engine then reports an intrusion of unknown depth), ``lo`` is
        set to ``-inf`` so the engine decides."""
        from . import geometry as gm

        rows, cols = items
        if need is None:
            need = np.full(len(rows), np.inf)
        for m in np.unique(cols):
            sel = cols == m
            r = rows[sel]
            want = need[sel]  # the distance that must be certified: triangles whose sphere bound is
            # already above it need no support gaps (their sphere bound is used as it is)
            a, b = int(self.sp_a[m]), int(self.sp_b[m])
            zone = self.slots[b]
            if not hasattr(self, "_V"):
                self._V, self._r = self._vertex_data()
            if "tris" not in zone:
                tris = np.asarray(zone["shape"].vertices)[np.asarray(zone["shape"].faces)]
                nrm = np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0])
                ln = np.linalg.norm(nrm, axis=1)
                zone["tris"] = tris
                zone["nrm"] = np.where(ln[:, None] > 0, nrm / np.where(ln > 0, ln, 1.0)[:, None], [0.0, 0.0, 1.0])
                zone["cen"] = tris.mean(axis=1)
                zone["rt"] = np.sqrt(((tris - zone["cen"][:, None]) ** 2).sum(axis=2)).max(axis=1)
            tris, nrm, cen, rt = zone["tris"], zone["nrm"], zone["cen"], zone["rt"]
            body = self.slots[a]
            Ra, ta = R[r, a], t[r, a]  # (k, 3, 3), (k, 3)
            ca = np.einsum("kij,j->ki", Ra, body["center"]) + ta
            dc = cen[None] - ca[:, None]  # (k, T, 3)
            ndc = np.sqrt((dc * dc).sum(-1))
            dc_u = np.where((ndc > 1e-300)[..., None], dc / np.where(ndc > 1e-300, ndc, 1.0)[..., None], [0.0, 0.0, 1.0])
            sph = ndc - rt[None] - body["radius"]  # (k, T)
            cand = sph < want[:, None]
            bound = np.where(cand, np.inf, sph).min(axis=1)
            kk, tt = np.nonzero(cand)
            if len(kk):
                if "hull" not in body:
                    body["hull"] = np.asarray(body["shape"].vertices) if isinstance(body["shape"], gm.Convex) else self._V[a]
                V = body["hull"]
                D = np.stack([nrm[tt], -nrm[tt], dc_u[kk, tt]], axis=1)  # (c, 3, 3) directions
                local = D @ Ra[kk]  # rows: R^T u
                h = (local @ V.T).max(axis=-1) + self._r[a] + (D @ ta[kk][:, :, None])[..., 0]
                tri_min = (D @ np.swapaxes(tris[tt], 1, 2)).min(axis=-1)
                gap = (tri_min - h).max(axis=-1)
                val = np.maximum(gap, sph[kk, tt])
                np.minimum.at(bound, kk, val)
            bound = bound - 1e-9
            new = np.maximum(lo[r, m], bound)
            pad = self.pad[m]
            # inside tests, as the engine makes them where the bound is positive
            test = new - pad > 0
            if test.any() and zone["shape"].watertight:
                ip = gm.interior_point(body["shape"])
                pts = np.einsum("kij,j->ki", Ra[test], ip) + ta[test]
                vz = np.asarray(zone["shape"].vertices)
                box = ((pts >= vz.min(axis=0)) & (pts <= vz.max(axis=0))).all(axis=1)  # outside the box: outside
                inside = np.zeros(len(pts), bool)
                if box.any():
                    inside[box] = gm.contains_points(zone["shape"], pts[box])
                idx = np.flatnonzero(test)[inside]
                new[idx] = -np.inf
            if test.any():
                v0 = np.asarray(zone["shape"].vertices)[0]
                loc = np.einsum("kji,kj->ki", Ra[test], v0[None] - ta[test])
                inside = gm.contains_points(body["shape"], loc)
                idx = np.flatnonzero(test)[inside]
                new[idx] = -np.inf
            new[~test] = -np.inf  # not certified positive: the engine may report an unknown depth
            lo[r, m] = new

    def _vertex_data(self):
        """Per slot: points ``(S, Vmax, 3)`` (padded by repeating the first) and a radius ``(S,)``: the
        solid is the convex hull of the points, inflated by the radius (sphere, capsule, box, hull)."""
        from . import geometry as gm

        pts, rad = [], []
        for sl in self.slots:
            s = sl["shape"]
            if isinstance(s, gm.Sphere):
                p, r = np.array([s.center]), s.radius
            elif isinstance(s, gm.Capsule):
                p, r = np.array([s.p0, s.p1]), s.radius
            elif isinstance(s, gm.Box):
                c = np.array(np.meshgrid([-0.5, 0.5], [-0.5, 0.5], [-0.5, 0.5], indexing="ij")).reshape(3, -1).T
                p, r = (c * s.extents) @ s.pose[:3, :3].T + s.pose[:3, 3], 0.0
            elif isinstance(s, gm.Convex):
                p, r = np.asarray(s.vertices), 0.0
            else:  # half-spaces, meshes, cylinders: never refined
                p, r = np.zeros((1, 3)), 0.0
            pts.append(np.asarray(p, dtype=np.float64))
            rad.append(float(r))
        self._Vs = pts  # unpadded, for the support search
        vmax = max(len(p) for p in pts)
        out = np.empty((len(pts), vmax, 3))
        for i, p in enumerate(pts):
            out[i, :len(p)] = p
            out[i, len(p):] = p[0]
        return out, np.array(rad)

    def _supp(self, slots, R, t, u):
        """World support points ``(k, 3)`` of ``slots (k,)`` posed by ``R, t`` along ``u (k, 3)``."""
        local = (u[:, None, :] @ R)[:, 0]  # R^T u
        p = np.empty_like(local)
        order = np.argsort(slots, kind="stable")
        ss = slots[order]
        cuts = np.flatnonzero(np.diff(ss)) + 1
        for grp in np.split(order, cuts):
            V = self._Vs[int(slots[grp[0]])]
            p[grp] = V[np.argmax(local[grp] @ V.T, axis=1)]
        r = self._r[slots]
        nu = np.sqrt(_dot(u, u))
        p = (R @ p[:, :, None])[:, :, 0] + t
        return p + (r / np.where(nu > 0, nu, 1.0))[:, None] * u

    def refine(self, R, t, items, lo, hi, tol=FAST_TOL, block=4096):
        """Narrow ``lo, hi (n, M)`` (shape-pair distances, padding not subtracted) at ``items`` (rows,
        shape-pair columns) by a vectorised GJK-style iteration on the Minkowski difference ``D = B - A``.

        Every iterate is an explicit convex combination of support points of D, so its length is an
        upper bound on the distance; ``z . s / |z|`` (``s`` the support of D towards the origin) is a
        lower bound (Gilbert 1966; the simplex is a triangle, its closest point to the origin found
        by enumerating the interior, edge and vertex candidates). Returns bool ``(k,)``: the interval
        is at most ``tol`` wide (the lower bound then also allows ``ENGINE_EPS``).
        """
        if not hasattr(self, "_V"):
            self._V, self._r = self._vertex_data()
        rows, cols = items
        k = len(rows)
        done = np.zeros(k, bool)
        for s0 in range(0, k, block):
            sl = slice(s0, min(k, s0 + block))
            done[sl] = self._refine_block(R, t, rows[sl], cols[sl], lo, hi, tol)
        return done

    def _refine_block(self, R, t, rows, cols, lo, hi, tol):
        k = len(rows)
        sa, sb = self.sp_a[cols], self.sp_b[cols]
        Ra, ta, Rb, tb = R[rows, sa], t[rows, sa], R[rows, sb], t[rows, sb]
        ca = np.einsum("kij,kj->ki", Ra, self.S_center[sa]) + ta
        cb = np.einsum("kij,kj->ki", Rb, self.S_center[sb]) + tb
        u0 = cb - ca
        u0 = np.where((np.abs(u0).sum(-1) > 0)[:, None], u0, [0.0, 0.0, 1.0])
        z = self._supp(sb, Rb, tb, -u0) - self._supp(sa, Ra, ta, u0)
        W = np.repeat(z[:, None], 3, axis=1)  # the simplex (a triangle, possibly degenerate)
        L = lo[rows, cols].copy()
        U = np.sqrt((z * z).sum(-1))
        act = np.arange(k)
        ok = np.zeros(k, bool)
        for _ in range(FW_ITERATIONS):
            if not len(act):
                break
            za = z[act]
            s = self._supp(sb[act], Rb[act], tb[act], -za) - self._supp(sa[act], Ra[act], ta[act], za)
            nz = np.sqrt((za * za).sum(-1))
            with np.errstate(invalid="ignore", divide="ignore"):
                gap = np.where(nz > 1e-15, (za * s).sum(-1) / nz, -np.inf)
            L[act] = np.maximum(L[act], gap)
            fin = (U[act] - L[act] <= tol)
            ok[act[fin]] = True
            stop = fin | (U[act] < 1e-9)  # converged, or touching/overlapping (the engine decides)
            keep = ~stop
            act, za, s = act[keep], za[keep], s[keep]
            if not len(act):
                break
            Wa = W[act]
            best_p, best_n = za, (za * za).sum(-1)
            best_T = Wa
            for i, j in ((0, 1), (0, 2), (1, 2)):
                T = np.stack([Wa[:, i], Wa[:, j], s], axis=1)
                p = _closest_to_origin(T)
                n2 = (p * p).sum(-1)
                better = n2 < best_n
                best_p = np.where(better[:, None], p, best_p)
                best_n = np.where(better, n2, best_n)
                best_T = np.where(better[:, None, None], T, best_T)
            z[act] = best_p
            W[act] = best_T
            U[act] = np.minimum(U[act], np.sqrt(best_n))
        ok &= L > 0  # separated: the engine's value is then within ENGINE_EPS of the distance
        lo[rows, cols] = np.where(ok, L - ENGINE_EPS, lo[rows, cols])
        hi[rows, cols] = np.minimum(hi[rows, cols], U)
        return ok

    # ------------------------------------------------------------------ worst margins
    def worst_margins(self, q, owner, engine, tol=FAST_TOL):
        """Engine-equivalent worst margin and clear verdict of configurations ``q (N, 6)``.

        ``owner (N,)`` is the pose each configuration belongs to: a configuration's margin is only
        narrowed as far as its pose's best margin needs (to ``tol``). Returns ``(margin_lo (N,),
        margin_hi (N,), clear (N,) bool, n_engine)``; the pose's best margin is known to lie in
        ``[max margin_lo, max margin_hi]`` of its configurations, an interval at most ``tol`` wide.
        """
        N = len(q)
        if N == 0:
            return np.zeros(0), np.zeros(0), np.zeros(0, bool), 0
        if self.n_pairs == 0:
            inf = np.full(N, np.inf)
            return inf, inf, np.ones(N, bool), 0
        # diagnostics of the last call: configurations sent to the engine, by reason
        self.stats = {"mesh": 0, "blocked": 0, "rounds": 0, "undecided": 0}
        R, t, lo_d, hi_d = self.bounds(q)
        # the engine's value is only known not to go below these bounds for separated solids (and,
        # for zone meshes, beyond the padding); elsewhere it is unbounded below
        # (half-space values are the engine's own, exact, at any depth)
        floor = np.where(self.sp_mesh, self.pad, 0.0)
        lo_d = np.where((lo_d > floor) | self.sp_half, lo_d, -np.inf)
        off = self.pad + self.required[self.sp_pair]  # distance -> margin
        exact = np.zeros(lo_d.shape, bool)
        exact[:, self.sp_half] = True
        tried = exact.copy()
        boxed = np.zeros(lo_d.shape, bool)
        engine_rows = np.zeros(N, bool)
        uniq, inv = np.unique(owner, return_inverse=True)

        def state():
            lo_m, hi_m = lo_d - off, hi_d - off
            W_lo, W_hi = lo_m.min(axis=1), hi_m.min(axis=1)
            best_lo = np.full(len(uniq), -np.inf)
            best_hi = np.full(len(uniq), -np.inf)
            np.maximum.at(best_lo, inv, W_lo)
            np.maximum.at(best_hi, inv, W_hi)
            decided = (W_lo >= 0) | (W_hi < 0)
            value = (W_hi > best_lo[inv]) & ((best_hi - best_lo) > tol)[inv] & ~engine_rows
            # a pair needs narrowing if its lower bound is below what the configuration must show:
            # W_hi - tol when the pose's best margin may be this configuration's, else 0 (the verdict)
            thr = np.where(value, W_hi - tol, np.where(decided | engine_rows, -np.inf, 0.0))
            return lo_m, thr

        for rnd in range(12):
            lo_m, thr = state()
            need = (lo_m < thr[:, None]) & ~exact
            if not need.any():
                break
            blocked = (need & tried).any(axis=1)  # a mesh pair or an unconverged pair decides: engine
            self.stats["mesh"] += int(((need & tried & self.sp_mesh).any(axis=1) & ~engine_rows).sum())
            self.stats["blocked"] += int((blocked & ~engine_rows).sum())
            engine_rows |= blocked
            need &= ~blocked[:, None]
            # the three lowest bounds of every configuration first: the worst pair is usually among them
            key = np.where(need, lo_m, np.inf)
            # zone meshes last: their bound is costly and gets cheaper as the worst margin drops
            other = (need & ~self.sp_mesh).any(axis=1)
            key = np.where(self.sp_mesh & other[:, None], np.inf, key)
            order = np.argsort(key, axis=1)[:, :(3 if rnd < 2 else 6 * rnd)]
            r3 = np.repeat(np.arange(N), order.shape[1])
            c3 = order.ravel()
            sel = need[r3, c3] & ~np.isposinf(key[r3, c3])
            rows, cols = r3[sel], c3[sel]
            if not len(rows):
                break
            mesh = self.sp_mesh[cols]
            if mesh.any():  # zone meshes: a lower bound only (the engine decides if they still matter)
                rm, cm = rows[mesh], cols[mesh]
                self.mesh_lower(R, t, (rm, cm), lo_d, need=thr[rm] + off[cm] + tol)
            cv = ~mesh & ~boxed[rows, cols]
            if cv.any():  # outer-box gaps first: often enough, and far cheaper than the iteration
                rb, cb = rows[cv], cols[cv]
                self.obb_lower(R, t, (rb, cb), lo_d)
                boxed[rb, cb] = True
                lo_m = lo_d - off
                still = lo_m[rb, cb] < thr[rb]
                skip = np.zeros(len(rows), bool)
                skip[np.flatnonzero(cv)[~still]] = True
                mesh_or_skip = mesh | skip
            else:
                mesh_or_skip = mesh
            g = ~mesh_or_skip
            if g.any():
                exact[rows[g], cols[g]] = self.refine(R, t, (rows[g], cols[g]), lo_d, hi_d, tol)
                tried[rows[g], cols[g]] = True
            tried[rows[mesh], cols[mesh]] = True
        else:
            lo_m, thr = state()
            more = ((lo_m < thr[:, None]) & ~exact).any(axis=1) & ~engine_rows
            self.stats["rounds"] += int(more.sum())
            engine_rows |= more
        lo_m, hi_m = lo_d - off, hi_d - off
        W_lo, W_hi = lo_m.min(axis=1), hi_m.min(axis=1)
        und = (W_lo < 0) & (W_hi >= 0) & ~engine_rows
        self.stats["undecided"] += int(und.sum())
        engine_rows |= und  # the verdict is not decided: the engine's
        clear = W_lo >= 0
        idx = np.flatnonzero(engine_rows)
        if len(idx):
            from .clearance import STATUS_CLEAR

            res = engine.evaluate(q[idx])
            W_lo[idx] = W_hi[idx] = res.worst_margin
            clear[idx] = res.overall == STATUS_CLEAR
        return W_lo, W_hi, clear, int(len(idx))


def _closest_to_origin(T):
    """Closest points to the origin of triangles ``T (k, 3, 3)`` (degenerate ones allowed), each an
    explicit convex combination of the corners: the interior solution where its barycentric weights
    are valid, else the best of the three edges (clamped segment parameters)."""
    p0, p1, p2 = T[:, 0], T[:, 1], T[:, 2]
    e1, e2 = p1 - p0, p2 - p0
    a11, a12, a22 = _dot(e1, e1), _dot(e1, e2), _dot(e2, e2)
    b1, b2 = -_dot(p0, e1), -_dot(p0, e2)
    det = a11 * a22 - a12 * a12
    good = det > 1e-12 * np.maximum(a11 * a22, 1e-300)
    sd = np.where(good, det, 1.0)
    l1 = (b1 * a22 - b2 * a12) / sd
    l2 = (a11 * b2 - a12 * b1) / sd
    inside = good & (l1 >= 0) & (l2 >= 0) & (l1 + l2 <= 1)
    best = p0 + l1[:, None] * e1 + l2[:, None] * e2
    best_n = np.where(inside, _dot(best, best), np.inf)
    for q0, q1 in ((p0, p1), (p0, p2), (p1, p2)):
        d = q1 - q0
        dd = _dot(d, d)
        tt = np.clip(-_dot(q0, d) / np.where(dd > 0, dd, 1.0), 0.0, 1.0)
        c = q0 + tt[:, None] * d
        n2 = _dot(c, c)
        better = n2 < best_n
        best = np.where(better[:, None], c, best)
        best_n = np.where(better, n2, best_n)
    return best


def _dot(a, b):
    """``a . b`` over a last axis of length 3."""
    return a[..., 0] * b[..., 0] + a[..., 1] * b[..., 1] + a[..., 2] * b[..., 2]


def _unit_rows(w):
    """Rows of ``w (..., 3, 3)`` scaled to unit length (zero rows stay zero)."""
    n = np.sqrt(_dot(w, w))
    return w / np.where(n > 0, n, 1.0)[..., None]


def _outer_box(gm, s):
    """``(centre (3,), half-axes (3, 3) rows, radius)``: an outer box (inflated by the radius) of a
    shape in its own frame; its support ``u.c + sum |u.w_j| + r|u|`` is >= the shape's."""
    w = np.zeros((3, 3))
    if isinstance(s, gm.Sphere):
        return np.array(s.center), w, s.radius
    if isinstance(s, gm.Capsule):
        w[0] = 0.5 * (s.p1 - s.p0)
        return 0.5 * (s.p0 + s.p1), w, s.radius
    if isinstance(s, gm.Box):
        return np.array(s.pose[:3, 3]), (s.pose[:3, :3] * (0.5 * s.extents)).T, 0.0
    if isinstance(s, (gm.Convex, gm.TriMesh)):
        v = np.asarray(s.vertices)
        m = v.mean(axis=0)
        _, vec = np.linalg.eigh(np.cov((v - m).T) + 1e-18 * np.eye(3))
        proj = (v - m) @ vec
        lo, hi = proj.min(axis=0), proj.max(axis=0)
        c = m + vec @ (0.5 * (lo + hi))
        half = 0.5 * (hi - lo) * (1 + 1e-9) + 1e-12
        return c, (vec * half).T, 0.0
    return np.zeros(3), w, np.inf  # half-spaces, cylinders: not used
