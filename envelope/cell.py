"""The cell: arm, mount, link and tool geometry, zones, frames and targets, all in metres and radians.

``load_cell(path)`` reads a cell file (TOML, see docs/cell-file.md) into an immutable ``Cell``; a
``Cell`` can also be built directly from Python.
"""

from __future__ import annotations

import csv
import io
import os
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .cellshapes import (
    BODY_MESH_MODEL,
    POSE_KEYS,
    Reader,
    generated_link_shapes,
    read_shapes,
    suggest,
    transform_shape,
    warn_short_generated_links,
)
from .errors import CellFileError, InputError, PoseError, ProgramError
from .geometry import ZONE_KINDS, Body, Zone
from .kinematics import Arm
from .kinematics.arm import CONVENTIONS, N_JOINTS
from .poses import invert, pose_from_euler, pose_from_matrix, pose_from_quaternion
from .units import ANGLE_SCALE, LENGTH_SCALE, to_metres, to_mm


@dataclass(frozen=True, eq=False)
class Tool:
    """The tool on the flange: ``flange_from_tcp`` (4, 4) and its bodies (frame 6), payload included."""

    flange_from_tcp: np.ndarray
    bodies: tuple = ()


@dataclass(frozen=True, eq=False)
class Target:
    """A named TCP pose in the cell frame, with where it was given (for messages and reports)."""

    name: str
    world_from_tcp: np.ndarray
    frame: str = "world"
    source: str = ""


MOTIONS = ("joint", "linear")
"""Motion types of a program move: joint-interpolated or straight-line TCP."""


@dataclass(frozen=True)
class Move:
    """One move of a program: to target ``to`` by ``motion``; optional IK ``branch`` label and a
    ``stopping_allowance`` (metres) that replaces the cell's for this move (``None``: the cell's)."""

    to: str
    motion: str = "joint"
    branch: str | None = None
    stopping_allowance: float | None = None


@dataclass(frozen=True)
class Program:
    """A named, ordered list of moves, with where it was given."""

    name: str
    moves: tuple = ()
    source: str = ""


DEVICE_KINDS = ("perpendicular", "multi-beam", "single-beam")
"""Kinds of protective device (ISO 13855 approach): an area-guarding curtain approached at right angles
(needs its detection capability), a multi-beam or a single-beam device."""


@dataclass(frozen=True, eq=False)
class ProtectiveDevice:
    """An electro-sensitive protective device (light curtain, beams) that stops the arm.

    Attributes
    ----------
    name, kind : str
        ``kind`` is one of ``DEVICE_KINDS``.
    response_time, stopping_time : float
        Seconds: the device's response time and the arm's stopping time; ISO 13855's T is their sum.
    detection_capability : float or None
        Metres (``"perpendicular"`` only; None for beam devices).
    points : (m, 2) float
        Metres, cell frame XY: the polyline (m >= 2) along which the device's vertical detection plane
        stands; its distance to the restricted space is measured horizontally.
    source : str
        Where it was given.
    """

    name: str
    kind: str
    response_time: float
    stopping_time: float
    detection_capability: float | None
    points: np.ndarray
    source: str = ""

    @property
    def total_time(self) -> float:
        """T (s): response time plus stopping time."""
        return self.response_time + self.stopping_time


RISKS = ("high", "low")
"""ISO 13857 risk levels of a cell (which reach-over table applies); ``"high"`` unless the file says."""


