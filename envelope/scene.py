"""Drawing geometry: every shape kind as a trimesh mesh, a cell posed at a configuration, GLB scenes.

This module is for *pictures* (report figures, 3-D scenes), never for clearance: the meshes are
tessellations of the solids (a sphere becomes an icosphere, a cylinder a prism) and a half-space
becomes a finite slab clipped to the cell's extent.

Lengths stay in metres here; a GLB scene is written in metres too (glTF's unit), turned so that the
cell's Z axis is glTF's up axis (+Y).

- ``shape_mesh(shape, extent=None)``: one shape in its parent frame;
- ``body_mesh(body)``: every shape of a body (padding applied to the primitives) in its DH frame;
- ``posed_link_meshes(cell, q)``: every moving body in the cell (world) frame;
- ``zone_meshes(cell, extent)``: every zone panel in the cell frame (``zone_panel_names``);
- ``cell_extent(cell, qs=None, points=None)``: the ``(2, 3)`` box a drawing covers;
- ``row_scene(cell, row)`` / ``export_glb(scene, path)``: a coloured scene of one check row;
- ``motion_scene(cell, motion)``: a scene of a motion's worst configuration.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import trimesh

from .geometry import Box, Capsule, Convex, Cylinder, HalfSpace, Sphere, TriMesh

SPHERE_SUBDIVISIONS = 3
"""Icosphere subdivisions for spheres (642 vertices)."""
SECTIONS = 32
"""Segments around a cylinder or capsule."""
SLAB_THICKNESS = 0.02
"""Thickness (m) of the slab that stands for a half-space in drawings."""
DEFAULT_EXTENT = np.array([[-1.0, -1.0, -0.1], [1.0, 1.0, 2.0]])
"""Drawing box (m) used when a cell has no finite zone and no arm reach to go by."""

STATUS_RGBA = {
    "clear": (46, 160, 67, 255),
    "below margin": (230, 140, 0, 255),
    "intrusion": (210, 30, 30, 255),
    "outside limits": (128, 90, 200, 255),
    "unreachable": (60, 60, 60, 255),
    "allowed contact": (40, 110, 220, 255),
}
"""Colour of each row / pair status (RGBA 0..255), shared by figures, HTML and scenes."""
ZONE_RGBA = (150, 150, 150, 90)
"""Translucent grey for zones that no pair of the row offends."""
ZONE_OFFENDED_RGBA = (210, 30, 30, 140)
"""Translucent red for a zone that a pair of the row intrudes or is below margin of."""

GLTF_FROM_CELL = np.array([[1.0, 0, 0, 0], [0, 0, 1.0, 0], [0, -1.0, 0, 0], [0, 0, 0, 1.0]])
"""Every scene node's transform: the cell's Z-up frame turned to glTF's Y-up, (x, y, z) -> (x, z, -y)."""

_SEVERITY = ("intrusion", "below margin", "allowed contact", "outside limits", "unreachable", "clear")


def _severity(status: str) -> int:
    return _SEVERITY.index(status) if status in _SEVERITY else len(_SEVERITY)


