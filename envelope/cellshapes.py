"""Reading the pieces of a cell file: typed keys, poses, shapes, meshes, fence runs and prisms.

Used by ``envelope.cell.load_cell``. Every reader takes a ``Reader`` (the file, its units and the
lists of warnings and files read) and the table of one item, converts file units to metres and
radians once (through ``envelope.units``), and raises ``CellFileError`` naming the file, the item and
what is wrong. See docs/cell-file.md for the keys.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import CellFileError, InputError, PoseError
from .geometry import Box, Capsule, Convex, Cylinder, HalfSpace, Sphere, TriMesh, transformed
from .poses import pose_from_euler, pose_from_matrix, pose_from_quaternion
from .units import LENGTH_SCALE, pose_to_metres, to_metres, to_radians

POSE_KEYS = ("xyz", "euler", "convention", "quaternion", "quaternion_order", "matrix")
"""Keys that place a thing (a frame, a target, a shape, the mount, the TCP)."""

BODY_SHAPES = ("sphere", "capsule", "box", "cylinder", "convex", "mesh")
"""Shape kinds for the arm's links, the tool and the payload (in their DH frame)."""
ZONE_SHAPES = BODY_SHAPES + ("half-space", "fence", "prism")
"""Shape kinds for zones (in the zone's frame)."""

SHAPE_KEYS = {
    "sphere": ("center", "radius"),
    "capsule": ("p0", "p1", "radius"),
    "box": ("size", "min", "max") + POSE_KEYS,
    "cylinder": ("radius", "length") + POSE_KEYS,
    "convex": ("points",) + POSE_KEYS,
    "mesh": ("file", "mesh_units") + POSE_KEYS,
    "half-space": ("point", "normal"),
    "fence": ("points", "height", "bottom_gap", "thickness", "closed", "opening_size", "opening_shape",
              "opening_length"),
    "prism": ("points", "z_min", "z_max") + POSE_KEYS,
}
"""The keys each shape kind takes, besides ``shape`` (and ``name`` inside ``parts``)."""

OPENING_SHAPES = ("slot", "square", "round")
"""Opening shapes of a fence's mesh or slots (ISO 13857 distinguishes these three)."""

BODY_MESH_MODEL = "convex hull"
"""How a link, tool or payload mesh is modelled: its convex hull (contains the mesh, so distances
from it are never larger than from the mesh itself: safe)."""