@dataclass(frozen=True, eq=False)
class Cell:
    """An immutable cell. Lengths in metres, angles in radians.

    Attributes
    ----------
    world_from_base : (4, 4)
        The arm's mount pose in the cell.
    links : tuple of Body
        The arm's bodies; ``links[i].frame`` is the DH frame it moves with (0 = base).
    self_pairs_allowed : frozenset of frozenset
        Pairs of body names that may touch (not checked for self-contact).
    warnings : tuple of str
        Load-time warnings (non-watertight zone meshes...), repeated in the report.
    inputs : tuple of (str, str)
        Every file read, with its SHA-256 hex digest (paths relative to the cell file's folder).
    frames : dict of str to (4, 4)
        ``world_from_frame`` of every named frame, the built-in ``"world"`` and ``"base"`` included.
    programs : tuple of Program
        The cell file's programs, in file order.
    settings : dict
        What the loader used: ``units``, ``angle_units`` of the file; ``required_clearance`` (zone
        kind -> metres); ``self_clearance``, ``stopping_allowance`` (metres); ``body_mesh_model``
        (``"convex hull"``: link/tool meshes are replaced by their hulls); ``generated_links``
        (names of links given capsules from the DH table); ``zone_meshes`` ((zone, file,
        watertight) triples); ``soft_limits`` ((6, 2) radians, read-only: the soft axis limits,
        equal to the mechanical limits where the file gives none); ``soft_limit_joints`` (1-based
        numbers of the joints with a soft limit given); ``risk`` (``"high"`` or ``"low"``, ISO 13857).
    devices : tuple of ProtectiveDevice
        The cell's protective devices (``[[devices]]``), in file order.
    """

    name: str
    arm: Arm
    world_from_base: np.ndarray
    links: tuple
    tool: Tool
    zones: tuple
    frames: dict = field(default_factory=dict)
    targets: tuple = ()
    self_pairs_allowed: frozenset = frozenset()
    self_clearance: float = 0.0
    stopping_allowance: float = 0.0
    programs: tuple = ()
    source: str = ""
    warnings: tuple = ()
    inputs: tuple = ()
    settings: dict = field(default_factory=dict)
    devices: tuple = ()

    @property
    def bodies(self) -> tuple:
        """Every moving body: the arm's links, then the tool's bodies."""
        return tuple(self.links) + tuple(self.tool.bodies)

    def base_from_flange(self, world_from_tcp) -> np.ndarray:
        """Flange poses in the arm's base frame that put the TCP at ``world_from_tcp`` ``(..., 4, 4)``."""
        return invert(self.world_from_base) @ np.asarray(world_from_tcp, dtype=np.float64) @ invert(
            self.tool.flange_from_tcp
        )

    def target(self, name: str) -> Target:
        for t in self.targets:
            if t.name == name:
                return t
        raise KeyError(name)


# ====================================================================== loading a cell file
DEFAULT_CLEARANCE_MM = {
    "fence": 100.0,
    "guard": 100.0,
    "keep-out": 50.0,
    "fixture": 20.0,
    "machine": 25.0,
    "floor": 20.0,
    "wall": 50.0,
    "ceiling": 50.0,
}
"""Required clearance (mm) per zone kind when the cell file's ``[required_clearance]`` does not say.
Project defaults (common practice, no source): every cell should state its own."""
DEFAULT_SELF_CLEARANCE_MM = 10.0
"""Required clearance (mm) between bodies of the arm and tool when ``self_clearance`` is not given."""

BUILTIN_FRAMES = ("world", "base")
"""Frames every cell has: the cell frame and the arm's base frame (placed by ``[arm.mount]``)."""

TOP_KEYS = ("name", "units", "angle_units", "required_clearance", "self_clearance", "stopping_allowance",
            "allowed_self_pairs", "frames", "arm", "tool", "zones", "targets", "targets_file", "programs",
            "risk", "devices")
ARM_KEYS = ("name", "convention", "joints", "mount", "links", "capsule_radius", "padding")
JOINT_KEYS = ("a", "alpha", "d", "offset", "min", "max", "soft_min", "soft_max")
LINK_KEYS = ("link", "name", "padding")
TOOL_KEYS = ("name", "tcp", "padding", "payload")
PAYLOAD_KEYS = ("name", "padding")
ZONE_KEYS = ("name", "kind", "clearance", "allowed", "frame")
TARGET_KEYS = ("name", "frame") + POSE_KEYS
PROGRAM_KEYS = ("name", "moves")
MOVE_KEYS = ("to", "motion", "branch", "stopping_allowance")
DEVICE_KEYS = ("name", "kind", "response_time", "stopping_time", "detection_capability", "points")

CSV_COLUMNS = ("name", "frame", "x", "y", "z", "convention", "euler_1", "euler_2", "euler_3",
               "qw", "qx", "qy", "qz", "r11", "r12", "r13", "r21", "r22", "r23", "r31", "r32", "r33")
"""Columns a targets CSV may have (header row required; see docs/cell-file.md)."""