def _frame_from_z(origin, z) -> np.ndarray:
    """A pose whose z axis is the unit vector ``z`` and whose origin is ``origin``."""
    z = np.asarray(z, dtype=np.float64)
    helper = np.array([1.0, 0.0, 0.0]) if abs(z[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    x = np.cross(helper, z)
    x /= np.linalg.norm(x)
    y = np.cross(z, x)
    T = np.eye(4)
    T[:3, 0], T[:3, 1], T[:3, 2], T[:3, 3] = x, y, z, origin
    return T


def shape_mesh(shape, *, extent=None, padding: float = 0.0) -> trimesh.Trimesh:
    """A triangle mesh of one shape, in the shape's parent frame (metres).

    Parameters
    ----------
    shape : Sphere, Capsule, Box, Cylinder, HalfSpace, Convex or TriMesh
    extent : (2, 3) array_like, optional
        Lower and upper corners of the drawing box; a half-space becomes a slab of thickness
        ``SLAB_THICKNESS`` just inside its boundary plane, square, as wide as the box's diagonal and
        centred on the box centre's projection onto the plane. Defaults to ``DEFAULT_EXTENT``.
    padding : float
        Metres added around a Sphere, Capsule, Cylinder or Box (radius, or every half-extent) so the
        picture shows the padded body; Convex and TriMesh shapes are drawn unpadded.
    """
    p = float(padding)
    if isinstance(shape, Sphere):
        m = trimesh.creation.icosphere(subdivisions=SPHERE_SUBDIVISIONS, radius=shape.radius + p)
        m.apply_translation(shape.center)
        return m
    if isinstance(shape, Capsule):
        axis = shape.p1 - shape.p0
        length = float(np.linalg.norm(axis))
        mid = 0.5 * (shape.p0 + shape.p1)
        if length == 0.0:
            m = trimesh.creation.icosphere(subdivisions=SPHERE_SUBDIVISIONS, radius=shape.radius + p)
            m.apply_translation(mid)
            return m
        return trimesh.creation.capsule(
            height=length,
            radius=shape.radius + p,
            count=[SECTIONS, SECTIONS],
            transform=_frame_from_z(mid, axis / length),
        )
    if isinstance(shape, Box):
        return trimesh.creation.box(extents=np.asarray(shape.extents) + 2.0 * p, transform=np.array(shape.pose))
    if isinstance(shape, Cylinder):
        return trimesh.creation.cylinder(
            radius=shape.radius + p,
            height=shape.length + 2.0 * p,
            sections=SECTIONS,
            transform=np.array(shape.pose),
        )
    if isinstance(shape, HalfSpace):
        box = DEFAULT_EXTENT if extent is None else np.asarray(extent, dtype=np.float64)
        centre = box.mean(axis=0)
        width = float(np.linalg.norm(box[1] - box[0]))
        n = shape.normal
        on_plane = centre - (float(n @ centre) - shape.offset) * n
        T = _frame_from_z(on_plane - 0.5 * SLAB_THICKNESS * n, n)
        return trimesh.creation.box(extents=[width, width, SLAB_THICKNESS], transform=T)
    if isinstance(shape, Convex):
        return trimesh.convex.convex_hull(np.array(shape.vertices))
    if isinstance(shape, TriMesh):
        return trimesh.Trimesh(vertices=np.array(shape.vertices), faces=np.array(shape.faces), process=False)
    raise TypeError(f"no mesh for shape type {type(shape).__name__}")


def body_mesh(body, *, extent=None) -> trimesh.Trimesh:
    """Every shape of ``body`` as one mesh in its DH frame (shapes concatenated, padding applied)."""
    parts = [shape_mesh(s, extent=extent, padding=body.padding) for s in body.shapes]
    if not parts:
        return trimesh.Trimesh()
    return parts[0] if len(parts) == 1 else trimesh.util.concatenate(parts)


def world_from_frames(cell, q) -> np.ndarray:
    """``(7, 4, 4)``: every DH frame of the arm at ``q`` (6,) radians, in the cell (world) frame."""
    return cell.world_from_base @ cell.arm.frames(np.asarray(q, dtype=np.float64))


def posed_shape_meshes(cell, q, *, extent=None) -> dict:
    """``{body name: [mesh per shape]}`` in the cell frame at ``q`` (6,) radians (padding applied).

    Each shape stays a separate mesh so that a drawing can take the silhouette of each convex piece.
    """
    world_from_frame = world_from_frames(cell, q)
    out = {}
    for body in cell.bodies:
        meshes = []
        for s in body.shapes:
            m = shape_mesh(s, extent=extent, padding=body.padding)
            m.apply_transform(world_from_frame[body.frame])
            meshes.append(m)
        out[body.name] = meshes
    return out


def posed_link_meshes(cell, q, *, extent=None) -> dict:
    """``{body name: mesh}``: every moving body (links, then tool) in the cell frame at ``q`` radians."""
    world_from_frame = world_from_frames(cell, q)
    out = {}
    for body in cell.bodies:
        m = body_mesh(body, extent=extent)
        m.apply_transform(world_from_frame[body.frame])
        out[body.name] = m
    return out


def zone_panel_names(zone) -> tuple:
    """The panel name of each shape of ``zone``, as the clearance engine names them.

    The zone's ``panels`` if there is one per shape; else ``""`` for a single-shape zone and
    ``"shape 1"``, ``"shape 2"``... for several shapes.
    """
    if len(zone.panels) == len(zone.shapes):
        return tuple(str(p) for p in zone.panels)
    if len(zone.shapes) == 1:
        return ("",)
    return tuple(f"shape {k + 1}" for k in range(len(zone.shapes)))


def zone_node_name(zone: str, panel: str) -> str:
    """The scene node name of a zone panel: ``zone:<zone>:<panel>``, or ``zone:<zone>`` without a panel."""
    return f"zone:{zone}:{panel}" if panel else f"zone:{zone}"


def zone_meshes(cell, extent=None) -> dict:
    """``{(zone name, panel name): mesh}`` for every zone shape, in the cell frame."""
    if extent is None:
        extent = cell_extent(cell)
    out = {}
    for zone in cell.zones:
        for panel, s in zip(zone_panel_names(zone), zone.shapes):
            out[(zone.name, panel)] = shape_mesh(s, extent=extent)
    return out


def arm_reach(cell) -> float:
    """An upper bound (m) on how far any point of the arm and tool gets from the base origin.

    The sum of every DH length ``|a| + |d|``, the TCP offset and the largest body extent from its
    frame origin (a crude bound, for sizing drawings only).
    """
    arm = cell.arm
    reach = float(np.abs(arm.a).sum() + np.abs(arm.d).sum())
    reach += float(np.linalg.norm(cell.tool.flange_from_tcp[:3, 3]))
    far = 0.0
    for body in cell.bodies:
        m = body_mesh(body)
        if len(m.vertices):
            far = max(far, float(np.linalg.norm(m.vertices, axis=1).max()))
    return reach + far


def cell_extent(cell, *, qs=None, points=None, margin: float = 0.1) -> np.ndarray:
    """``(2, 3)`` lower and upper corners (m) of a box for drawing the cell.

    It holds every finite zone, the arm posed at each configuration of ``qs`` ((n, 6) radians) or, if
    ``qs`` is None, a cube of the arm's reach (``arm_reach``) around the base, and any ``points``
    ((k, 3) m). Half-spaces are unbounded and do not widen the box; ``margin`` metres are added on
    every side.
    """
    lows, highs = [], []
    for zone in cell.zones:
        for s in zone.shapes:
            if isinstance(s, HalfSpace):
                continue
            b = shape_mesh(s).bounds
            lows.append(b[0])
            highs.append(b[1])
    base = np.asarray(cell.world_from_base, dtype=np.float64)[:3, 3]
    lows.append(base)
    highs.append(base)
    if qs is None:
        reach = arm_reach(cell)
        lows.append(base - reach)
        highs.append(base + reach)
    else:
        for q in np.asarray(qs, dtype=np.float64).reshape(-1, 6):
            for m in posed_link_meshes(cell, q).values():
                if len(m.vertices):
                    lows.append(m.bounds[0])
                    highs.append(m.bounds[1])
    if points is not None and len(points):
        pts = np.asarray(points, dtype=np.float64).reshape(-1, 3)
        lows.append(pts.min(axis=0))
        highs.append(pts.max(axis=0))
    lo, hi = np.min(lows, axis=0), np.max(highs, axis=0)
    if np.all(hi - lo <= 0):
        return DEFAULT_EXTENT.copy()
    return np.stack([lo - margin, hi + margin])


# ---------------------------------------------------------------------- statuses per part


@dataclass(frozen=True)
class RowColours:
    """The status of every body and every zone panel in one row: the worst status of the pairs it is in.

    ``bodies`` maps body names, ``zones`` maps ``(zone name, panel name)`` to a status.
    """

    bodies: dict
    zones: dict


def row_part_statuses(row) -> RowColours:
    """Worst pair status per body and per zone panel of ``row`` (a ``BranchRow``); parts in no pair are absent.

    A self pair colours both its bodies; a zone pair its body and its zone panel.
    """
    bodies: dict = {}
    zones: dict = {}

    def worse(d, key, status):
        if key not in d or _severity(status) < _severity(d[key]):
            d[key] = status

    for p in row.pairs:
        worse(bodies, p.body, p.status)
        if p.kind == "self":
            worse(bodies, p.other, p.status)
        else:
            worse(zones, (p.other, p.panel), p.status)
    return RowColours(bodies=bodies, zones=zones)


def _material(rgba, name: str):
    rgba = np.asarray(rgba, dtype=np.float64) / 255.0
    return trimesh.visual.material.PBRMaterial(
        name=name,
        baseColorFactor=[float(c) for c in rgba],
        metallicFactor=0.0,
        roughnessFactor=0.8,
        alphaMode="BLEND" if rgba[3] < 1.0 else "OPAQUE",
        doubleSided=True,
    )


def _coloured(mesh: trimesh.Trimesh, rgba, name: str) -> trimesh.Trimesh:
    m = mesh.copy()
    m.visual = trimesh.visual.TextureVisuals(material=_material(rgba, name))
    return m


def row_scene(cell, row, *, extent=None) -> trimesh.Scene:
    """A 3-D scene of ``row`` (a ``BranchRow`` with finite ``q``) in the cell frame, metres.

    Node names: ``body:<name>`` for every moving body, ``zone_node_name(zone, panel)`` for every zone
    panel. A body takes the colour of its worst pair status (``STATUS_RGBA``; the row's clearance
    status if it is in no pair); a zone panel is translucent grey, or translucent red if a pair of the
    row intrudes it or is below its margin. Mesh vertices are in the cell frame (metres); every node's
    transform is ``GLTF_FROM_CELL``, so that glTF viewers (Y up) show the cell's Z axis up.
    """
    if extent is None:
        extent = cell_extent(cell, qs=[row.q])
    parts = row_part_statuses(row)
    scene = trimesh.Scene()
    for name, mesh in posed_link_meshes(cell, row.q, extent=extent).items():
        status = parts.bodies.get(name, row.clearance_status or row.status)
        rgba = STATUS_RGBA.get(status, STATUS_RGBA["clear"])
        scene.add_geometry(
            _coloured(mesh, rgba, status), node_name=f"body:{name}", geom_name=f"body:{name}", transform=GLTF_FROM_CELL
        )
    _add_zones(scene, cell, extent, lambda key: parts.zones.get(key) in ("intrusion", "below margin"))
    return scene


MOTION_OTHER_RGBA = (175, 175, 175, 255)
"""Light grey: a moving body that is not in the pair deciding a motion (its status is not certified)."""


def motion_parts(cell, motion) -> tuple:
    """``(bodies, zone panels)`` of the pair that decides ``motion`` (a ``MotionRow``).

    ``bodies`` holds ``closest_body`` and, for a self pair, the other body; ``zone panels`` the
    ``(zone, panel)`` named by ``closest_other`` (``zone/panel``, or ``zone`` for a one-shape zone).
    """
    body_names = {b.name for b in cell.bodies}
    bodies = {motion.closest_body} & body_names
    zones = set()
    other = motion.closest_other
    if other in body_names:
        bodies.add(other)
    elif other:
        from types import SimpleNamespace

        from .clearance import pair_other_name

        for zone in cell.zones:  # the panel whose name the clearance engine gives as ``other``
            for panel in zone_panel_names(zone):
                if pair_other_name(SimpleNamespace(other=zone.name, panel=panel)) == other:
                    zones.add((zone.name, panel))
    return bodies, zones


def motion_scene(cell, motion, *, extent=None) -> trimesh.Scene:
    """A 3-D scene of a motion's worst configuration (``MotionRow.q_at_min``, finite) in the cell frame.

    The same nodes as ``row_scene`` (``body:<name>``, ``zone_node_name(zone, panel)``). The body (or
    bodies, for a self pair) of the pair that decides the motion takes the colour of the motion's
    status (``STATUS_RGBA``), every other body ``MOTION_OTHER_RGBA``: the sweep certifies the deciding
    pair's bound over the move, not a status per body. The deciding zone panel is translucent red when
    the motion is a finding (intrusion, below margin), every other zone translucent grey.
    """
    q = np.asarray(motion.q_at_min, dtype=np.float64)
    if extent is None:
        extent = cell_extent(cell, qs=[q])
    bodies, zones = motion_parts(cell, motion)
    finding = motion.status in ("intrusion", "below margin")
    scene = trimesh.Scene()
    for name, mesh in posed_link_meshes(cell, q, extent=extent).items():
        rgba = STATUS_RGBA.get(motion.status, STATUS_RGBA["clear"]) if name in bodies else MOTION_OTHER_RGBA
        label = motion.status if name in bodies else "other body"
        scene.add_geometry(
            _coloured(mesh, rgba, label), node_name=f"body:{name}", geom_name=f"body:{name}", transform=GLTF_FROM_CELL
        )
    _add_zones(scene, cell, extent, lambda key: finding and key in zones)
    return scene


def _add_zones(scene, cell, extent, offended) -> None:
    """Add every zone panel to ``scene``: red where ``offended((zone, panel))``, translucent grey else."""
    for key, mesh in zone_meshes(cell, extent).items():
        hit = bool(offended(key))
        name = zone_node_name(*key)
        scene.add_geometry(
            _coloured(mesh, ZONE_OFFENDED_RGBA if hit else ZONE_RGBA, "offended zone" if hit else "zone"),
            node_name=name, geom_name=name, transform=GLTF_FROM_CELL,
        )


def glb_bytes(scene: trimesh.Scene) -> bytes:
    """The scene as glTF binary (GLB) bytes."""
    return scene.export(file_type="glb")


def export_glb(scene: trimesh.Scene, path) -> None:
    """Write ``scene`` as a GLB file, atomically (temporary file in the same folder, then rename)."""
    from .report.files import write_bytes_atomic

    write_bytes_atomic(path, glb_bytes(scene))
