"""Timing of the space check: the invented test cell (capsules) and the demo cell.

Run: /work/venv/bin/python tests/benchmarks/bench_spacecheck.py [pitch_mm]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from envelope.cell import load_cell
from envelope.check import run_check
from envelope.demo import demo_cell_path
from envelope.spacecheck import run_space_check
from envelope.units import to_metres


def main() -> None:
    pitch = float(to_metres(float(sys.argv[1]) if len(sys.argv) > 1 else 20.0, "mm"))
    for path in (Path(__file__).resolve().parents[1] / "data" / "space-cell.toml", demo_cell_path()):
        cell = load_cell(path)
        result = run_check(cell)
        t0 = time.perf_counter()
        sc = run_space_check(cell, result=result, pitch=pitch)
        total = time.perf_counter() - t0
        parts = ", ".join(f"{k} {v:.1f} s" for k, v in sc.timings.items())
        print(f"{cell.name}: {total:.1f} s ({parts}); suggestion found: {sc.suggestion.found}")


if __name__ == "__main__":
    main()