def load_cell(path) -> Cell:
    """Read a cell file (TOML, docs/cell-file.md) into a ``Cell`` in metres and radians.

    Relative paths in the file resolve against the file's folder. Every file read is recorded with
    its SHA-256 in ``Cell.inputs``; load-time warnings (non-watertight zone meshes, no tool...) in
    ``Cell.warnings``.

    Raises
    ------
    CellFileError, PoseError, ProgramError (all InputError)
        Naming the file, the item and what is wrong.
    """
    path = Path(os.path.normpath(Path(path).absolute()))
    if not path.is_file():
        raise CellFileError(f"cell file not found (looked for {path})", file=path)
    reader = Reader(file=path)
    raw = reader.record(path)
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise CellFileError(f"not UTF-8 text ({exc})", file=path) from None
    except tomllib.TOMLDecodeError as exc:
        raise CellFileError(f"not valid TOML: {exc}", file=path) from None
    try:
        return _load(reader, data)
    except PoseError as exc:
        raise exc.located(file=path) from None


def _load(r: Reader, data: dict) -> Cell:
    r.check_keys(data, TOP_KEYS, None, "the top level")
    r.units = r.string(data, "units", "top level", default="mm", choices=tuple(LENGTH_SCALE))
    r.angle_units = r.string(data, "angle_units", "top level", default="deg", choices=tuple(ANGLE_SCALE))
    name = r.string(data, "name", "top level", default=r.file.stem)

    # clearances
    table = r.table(data, "required_clearance", "[required_clearance]") or {}
    r.check_keys(table, ZONE_KINDS, "[required_clearance]")
    clearance = {
        kind: float(r.length(r.number(table, kind, "[required_clearance]", sign=">=0")) if kind in table
                    else to_metres(DEFAULT_CLEARANCE_MM[kind], "mm"))
        for kind in ZONE_KINDS
    }
    self_clearance = float(r.length(r.number(data, "self_clearance", "top level", sign=">=0"))
                           if "self_clearance" in data else to_metres(DEFAULT_SELF_CLEARANCE_MM, "mm"))
    stopping = float(r.length(r.number(data, "stopping_allowance", "top level", required=False, default=0.0,
                                       sign=">=0")))
    risk = r.string(data, "risk", "top level", default="high", choices=RISKS)

    # arm and frames
    arm_table = r.table(data, "arm", "[arm]", required=True)
    arm, mount, mount_parent, links, generated, soft_limits, soft_joints = _read_arm(r, arm_table)
    frames = _resolve_frames(r, r.table(data, "frames", "[frames]") or {}, mount, mount_parent)
    world_from_base = frames["base"]

    tool = _read_tool(r, data.get("tool"))
    bodies = tuple(links) + tuple(tool.bodies)
    names = [b.name for b in bodies]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise r.error(f"two bodies share the name {dupes[0]!r}: link, tool and payload names must be unique",
                      "[arm]/[tool]")
    allowed_pairs = _read_self_pairs(r, data, names)
    warn_short_generated_links(r, links, generated, allowed_pairs, self_clearance)

    zones, mesh_notes = _read_zones(r, data, frames, clearance, names)
    targets = _read_targets(r, data, frames)
    programs = _read_programs(r, data, targets)
    devices = _read_devices(r, data)

    settings = {
        "units": r.units,
        "angle_units": r.angle_units,
        "required_clearance": dict(clearance),
        "self_clearance": self_clearance,
        "stopping_allowance": stopping,
        "body_mesh_model": BODY_MESH_MODEL,
        "generated_links": tuple(generated),
        "zone_meshes": tuple(mesh_notes),
        "soft_limits": soft_limits,
        "soft_limit_joints": soft_joints,
        "risk": risk,
    }
    return Cell(
        name=name,
        arm=arm,
        world_from_base=world_from_base,
        links=tuple(links),
        tool=tool,
        zones=tuple(zones),
        frames=frames,
        targets=tuple(targets),
        self_pairs_allowed=frozenset(allowed_pairs),
        self_clearance=self_clearance,
        stopping_allowance=stopping,
        programs=tuple(programs),
        source=str(r.file),
        warnings=tuple(r.warnings),
        inputs=tuple(r.inputs.items()),
        settings=settings,
        devices=tuple(devices),
    )