def suggest(word: str, choices) -> str:
    """A " (did you mean ...?)" hint naming the closest of ``choices`` to ``word`` (difflib), or ""."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


@dataclass
class Reader:
    """The state of one load: the file, its units, the folder paths resolve against, what was read."""

    file: Path
    units: str = "mm"
    angle_units: str = "deg"
    warnings: list = field(default_factory=list)
    inputs: dict = field(default_factory=dict)  # display path -> sha256

    @property
    def folder(self) -> Path:
        return self.file.parent

    # ------------------------------------------------------------------ errors
    def error(self, problem: str, item: str | None = None, cls=CellFileError) -> InputError:
        return cls(problem, file=self.file, item=item)

    # ------------------------------------------------------------------ keys
    def check_keys(self, table: dict, allowed, item: str | None, where: str = "") -> None:
        """Raise for the first key of ``table`` not in ``allowed``, with a 'did you mean' suggestion."""
        allowed = tuple(allowed)
        for key in table:
            if key not in allowed:
                place = f" in {where}" if where else ""
                raise self.error(
                    f"unknown key {key!r}{place}{suggest(key, allowed)}; allowed keys: {', '.join(allowed)}", item
                )

    def table(self, parent: dict, key: str, item, required: bool = False) -> dict | None:
        value = parent.get(key)
        if value is None:
            if required:
                raise self.error(f"missing key {key!r} (a table)", item)
            return None
        if not isinstance(value, dict):
            raise self.error(f"key {key!r} must be a table, got {_tname(value)}", item)
        return value

    def tables(self, parent: dict, key: str, item) -> list:
        """An array of tables (``[[key]]``); empty when absent."""
        value = parent.get(key)
        if value is None:
            return []
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            raise self.error(f"key {key!r} must be an array of tables ([[{key}]]), got {_tname(value)}", item)
        return value

    def string(self, table: dict, key: str, item, default=None, required: bool = False, choices=None) -> str | None:
        if key not in table:
            if required:
                raise self.error(f"missing key {key!r} (a string)", item)
            return default
        value = table[key]
        if not isinstance(value, str):
            raise self.error(f"key {key!r} must be a string, got {_tname(value)} {value!r}", item)
        if choices is not None and value not in choices:
            raise self.error(
                f"key {key!r} must be one of {', '.join(map(repr, choices))}, got {value!r}{suggest(value, choices)}",
                item,
            )
        return value

    def boolean(self, table: dict, key: str, item, default: bool) -> bool:
        if key not in table:
            return default
        value = table[key]
        if not isinstance(value, bool):
            raise self.error(f"key {key!r} must be true or false, got {_tname(value)} {value!r}", item)
        return value

    def integer(self, table: dict, key: str, item, required: bool = True, default=None) -> int | None:
        if key not in table:
            if required:
                raise self.error(f"missing key {key!r} (an integer)", item)
            return default
        value = table[key]
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.error(f"key {key!r} must be an integer, got {_tname(value)} {value!r}", item)
        return value

    def number(self, table: dict, key: str, item, required: bool = True, default=None, sign: str = "") -> float | None:
        """A finite number in file units (not converted). ``sign``: '' any, '>0' positive, '>=0' non-negative."""
        if key not in table:
            if required:
                raise self.error(f"missing key {key!r} (a number)", item)
            return default
        value = table[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.error(f"key {key!r} must be a number, got {_tname(value)} {value!r}", item)
        value = float(value)
        if not math.isfinite(value):
            raise self.error(f"key {key!r} must be finite, got {value!r}", item)
        if sign == ">0" and not value > 0:
            raise self.error(f"key {key!r} must be > 0, got {value:g}", item)
        if sign == ">=0" and not value >= 0:
            raise self.error(f"key {key!r} must be >= 0, got {value:g}", item)
        return value

    def vector(self, table: dict, key: str, item, n: int, required: bool = True, default=None) -> np.ndarray | None:
        """A list of ``n`` finite numbers as float64, in file units."""
        if key not in table:
            if required:
                raise self.error(f"missing key {key!r} (a list of {n} numbers)", item)
            return None if default is None else np.asarray(default, dtype=np.float64)
        return self._numbers(table[key], key, item, (n,))

    def points(self, table: dict, key: str, item, dim: int, min_count: int) -> np.ndarray:
        """A list of at least ``min_count`` points of ``dim`` numbers, ``(n, dim)`` float64, file units."""
        if key not in table:
            raise self.error(f"missing key {key!r} (a list of [{', '.join('xyz'[:dim])}] points)", item)
        value = table[key]
        arr = self._numbers(value, key, item, (-1, dim))
        if len(arr) < min_count:
            raise self.error(f"key {key!r} needs at least {min_count} points, got {len(arr)}", item)
        return arr

    def _numbers(self, value, key: str, item, shape: tuple) -> np.ndarray:
        def ok(v):
            return not isinstance(v, bool) and isinstance(v, (int, float))

        if len(shape) == 1:
            want = f"a list of {shape[0]} numbers"
        elif shape[0] < 0:
            want = f"a list of points, each a list of {shape[1]} numbers"
        else:
            want = f"a {shape[0]}x{shape[1]} list of lists of numbers"
        if len(shape) == 1:
            good = isinstance(value, list) and len(value) == shape[0] and all(ok(v) for v in value)
        else:
            good = (
                isinstance(value, list)
                and all(isinstance(r, list) for r in value)
                and all((len(r) == shape[1] or shape[1] < 0) and all(ok(v) for v in r) for r in value)
                and (shape[0] < 0 or len(value) == shape[0])
            )
        if not good:
            raise self.error(f"key {key!r} must be {want}, got {_describe(value)}", item)
        arr = np.asarray(value, dtype=np.float64)
        if not np.isfinite(arr).all():
            raise self.error(f"key {key!r} contains a non-finite value", item)
        return arr

    # ------------------------------------------------------------------ units
    def length(self, value, unit: str | None = None):
        """File lengths (scalar or array) in metres."""
        return to_metres(value, unit or self.units)

    def angle(self, value):
        """File angles (scalar or array) in radians."""
        return to_radians(value, self.angle_units)

    def show_length(self, metres: float) -> str:
        """A length in metres, written back in the file's units (for messages)."""
        return f"{metres / LENGTH_SCALE[self.units]:g} {self.units}"

    # ------------------------------------------------------------------ files
    def resolve(self, name: str, item) -> Path:
        path = Path(name)
        if not path.is_absolute():
            path = self.folder / path
        path = Path(os.path.normpath(path))
        if not path.is_file():
            raise self.error(f"file not found: {name!r} (looked for {path})", item)
        return path

    def record(self, path: Path) -> bytes:
        """Read a file, record its SHA-256 in ``inputs``, return its bytes."""
        data = path.read_bytes()
        try:
            shown = path.relative_to(self.folder).as_posix()
        except ValueError:
            shown = str(path)
        self.inputs[shown] = hashlib.sha256(data).hexdigest()
        return data

    # ------------------------------------------------------------------ poses
    def pose(self, table: dict, item, what: str = "pose") -> np.ndarray:
        """``(4, 4)`` parent_from_thing from the pose keys of ``table`` (identity when none is given)."""
        has = {k for k in ("euler", "quaternion", "matrix") if k in table}
        if len(has) > 1:
            raise self.error(f"{what}: give only one of 'euler', 'quaternion', 'matrix', got {sorted(has)}", item)
        if "convention" in table and "euler" not in table:
            raise self.error(f"{what}: key 'convention' is only used with 'euler'", item)
        if "quaternion_order" in table and "quaternion" not in table:
            raise self.error(f"{what}: key 'quaternion_order' is only used with 'quaternion'", item)
        try:
            if "matrix" in table:
                if "xyz" in table:
                    raise self.error(f"{what}: give the translation in 'matrix' or in 'xyz', not both", item)
                m = self._numbers(table["matrix"], "matrix", item, (4, 4))
                return pose_from_matrix(pose_to_metres(m, self.units), item=item, file=self.file)
            xyz = self.length(self.vector(table, "xyz", item, 3, required=False, default=(0.0, 0.0, 0.0)))
            if "quaternion" in table:
                order = self.string(table, "quaternion_order", item, default="wxyz", choices=("wxyz", "xyzw"))
                return pose_from_quaternion(xyz, self.vector(table, "quaternion", item, 4), order)
            angles = self.vector(table, "euler", item, 3, required=False, default=(0.0, 0.0, 0.0))
            convention = self.string(table, "convention", item, default="fixed-xyz")
            return pose_from_euler(xyz, self.angle(angles), convention)
        except PoseError as exc:
            raise exc.located(file=self.file, item=item) from None


