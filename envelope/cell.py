"""The cell: arm, mount, link and tool geometry, zones, frames and targets, all in metres and radians.

``load_cell(path)`` reads a cell file (TOML, see docs/cell-file.md) into an immutable ``Cell``; a
``Cell`` can also be built directly from Python.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .geometry import Body, Zone
from .kinematics import Arm
from .poses import invert


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
        Every file read, with its SHA-256 hex digest.
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