# ---------------------------------------------------------------------- arm
def _read_arm(r: Reader, t: dict):
    item = "[arm]"
    r.check_keys(t, ARM_KEYS, item)
    arm_name = r.string(t, "name", item, default="arm")
    convention = r.string(t, "convention", item, required=True, choices=CONVENTIONS)
    rows = r.tables(t, "joints", item)
    if len(rows) != N_JOINTS:
        raise r.error(f"[[arm.joints]] must have {N_JOINTS} rows (one per joint), got {len(rows)}", item)
    cols = {k: [] for k in JOINT_KEYS}
    soft, soft_joints = [], []
    for j, row in enumerate(rows, start=1):
        where = f"[[arm.joints]] joint {j}"
        r.check_keys(row, JOINT_KEYS, where)
        cols["a"].append(r.length(r.number(row, "a", where)))
        cols["alpha"].append(r.angle(r.number(row, "alpha", where)))
        cols["d"].append(r.length(r.number(row, "d", where)))
        cols["offset"].append(r.angle(r.number(row, "offset", where, required=False, default=0.0)))
        lo, hi = r.number(row, "min", where), r.number(row, "max", where)
        if not lo < hi:
            raise r.error(f"joint limit 'min' {lo:g} must be below 'max' {hi:g} ({r.angle_units})", where)
        cols["min"].append(r.angle(lo))
        cols["max"].append(r.angle(hi))
        soft_lo = r.number(row, "soft_min", where, required=False, default=None)
        soft_hi = r.number(row, "soft_max", where, required=False, default=None)
        if soft_lo is not None or soft_hi is not None:
            soft_joints.append(j)
        soft_lo = lo if soft_lo is None else soft_lo
        soft_hi = hi if soft_hi is None else soft_hi
        units = r.angle_units
        if soft_lo < lo:
            raise r.error(f"soft limit 'soft_min' {soft_lo:g} is below the mechanical 'min' {lo:g} ({units}): soft "
                          "limits must lie within the mechanical limits", where)
        if soft_hi > hi:
            raise r.error(f"soft limit 'soft_max' {soft_hi:g} is above the mechanical 'max' {hi:g} ({units}): soft "
                          "limits must lie within the mechanical limits", where)
        if not soft_lo < soft_hi:
            raise r.error(f"soft limit 'soft_min' {soft_lo:g} must be below 'soft_max' {soft_hi:g} ({units})", where)
        soft.append((r.angle(soft_lo), r.angle(soft_hi)))
    limits = np.column_stack([cols["min"], cols["max"]])
    soft_limits = np.array(soft, dtype=np.float64).reshape(N_JOINTS, 2)
    soft_limits.flags.writeable = False
    try:
        arm = Arm.from_dh(cols["a"], cols["alpha"], cols["d"], cols["offset"], limits, convention, name=arm_name)
    except InputError as exc:
        raise exc.located(file=r.file, item=item) from None

    mount_table = r.table(t, "mount", "[arm.mount]", required=True)
    r.check_keys(mount_table, ("frame",) + POSE_KEYS, "[arm.mount]")
    mount_parent = r.string(mount_table, "frame", "[arm.mount]", default="world")
    mount = r.pose(mount_table, "[arm.mount]", "mount pose")

    padding = float(r.length(r.number(t, "padding", item, required=False, default=0.0, sign=">=0")))
    radius = t.get("capsule_radius")
    if radius is not None:
        radius = float(r.length(r.number(t, "capsule_radius", item, sign=">0")))

    given = {}
    for k, lt in enumerate(r.tables(t, "links", item), start=1):
        where = f"[[arm.links]] entry {k}"
        index = r.integer(lt, "link", where)
        if not 0 <= index <= N_JOINTS:
            raise r.error(f"key 'link' must be 0 (base) .. {N_JOINTS} (flange), got {index}", where)
        where = f"link {index}"
        if index in given:
            raise r.error(f"link {index} is given twice in [[arm.links]]", where)
        given[index] = lt

    links, generated = [], []
    for index in range(N_JOINTS + 1):
        lt = given.get(index, {})
        where = f"link {index}"
        body_name = r.string(lt, "name", where, default=f"link {index}")
        where = f'link {index} "{body_name}"'
        link_padding = float(r.length(r.number(lt, "padding", where, sign=">=0"))) if "padding" in lt else padding
        parts = read_shapes(r, lt, where, LINK_KEYS, for_zone=False) if lt else []
        if parts:
            shapes = tuple(s for _, s, _ in parts)
        else:
            if radius is None:
                raise r.error(
                    f"link {index} has no geometry and [arm] 'capsule_radius' is not given: give the link a "
                    "shape in [[arm.links]] or set 'capsule_radius' to generate capsules from the DH table",
                    where,
                )
            shapes = tuple(generated_link_shapes(arm.a, arm.alpha, arm.d, convention, index, radius))
            generated.append(body_name)
        links.append(Body(name=body_name, frame=index, shapes=shapes, padding=link_padding, role="link"))
    return arm, mount, mount_parent, links, generated, soft_limits, tuple(soft_joints)