def _tname(value) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string", list: "a list",
            dict: "a table"}.get(type(value), type(value).__name__)


def _describe(value) -> str:
    if isinstance(value, list):
        return f"a list of {len(value)} items ({value!r:.60})"
    return f"{_tname(value)} {value!r:.60}"


# ---------------------------------------------------------------------- transforms
def transform_shape(shape, parent_from_frame: np.ndarray):
    """The same solid with its coordinates taken from a frame into its parent (``(4, 4)`` rigid)."""
    return transformed(shape, parent_from_frame)


# ---------------------------------------------------------------------- meshes
def load_mesh(reader: Reader, table: dict, item):
    """``(trimesh.Trimesh, display name)`` of a mesh shape's file, vertices in metres in the placing frame."""
    import trimesh

    name = reader.string(table, "file", item, required=True)
    path = reader.resolve(name, item)
    unit = reader.string(table, "mesh_units", item, default=reader.units, choices=tuple(LENGTH_SCALE))
    reader.record(path)
    try:
        mesh = trimesh.load_mesh(str(path))
    except Exception as exc:  # trimesh raises many kinds for unreadable files
        raise reader.error(f"cannot read mesh file {name!r}: {type(exc).__name__}: {exc}", item) from None
    if not isinstance(mesh, trimesh.Trimesh) or len(mesh.faces) == 0:
        raise reader.error(f"mesh file {name!r} holds no triangles", item)
    vertices = to_metres(np.asarray(mesh.vertices, dtype=np.float64), unit)
    if not np.isfinite(vertices).all():
        raise reader.error(f"mesh file {name!r} has a non-finite vertex", item)
    placed = reader.pose(table, item, "mesh placement")
    vertices = vertices @ placed[:3, :3].T + placed[:3, 3]
    out = trimesh.Trimesh(vertices=vertices, faces=np.asarray(mesh.faces), process=True)
    return out, name


