"""Benchmark: time of the maximum space of an invented ~0.9 m six-axis arm at 10, 20 and 40 mm voxels.

Run: /work/venv/bin/python tests/benchmarks/bench_space.py
"""

from __future__ import annotations

import math
import time

import numpy as np

from envelope import space as S
from envelope.cell import Cell, Tool
from envelope.cellshapes import generated_link_shapes
from envelope.geometry import Body, Capsule
from envelope.kinematics import Arm


def invented_cell() -> Cell:
    a = [0.05, 0.40, 0.03, 0, 0, 0]
    alpha = [-math.pi / 2, 0, -math.pi / 2, math.pi / 2, -math.pi / 2, 0]
    d = [0.35, 0, 0, 0.40, 0, 0.08]
    limits = np.radians([[-170, 170], [-100, 140], [-150, 70], [-180, 180], [-120, 120], [-360, 360]])
    arm = Arm.from_dh(a, alpha, d, [0, -math.pi / 2, 0, 0, 0, 0], limits)
    links = tuple(Body(f"link {i}", i, tuple(generated_link_shapes(arm.a, arm.alpha, arm.d, "standard", i, 0.05)))
                  for i in range(7))
    tool = Tool(np.eye(4), (Body("tool", 6, (Capsule([0, 0, 0], [0, 0, 0.15], 0.03),), role="tool"),))
    return Cell(name="bench", arm=arm, world_from_base=np.eye(4), links=links, tool=tool, zones=())


def main() -> None:
    cell = invented_cell()
    limits = np.array(cell.arm.limits)
    limits[0] = np.radians([-45, 45])
    for pitch in (0.04, 0.02, 0.01):
        t0 = time.perf_counter()
        space = S.maximum_space(cell, pitch=pitch)
        t1 = time.perf_counter()
        rs = S.restricted_space(cell, limits, 0.1, pitch=pitch)
        t2 = time.perf_counter()
        print(f"pitch {pitch * 1e3:4.0f} mm: maximum {t1 - t0:6.2f} s ({int(space.occupancy.sum()):>9d} voxels, "
              f"{len(space.mesh.faces):>8d} triangles, bound {space.over_approximation * 1e3:5.1f} mm); "
              f"restricted (joint 1 +-45 deg, 100 mm) {t2 - t1:6.2f} s")


if __name__ == "__main__":
    main()