# ---------------------------------------------------------------------- frames
def _resolve_frames(r: Reader, table: dict, mount: np.ndarray, mount_parent: str) -> dict:
    """``{name: world_from_frame}`` for every named frame, 'world' and 'base' included."""
    defs = {"base": (mount_parent, mount, "[arm.mount]")}
    for name, ft in table.items():
        item = f'frame "{name}"'
        if name in BUILTIN_FRAMES:
            raise r.error(f"the frame name {name!r} is built in and cannot be redefined", item)
        if not isinstance(ft, dict):
            raise r.error(f"[frames.{name}] must be a table, got {type(ft).__name__}", item)
        r.check_keys(ft, ("parent",) + POSE_KEYS, item)
        parent = r.string(ft, "parent", item, default="world")
        defs[name] = (parent, r.pose(ft, item, "frame pose"), item)
    known = ("world",) + tuple(defs)
    for name, (parent, _, item) in defs.items():
        if parent not in known:
            raise r.error(f"unknown parent frame {parent!r}{suggest(parent, known)}", item)

    world = np.eye(4)
    world.flags.writeable = False
    out = {"world": world}

    def resolve(name, chain):
        if name in out:
            return out[name]
        if name in chain:
            loop = " -> ".join(chain[chain.index(name):] + [name])
            raise r.error(f"frames form a cycle: {loop}", defs[name][2])
        parent, parent_from_frame, _ = defs[name]
        world_from_frame = resolve(parent, chain + [name]) @ parent_from_frame
        world_from_frame.flags.writeable = False
        out[name] = world_from_frame
        return world_from_frame

    for name in defs:
        resolve(name, [])
    return out


def _frame(r: Reader, frames: dict, table: dict, item) -> tuple[str, np.ndarray]:
    name = r.string(table, "frame", item, default="world")
    if name not in frames:
        raise r.error(f"unknown frame {name!r}{suggest(name, frames)}; known frames: {', '.join(frames)}", item)
    return name, frames[name]


# ---------------------------------------------------------------------- tool
def _read_tool(r: Reader, t):
    if t is None:
        r.warnings.append("no [tool]: the TCP is the flange and no tool geometry is checked")
        return Tool(flange_from_tcp=np.eye(4), bodies=())
    item = "[tool]"
    if not isinstance(t, dict):
        raise r.error("[tool] must be a table", item)
    tool_name = r.string(t, "name", item, default="tool")
    item = f'tool "{tool_name}"'
    tcp = r.table(t, "tcp", "[tool.tcp]", required=True)
    r.check_keys(tcp, POSE_KEYS, "[tool.tcp]")
    flange_from_tcp = r.pose(tcp, "[tool.tcp]", "TCP pose")
    flange_from_tcp.flags.writeable = False
    padding = float(r.length(r.number(t, "padding", item, required=False, default=0.0, sign=">=0")))
    parts = read_shapes(r, t, item, TOOL_KEYS, for_zone=False)
    bodies = []
    if parts:
        bodies.append(Body(tool_name, 6, tuple(s for _, s, _ in parts), padding, role="tool"))
    else:
        r.warnings.append(f"{item} has no shape: only the arm's links are checked, not the tool")
    payload = r.table(t, "payload", "[tool.payload]")
    if payload is not None:
        pname = r.string(payload, "name", "[tool.payload]", default="payload")
        pitem = f'payload "{pname}"'
        ppad = float(r.length(r.number(payload, "padding", pitem, required=False, default=0.0, sign=">=0")))
        pparts = read_shapes(r, payload, pitem, PAYLOAD_KEYS, for_zone=False)
        if not pparts:
            raise r.error("[tool.payload] needs a shape ('shape = ...' or [[tool.payload.parts]])", pitem)
        bodies.append(Body(pname, 6, tuple(s for _, s, _ in pparts), ppad, role="payload"))
    return Tool(flange_from_tcp=flange_from_tcp, bodies=tuple(bodies))