# ---------------------------------------------------------------------- polygons
def polygon_area(points: np.ndarray) -> float:
    """Signed area of a 2-D polygon ``(n, 2)`` (shoelace formula; > 0 counter-clockwise)."""
    x, y = points[:, 0], points[:, 1]
    return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))


def _cross(o, a, b) -> float:
    return float((a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0]))


def polygon_is_convex(points: np.ndarray) -> bool:
    """True for a strictly convex polygon (every turn the same way, none straight)."""
    n = len(points)
    turns = np.array([_cross(points[i - 1], points[i], points[(i + 1) % n]) for i in range(n)])
    return bool((turns > 0).all() or (turns < 0).all())


def _segments_cross(p1, p2, p3, p4) -> bool:
    d1, d2 = _cross(p3, p4, p1), _cross(p3, p4, p2)
    d3, d4 = _cross(p1, p2, p3), _cross(p1, p2, p4)
    return ((d1 > 0) != (d2 > 0)) and ((d3 > 0) != (d4 > 0)) and d1 * d2 != 0 and d3 * d4 != 0


def polygon_is_simple(points: np.ndarray) -> bool:
    """True when no two non-neighbouring edges of the closed polygon cross (O(n^2), n is small)."""
    n = len(points)
    for i in range(n):
        for j in range(i + 2, n):
            if i == 0 and j == n - 1:
                continue
            if _segments_cross(points[i], points[(i + 1) % n], points[j], points[(j + 1) % n]):
                return False
    return True


def triangulate_polygon(points: np.ndarray) -> np.ndarray:
    """Triangles ``(n - 2, 3)`` (indices, counter-clockwise) of a simple polygon by ear clipping."""
    n = len(points)
    order = list(range(n)) if polygon_area(points) > 0 else list(range(n))[::-1]
    tris = []
    guard = 0
    while len(order) > 3 and guard < 10 * n * n:
        guard += 1
        m = len(order)
        for k in range(m):
            i0, i1, i2 = order[k - 1], order[k], order[(k + 1) % m]
            a, b, c = points[i0], points[i1], points[i2]
            if _cross(a, b, c) <= 0:
                continue  # reflex or straight corner: not an ear
            inside = False
            for j in order:
                if j in (i0, i1, i2):
                    continue
                p = points[j]
                if _cross(a, b, p) >= 0 and _cross(b, c, p) >= 0 and _cross(c, a, p) >= 0:
                    inside = True
                    break
            if not inside:
                tris.append((i0, i1, i2))
                order.pop(k)
                break
        else:
            raise ValueError("polygon could not be triangulated (degenerate or self-touching)")
    tris.append(tuple(order))
    return np.asarray(tris, dtype=np.int64)


