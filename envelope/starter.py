"""The starter cell for ``envelope init``: a commented cell.toml and targets.csv to edit.

``write_starter(folder)`` writes both files; it never overwrites an existing file. The starter cell
loads as it is (an invented arm with capsules generated from its DH table, a floor, a fence and a
keep-out zone), so a user can run the check at once and then replace it piece by piece.
Every key is described in docs/cell-file.md.
"""

from __future__ import annotations

from pathlib import Path

from .errors import InputError

STARTER_CELL = '''\
# envelope cell file (TOML). Every key: docs/cell-file.md.
# Lengths in `units` (mm unless "m"), angles in degrees unless angle_units = "rad".
# Keys written with a value equal to the default may be left out.
# Replace every value below with your own cell's: these are placeholders of an invented arm.

name = "my cell"
units = "mm"
angle_units = "deg"

self_clearance = 10          # required gap between non-adjacent bodies of the arm and tool
stopping_allowance = 50      # added to every required clearance while the arm moves (programs)
# Pairs of bodies (by name) that may touch each other: not checked for self-contact. Here: the
# capsules generated for links 2 and 4 (and 4 and 6) always overlap through the short links 3 and 5
# between them; remove these pairs once the links have real geometry.
allowed_self_pairs = [["link 2", "link 4"], ["link 4", "link 6"]]
# More targets, one per row (columns: docs/cell-file.md, "Targets CSV").
targets_file = "targets.csv"

# Required clearance per zone kind; a zone may override it with its own `clearance`.
[required_clearance]
fence = 100
guard = 100
keep-out = 50
fixture = 20
machine = 25
floor = 20
wall = 50
ceiling = 50

# ------------------------------------------------------------------ arm
[arm]
name = "my arm"
convention = "standard"      # DH convention: "standard" or "modified" (Craig)
capsule_radius = 40          # links with no [[arm.links]] geometry get capsules along their DH segments
padding = 0                  # dress pack: inflates every link by this much

# One [[arm.joints]] row per joint, 1..6: a, d (lengths); alpha, offset, min, max (angles).
# With convention = "modified", row i holds a(i-1) and alpha(i-1).
[[arm.joints]]
a = 75
alpha = -90
d = 400
offset = 0
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
offset = 0
min = -120
max = 145

[[arm.joints]]
a = 0
alpha = 90
d = 440
offset = 0
min = -190
max = 190

[[arm.joints]]
a = 0
alpha = -90
d = 0
offset = 0
min = -125
max = 125

[[arm.joints]]
a = 0
alpha = 0
d = 80
offset = 0
min = -360
max = 360

# Where the arm's base frame is in the cell. Floor: euler = [0, 0, 0];
# ceiling: euler = [180, 0, 0]; wall (base z along +x): euler = [0, 90, 0].
[arm.mount]
frame = "world"
xyz = [0, 0, 0]
euler = [0, 0, 0]
convention = "fixed-xyz"

# Link geometry (optional per link, 0 = base .. 6 = flange), in the link's DH frame. Example:
# [[arm.links]]
# link = 2
# shape = "mesh"
# file = "meshes/link2.stl"
# mesh_units = "m"

# ------------------------------------------------------------------ tool
[tool]
name = "tool"
shape = "capsule"            # in the flange frame (z out of the flange)
p0 = [0, 0, 30]
p1 = [0, 0, 150]
radius = 30

[tool.tcp]                   # the TCP in the flange frame
xyz = [0, 0, 150]
euler = [0, 0, 0]

# [tool.payload]             # what the tool carries (optional)
# name = "part"
# shape = "box"
# size = [60, 40, 40]
# xyz = [0, 0, 170]

# ------------------------------------------------------------------ frames
[frames.table]               # a named frame; parent defaults to "world"
parent = "world"
xyz = [600, 0, 500]
euler = [0, 0, 0]

# ------------------------------------------------------------------ zones
[[zones]]
name = "floor"
kind = "floor"
shape = "half-space"         # the solid below the plane through `point`, `normal` pointing out of it
point = [0, 0, 0]
normal = [0, 0, 1]
allowed = ["link 0", "link 1"]   # bodies allowed to touch this zone (the generated link 1 starts
                                 # at the base origin, on the floor)

[[zones]]
name = "back fence"
kind = "fence"
shape = "fence"              # one panel per segment of the polyline (x, y)
points = [[-1200, -1500], [-1200, 1500]]
height = 2000
bottom_gap = 150
thickness = 40
opening_size = 30            # mesh opening e (mm), for reach-through checks
opening_shape = "square"     # "slot", "square" or "round"

[[zones]]
name = "operator side"
kind = "keep-out"
shape = "box"
min = [-500, 1100, 0]
max = [1200, 1500, 2200]
clearance = 100              # overrides [required_clearance] keep-out

# ------------------------------------------------------------------ targets
[[targets]]
name = "table-pick"
frame = "table"              # the pose is given in this frame; it places the TCP
xyz = [0, 0, 50]
euler = [180, 0, 0]          # tool pointing down
convention = "fixed-xyz"

# ------------------------------------------------------------------ programs
[[programs]]
name = "pick-cycle"
moves = [
    { to = "table-approach", motion = "joint" },
    { to = "table-pick", motion = "linear" },
    { to = "table-approach", motion = "linear" },
]
'''

STARTER_TARGETS = '''\
# One target per row; the pose places the TCP, in the named frame (mm, degrees).
# Orientation: convention + euler_1..3, or qw,qx,qy,qz, or r11..r33 (leave the others empty).
name,frame,x,y,z,convention,euler_1,euler_2,euler_3,qw,qx,qy,qz
table-approach,table,0,0,250,fixed-xyz,180,0,0,,,,
side-place,world,300,-600,600,,,,,0,1,0,0
'''

STARTER_FILES = {"cell.toml": STARTER_CELL, "targets.csv": STARTER_TARGETS}
"""The files ``write_starter`` writes, by name."""


def write_starter(folder) -> list[Path]:
    """Write a commented starter ``cell.toml`` and ``targets.csv`` into ``folder`` (created if needed).

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    InputError
        If ``folder`` is a file, or either file already exists (nothing is written then).
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise InputError("is a file, not a folder", file=folder)
    paths = [folder / name for name in STARTER_FILES]
    existing = [p for p in paths if p.exists()]
    if existing:
        raise InputError(
            "already exists: will not overwrite it (move it away or pick another folder)", file=existing[0],
            item="envelope init",
        )
    folder.mkdir(parents=True, exist_ok=True)
    for path in paths:
        path.write_text(STARTER_FILES[path.name], encoding="utf-8")
    return paths