def _read_self_pairs(r: Reader, data: dict, names: list) -> set:
    item = "allowed_self_pairs"
    value = data.get(item, [])
    ok = isinstance(value, list) and all(
        isinstance(p, list) and len(p) == 2 and all(isinstance(n, str) for n in p) for p in value
    )
    if not ok:
        raise r.error('must be a list of pairs of body names, e.g. [["link 3", "link 5"]]', item)
    out = set()
    for k, (a, b) in enumerate(value, start=1):
        for n in (a, b):
            if n not in names:
                raise r.error(f"pair {k}: unknown body {n!r}{suggest(n, names)}; bodies: {', '.join(names)}", item)
        if a == b:
            raise r.error(f"pair {k} names the same body twice ({a!r})", item)
        out.add(frozenset((a, b)))
    return out


# ---------------------------------------------------------------------- zones
def _read_zones(r: Reader, data: dict, frames: dict, clearance: dict, body_names: list):
    zones, notes, seen = [], [], set()
    for k, zt in enumerate(r.tables(data, "zones", "[[zones]]"), start=1):
        if "name" not in zt:
            raise r.error("missing key 'name' (a string)", f"[[zones]] entry {k}")
        zname = r.string(zt, "name", f"[[zones]] entry {k}", required=True)
        item = f'zone "{zname}"'
        if zname in seen:
            raise r.error("two zones have this name", item)
        seen.add(zname)
        kind = r.string(zt, "kind", item, required=True, choices=ZONE_KINDS)
        req = clearance[kind]
        if "clearance" in zt:
            req = float(r.length(r.number(zt, "clearance", item, sign=">=0")))
        allowed = zt.get("allowed", [])
        if not isinstance(allowed, list) or not all(isinstance(n, str) for n in allowed):
            raise r.error("key 'allowed' must be a list of body names", item)
        for n in allowed:
            if n not in body_names:
                raise r.error(f"'allowed' names an unknown body {n!r}{suggest(n, body_names)}", item)
        _, world_from_frame = _frame(r, frames, zt, item)
        parts = read_shapes(r, zt, item, ZONE_KEYS, for_zone=True)
        if not parts:
            raise r.error("a zone needs a shape ('shape = ...' or [[zones.parts]])", item)
        shapes, panels, attributes = [], [], {}
        for suffix, shape, info in parts:
            shapes.append(transform_shape(shape, world_from_frame))
            panels.append(f"{zname}/{suffix}" if suffix else zname)
            attributes.update(info.get("attributes", {}))
            if "watertight" in info:
                notes.append((zname, info["file"], info["watertight"]))
                if not info["watertight"]:
                    r.warnings.append(
                        f'zone "{zname}": mesh file {info["file"]!r} is not watertight: it is checked as a '
                        "surface only (a body wholly inside it is not detected)"
                    )
        zones.append(Zone(zname, kind, tuple(shapes), req, frozenset(allowed), tuple(panels), attributes))
    return zones, notes