# ---------------------------------------------------------------------- shapes
def read_shape(reader: Reader, table: dict, item, for_zone: bool, part: str = "") -> list:
    """One shape table (``shape = "..."`` and its keys) as a list of ``(panel suffix, shape, info)``.

    Every shape is returned in the frame of the thing that holds it (link frame, flange, zone frame).
    A fence gives one Box per segment; ``info`` holds extra data (fence attributes, mesh details).
    """
    where = f"{item} part {part!r}" if part else item
    kinds = ZONE_SHAPES if for_zone else BODY_SHAPES
    kind = reader.string(table, "shape", where, required=True, choices=kinds)
    extra = ("name",) if part else ()
    allowed = ("shape",) + extra + SHAPE_KEYS[kind]
    reader.check_keys(table, allowed, where, f"a {kind} shape")
    L = reader.length
    info: dict = {}

    if kind == "sphere":
        out = [Sphere(L(reader.vector(table, "center", where, 3)), L(reader.number(table, "radius", where, sign=">0")))]
    elif kind == "capsule":
        p0 = L(reader.vector(table, "p0", where, 3))
        p1 = L(reader.vector(table, "p1", where, 3))
        out = [Capsule(p0, p1, L(reader.number(table, "radius", where, sign=">0")))]
    elif kind == "box":
        if "size" in table:
            if "min" in table or "max" in table:
                raise reader.error("a box takes either 'size' (with a pose) or 'min' and 'max', not both", where)
            size = reader.vector(table, "size", where, 3)
            if not (size > 0).all():
                raise reader.error(f"key 'size' must be three values > 0, got {size.tolist()}", where)
            out = [Box(L(size), reader.pose(table, where, "box pose"))]
        else:
            if any(k in table for k in POSE_KEYS):
                raise reader.error("a box given by 'min' and 'max' is axis-aligned: pose keys are not allowed", where)
            lo = reader.vector(table, "min", where, 3)
            hi = reader.vector(table, "max", where, 3)
            if not (hi > lo).all():
                raise reader.error(f"box 'max' {hi.tolist()} must exceed 'min' {lo.tolist()} on every axis", where)
            pose = np.eye(4)
            pose[:3, 3] = L((lo + hi) / 2)
            out = [Box(L(hi - lo), pose)]
    elif kind == "cylinder":
        radius = L(reader.number(table, "radius", where, sign=">0"))
        length = L(reader.number(table, "length", where, sign=">0"))
        out = [Cylinder(radius, length, reader.pose(table, where, "cylinder pose"))]
    elif kind == "convex":
        pts = L(reader.points(table, "points", where, 3, 4))
        placed = reader.pose(table, where, "convex pose")
        pts = pts @ placed[:3, :3].T + placed[:3, 3]
        if np.linalg.matrix_rank(pts - pts.mean(axis=0), tol=1e-9) < 3:
            raise reader.error("convex 'points' are flat (all in one plane): they enclose no volume", where)
        out = [Convex(pts)]
    elif kind == "mesh":
        mesh, name = load_mesh(reader, table, where)
        info["file"] = name
        if not for_zone:
            centred = mesh.vertices - mesh.vertices.mean(axis=0)
            if np.linalg.matrix_rank(centred, tol=1e-9) < 3:
                raise reader.error(f"mesh file {name!r} is flat (all in one plane): it encloses no volume", where)
            hull = mesh.convex_hull
            out = [Convex(np.asarray(hull.vertices, dtype=np.float64))]
            info["model"] = BODY_MESH_MODEL
        else:
            out = [TriMesh(mesh.vertices, mesh.faces, bool(mesh.is_watertight), name)]
            info["watertight"] = bool(mesh.is_watertight)
    elif kind == "half-space":
        point = L(reader.vector(table, "point", where, 3))
        normal = reader.vector(table, "normal", where, 3)
        norm = float(np.linalg.norm(normal))
        if not norm > 1e-12:
            raise reader.error(f"half-space 'normal' must be a non-zero vector, got {normal.tolist()}", where)
        normal = normal / norm
        out = [HalfSpace(normal, float(normal @ point))]
    elif kind == "fence":
        return _read_fence(reader, table, where)
    elif kind == "prism":
        out = [_read_prism(reader, table, where)]
    else:  # pragma: no cover - choices checked above
        raise AssertionError(kind)
    return [("", s, info) for s in out]