# ---------------------------------------------------------------------- targets
def _read_targets(r: Reader, data: dict, frames: dict) -> list:
    targets = []
    for k, tt in enumerate(r.tables(data, "targets", "[[targets]]"), start=1):
        if "name" not in tt:
            raise r.error("missing key 'name' (a string)", f"[[targets]] entry {k}")
        tname = r.string(tt, "name", f"[[targets]] entry {k}", required=True)
        item = f'target "{tname}"'
        r.check_keys(tt, TARGET_KEYS, item)
        fname, world_from_frame = _frame(r, frames, tt, item)
        frame_from_tcp = r.pose(tt, item, "target pose")
        targets.append(_target(tname, world_from_frame @ frame_from_tcp, fname, f"{r.file.name} [[targets]] {k}"))

    files = data.get("targets_file", [])
    if isinstance(files, str):
        files = [files]
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        raise r.error("must be a file name or a list of file names", "targets_file")
    for name in files:
        targets.extend(_read_targets_csv(r, r.resolve(name, "targets_file"), frames))

    seen = {}
    for t in targets:
        if t.name in seen:
            raise r.error(f"target {t.name!r} is defined twice ({seen[t.name]} and {t.source})", f'target "{t.name}"')
        seen[t.name] = t.source
    return targets


def _target(name, world_from_tcp, frame, source) -> Target:
    world_from_tcp = np.array(world_from_tcp, dtype=np.float64)
    world_from_tcp.flags.writeable = False
    return Target(name=name, world_from_tcp=world_from_tcp, frame=frame, source=source)


def _read_targets_csv(r: Reader, path: Path, frames: dict) -> list:
    text = r.record(path)
    try:
        lines = text.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise CellFileError(f"not UTF-8 text ({exc})", file=path) from None
    rows = csv.reader(io.StringIO(lines))
    header = None
    out = []
    for row in rows:
        line = rows.line_num
        if not row or all(not c.strip() for c in row) or row[0].lstrip().startswith("#"):
            continue
        if header is None:
            header = [c.strip() for c in row]
            for col in header:
                if col not in CSV_COLUMNS:
                    raise CellFileError(
                        f"unknown column {col!r}{suggest(col, CSV_COLUMNS)}; columns: {', '.join(CSV_COLUMNS)}",
                        file=path, item=f"row {line} (header)",
                    )
            for col in ("name", "x", "y", "z"):
                if col not in header:
                    raise CellFileError(f"missing column {col!r}", file=path, item=f"row {line} (header)")
            continue
        item = f"row {line}"
        if len(row) != len(header):
            raise CellFileError(f"expected {len(header)} cells as in the header, got {len(row)}", file=path, item=item)
        cells = {h: c.strip() for h, c in zip(header, row) if c.strip() != ""}
        name = cells.get("name")
        if not name:
            raise CellFileError("empty 'name'", file=path, item=item)
        item = f'row {line} target "{name}"'

        def num(col):
            try:
                v = float(cells[col])
            except ValueError:
                raise CellFileError(f"column {col!r} must be a number, got {cells[col]!r}", file=path,
                                    item=item) from None
            if not np.isfinite(v):
                raise CellFileError(f"column {col!r} must be finite, got {cells[col]!r}", file=path, item=item)
            return v

        for col in ("x", "y", "z"):
            if col not in cells:
                raise CellFileError(f"empty column {col!r}", file=path, item=item)
        xyz = r.length([num("x"), num("y"), num("z")])
        groups = {
            "euler": ("euler_1", "euler_2", "euler_3"),
            "quaternion": ("qw", "qx", "qy", "qz"),
            "matrix": ("r11", "r12", "r13", "r21", "r22", "r23", "r31", "r32", "r33"),
        }
        used = [g for g, cols in groups.items() if any(c in cells for c in cols)]
        if len(used) > 1:
            raise CellFileError(f"give only one orientation (euler, quaternion or matrix), got {used}", file=path,
                                item=item)
        if "convention" in cells and used != ["euler"]:
            raise CellFileError("column 'convention' is only used with euler_1..3", file=path, item=item)
        for g in used:
            missing = [c for c in groups[g] if c not in cells]
            if missing:
                raise CellFileError(f"{g} orientation is missing columns {missing}", file=path, item=item)
        try:
            if used == ["quaternion"]:
                pose = pose_from_quaternion(xyz, [num(c) for c in groups["quaternion"]])
            elif used == ["matrix"]:
                pose = np.eye(4)
                pose[:3, :3] = np.reshape([num(c) for c in groups["matrix"]], (3, 3))
                pose[:3, 3] = xyz
                pose = pose_from_matrix(pose)
            else:
                angles = [num(c) for c in groups["euler"]] if used else [0.0, 0.0, 0.0]
                pose = pose_from_euler(xyz, r.angle(angles), cells.get("convention", "fixed-xyz"))
        except PoseError as exc:
            raise PoseError(exc.problem, file=path, item=item) from None
        fname = cells.get("frame", "world")
        if fname not in frames:
            raise CellFileError(f"unknown frame {fname!r}{suggest(fname, frames)}", file=path, item=item)
        out.append(_target(name, frames[fname] @ pose, fname, f"{path.name} row {line}"))
    if header is None:
        r.warnings.append(f"targets file {path.name!r} is empty")
    return out


# ---------------------------------------------------------------------- programs
def _read_programs(r: Reader, data: dict, targets: list) -> list:
    names = [t.name for t in targets]
    out, seen = [], set()
    for k, pt in enumerate(r.tables(data, "programs", "[[programs]]"), start=1):
        if "name" not in pt:
            raise r.error("missing key 'name' (a string)", f"[[programs]] entry {k}", cls=ProgramError)
        pname = r.string(pt, "name", f"[[programs]] entry {k}", required=True)
        item = f'program "{pname}"'
        if pname in seen:
            raise r.error("two programs have this name", item, cls=ProgramError)
        seen.add(pname)
        r.check_keys(pt, PROGRAM_KEYS, item)
        moves = []
        move_tables = r.tables(pt, "moves", item)
        if not move_tables:
            raise r.error("a program needs at least one move in 'moves'", item, cls=ProgramError)
        for m, mt in enumerate(move_tables, start=1):
            where = f"{item} move {m}"
            r.check_keys(mt, MOVE_KEYS, where)
            to = r.string(mt, "to", where, required=True)
            if to not in names:
                raise r.error(f"unknown target {to!r}{suggest(to, names)}", where, cls=ProgramError)
            motion = r.string(mt, "motion", where, required=True, choices=MOTIONS)
            branch = r.string(mt, "branch", where, default=None)
            allowance = None
            if "stopping_allowance" in mt:
                allowance = float(r.length(r.number(mt, "stopping_allowance", where, sign=">=0")))
            moves.append(Move(to=to, motion=motion, branch=branch, stopping_allowance=allowance))
        out.append(Program(name=pname, moves=tuple(moves), source=f"{r.file.name} [[programs]] {k}"))
    return out


# ---------------------------------------------------------------------- protective devices
def _read_devices(r: Reader, data: dict) -> list:
    from .standards import protective_device_distance

    out, seen = [], set()
    for k, dt in enumerate(r.tables(data, "devices", "[[devices]]"), start=1):
        if "name" not in dt:
            raise r.error("missing key 'name' (a string)", f"[[devices]] entry {k}")
        dname = r.string(dt, "name", f"[[devices]] entry {k}", required=True)
        item = f'device "{dname}"'
        if dname in seen:
            raise r.error("two devices have this name", item)
        seen.add(dname)
        r.check_keys(dt, DEVICE_KEYS, item)
        kind = r.string(dt, "kind", item, required=True, choices=DEVICE_KINDS)
        response = r.number(dt, "response_time", item, sign=">=0")
        stopping = r.number(dt, "stopping_time", item, sign=">=0")
        d = None
        if kind == "perpendicular":
            if "detection_capability" not in dt:
                raise r.error("missing key 'detection_capability' (a length > 0): a device of kind 'perpendicular' "
                              "needs it", item)
            d = float(r.length(r.number(dt, "detection_capability", item, sign=">0")))
        elif "detection_capability" in dt:
            raise r.error(f"key 'detection_capability' applies to kind 'perpendicular' only, got it for {kind!r}", item)
        points = r.length(r.points(dt, "points", item, 2, 2))
        if (np.sqrt((np.diff(points, axis=0) ** 2).sum(axis=1)) == 0).any():
            raise r.error("key 'points' has two equal consecutive points", item)
        try:  # the standard's own limits (0 < d <= 70 mm for a perpendicular approach)
            protective_device_distance(response + stopping, None if d is None else float(to_mm(d)), kind)
        except InputError as exc:
            raise r.error(f"not a valid ISO 13855 device: {exc.problem}", item) from None
        points.flags.writeable = False
        out.append(ProtectiveDevice(dname, kind, float(response), float(stopping), d, points,
                                    f"{r.file.name} [[devices]] {k}"))
    return out