def _read_fence(reader: Reader, table: dict, where) -> list:
    """A fence run: one Box panel per segment of a 2-D polyline, from ``bottom_gap`` up to ``height``.

    Each panel is ``thickness`` thick, centred on its segment, and lengthened by ``thickness / 2`` at
    both ends so that panels meeting at a corner leave no gap.
    """
    L = reader.length
    pts = L(reader.points(table, "points", where, 2, 2))
    height = L(reader.number(table, "height", where, sign=">0"))
    gap = L(reader.number(table, "bottom_gap", where, required=False, default=0.0, sign=">=0"))
    thickness = L(reader.number(table, "thickness", where, sign=">0"))
    closed = reader.boolean(table, "closed", where, False)
    if not gap < height:
        raise reader.error(
            f"fence 'bottom_gap' {reader.show_length(gap)} must be below its 'height' {reader.show_length(height)}",
            where,
        )
    attributes = {"height": float(height), "bottom_gap": float(gap), "thickness": float(thickness)}
    if any(k in table for k in ("opening_size", "opening_shape", "opening_length")):
        attributes["opening_size"] = float(L(reader.number(table, "opening_size", where, sign=">0")))
        attributes["opening_shape"] = reader.string(table, "opening_shape", where, required=True,
                                                    choices=OPENING_SHAPES)
    if "opening_length" in table:
        length = float(L(reader.number(table, "opening_length", where, sign=">0")))
        if attributes["opening_shape"] != "slot":
            raise reader.error("'opening_length' is the length of slot openings: only with opening_shape = "
                               f"\"slot\", got {attributes['opening_shape']!r}", where)
        if length < attributes["opening_size"]:
            raise reader.error(f"'opening_length' {reader.show_length(length)} is shorter than the slot width "
                               f"'opening_size' {reader.show_length(attributes['opening_size'])}", where)
        attributes["opening_length"] = length
    ends = list(zip(pts[:-1], pts[1:]))
    if closed:
        if len(pts) < 3:
            raise reader.error("a closed fence needs at least 3 points", where)
        ends.append((pts[-1], pts[0]))
    out = []
    for k, (a, b) in enumerate(ends, start=1):
        seg = b - a
        length = float(np.hypot(*seg))
        if not length > 1e-9:
            raise reader.error(f"fence segment {k} has zero length (points {k} and {k % len(pts) + 1} coincide)",
                               where)
        pose = np.eye(4)
        c, s = seg / length
        pose[:2, :2] = [[c, -s], [s, c]]
        pose[:2, 3] = (a + b) / 2
        pose[2, 3] = (gap + height) / 2
        box = Box([length + thickness, thickness, height - gap], pose)
        out.append((f"panel {k}", box, {"attributes": attributes}))
    return out


def _read_prism(reader: Reader, table: dict, where):
    """A polygon footprint extruded from ``z_min`` to ``z_max``: Convex if convex, else a watertight TriMesh."""
    import trimesh

    L = reader.length
    pts = L(reader.points(table, "points", where, 2, 3))
    z0 = L(reader.number(table, "z_min", where))
    z1 = L(reader.number(table, "z_max", where))
    if not z1 > z0:
        raise reader.error(f"prism 'z_max' {reader.show_length(z1)} must exceed 'z_min' {reader.show_length(z0)}",
                           where)
    if not polygon_is_simple(pts):
        raise reader.error("prism 'points' outline crosses itself", where)
    if abs(polygon_area(pts)) < 1e-12:
        raise reader.error("prism 'points' outline encloses no area", where)
    placed = reader.pose(table, where, "prism pose")
    if polygon_is_convex(pts):
        vertices = np.vstack([np.column_stack([pts, np.full(len(pts), z0)]),
                              np.column_stack([pts, np.full(len(pts), z1)])])
        return Convex(vertices @ placed[:3, :3].T + placed[:3, 3])
    try:
        faces = triangulate_polygon(pts)
    except ValueError as exc:
        raise reader.error(f"prism 'points': {exc}", where) from None
    lift = np.eye(4)
    lift[2, 3] = z0
    mesh = trimesh.creation.extrude_triangulation(pts, faces, z1 - z0, transform=placed @ lift)
    if not mesh.is_watertight:  # pragma: no cover - extrusion of a simple polygon is closed
        raise reader.error("prism extrusion is not watertight (degenerate outline?)", where)
    return TriMesh(mesh.vertices, mesh.faces, True, "prism")


def read_shapes(reader: Reader, table: dict, item, owner_keys, for_zone: bool) -> list:
    """The shapes of an item: ``shape = ...`` keys inline, or ``[[...parts]]`` each with a ``name``.

    Returns a list of ``(panel suffix, shape, info)``; empty when the item has neither.
    """
    if "parts" in table:
        if "shape" in table:
            raise reader.error("give either 'shape' (one shape) or 'parts' (several), not both", item)
        reader.check_keys(table, tuple(owner_keys) + ("parts",), item)
        parts = reader.tables(table, "parts", item)
        if not parts:
            raise reader.error("'parts' is empty", item)
        out, seen = [], set()
        for k, part in enumerate(parts, start=1):
            name = reader.string(part, "name", f"{item} part {k}", default=f"part {k}")
            if name in seen:
                raise reader.error(f"two parts are named {name!r}", item)
            seen.add(name)
            for suffix, shape, info in read_shape(reader, part, item, for_zone, part=name):
                out.append((f"{name}/{suffix}" if suffix else name, shape, info))
        return out
    if "shape" not in table:
        reader.check_keys(table, owner_keys, item)
        return []
    kind = reader.string(table, "shape", item, choices=ZONE_SHAPES if for_zone else BODY_SHAPES)
    reader.check_keys(table, tuple(owner_keys) + ("shape",) + SHAPE_KEYS[kind], item, f"a {kind} shape")
    shape_table = {k: v for k, v in table.items() if k not in owner_keys}
    return read_shape(reader, shape_table, item, for_zone)


# ---------------------------------------------------------------------- generated link capsules
def generated_link_shapes(a, alpha, d, convention: str, link: int, radius: float) -> list:
    """Capsules of link ``link`` (0..6) along its DH segments, in its own frame ``link`` (metres).

    Standard DH: link i (1..6) carries the segment along joint axis i from the origin of frame i-1 by
    ``d_i`` and then the segment along x_i by ``a_i`` to the origin of frame i; in frame i these run
    (-a, -d sin(alpha), -d cos(alpha)) -> (-a, 0, 0) -> (0, 0, 0). Link 0 gets a sphere at the base
    origin. Modified DH (Craig): link i carries the segment along z_i from (0, 0, -d_i) to its origin
    and the segment along x_i to (a_i, 0, 0), where a_i is in row i+1. Zero-length segments are
    dropped; a link with none left gets a sphere of the same radius at its frame origin.
    """
    segs = []
    if convention == "standard":
        if link >= 1:
            i = link - 1
            start = np.array([-a[i], -d[i] * np.sin(alpha[i]), -d[i] * np.cos(alpha[i])])
            mid = np.array([-a[i], 0.0, 0.0])
            segs = [(start, mid), (mid, np.zeros(3))]
    else:
        if link >= 1:
            segs.append((np.array([0.0, 0.0, -d[link - 1]]), np.zeros(3)))
        if link <= 5:
            segs.append((np.zeros(3), np.array([a[link], 0.0, 0.0])))
    shapes = [Capsule(p, q, radius) for p, q in segs if np.linalg.norm(q - p) > 1e-9]
    return shapes or [Sphere(np.zeros(3), radius)]


def warn_short_generated_links(r: Reader, links, generated, allowed_pairs, self_clearance: float) -> None:
    """Warn where generated capsules of links i and i+2 can never be clear of each other.

    Link i ends where generated link i+1 starts, and link i+2 starts where it ends, so those two
    points are at most L apart (L: the length of link i+1's DH segments) in every configuration; when
    L is less than both radii plus both paddings plus the self clearance, the pair is always at or
    below its margin (at a spherical wrist L = 0: links 4 and 6 always overlap).
    """
    gen = set(generated)
    for i in range(len(links) - 2):
        a, mid, b = links[i], links[i + 1], links[i + 2]
        if not {a.name, mid.name, b.name} <= gen or frozenset((a.name, b.name)) in allowed_pairs:
            continue
        length = sum(float(np.linalg.norm(s.p1 - s.p0)) for s in mid.shapes if hasattr(s, "p1"))
        reach = a.shapes[0].radius + b.shapes[0].radius + a.padding + b.padding + self_clearance
        if length < reach:
            r.warnings.append(
                f'generated capsules of "{a.name}" and "{b.name}" are never clear of each other: the '
                f'short "{mid.name}" between them is {r.show_length(length)} long, less than their radii, '
                f"paddings and the self clearance ({r.show_length(reach)}); give these links real "
                "geometry or add the pair to allowed_self_pairs"
            )


__all__ = [
    "BODY_MESH_MODEL", "BODY_SHAPES", "ZONE_SHAPES", "SHAPE_KEYS", "POSE_KEYS", "OPENING_SHAPES", "Reader", "suggest",
    "read_shape", "read_shapes", "transform_shape", "load_mesh", "generated_link_shapes", "warn_short_generated_links",
    "polygon_area", "polygon_is_convex", "polygon_is_simple", "triangulate_polygon",
]
