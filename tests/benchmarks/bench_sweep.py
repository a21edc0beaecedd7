"""Certified sweeps of the demo cell's program: time per move, distance queries, and the ratio to uniform
sampling (not collected by pytest).

    /work/venv/bin/python tests/benchmarks/bench_sweep.py [--allowance MM]

For every move x start branch: seconds, clearance queries used by the certified sweep, IK samples
(linear moves), and the number of samples uniform sampling needs for the same guarantee at 1 mm of
maximum point displacement between samples, computed from the same displacement bound
(``MotionRow.uniform_samples = ceil(max_displacement / 1 mm) + 1``). ``--allowance`` replaces the
cell's and every move's stopping allowance (mm), e.g. 0 for a program that is clear.
"""

from __future__ import annotations

import argparse
import dataclasses
import time
from pathlib import Path

from envelope.cell import load_cell
from envelope.clearance import engine_for
from envelope.sweep import run_sweep
from envelope.units import to_metres, to_mm

DEMO = Path(__file__).resolve().parents[2] / "envelope" / "demo" / "cell.toml"


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--allowance", type=float, default=None, help="stopping allowance for every move, mm")
    args = ap.parse_args()
    cell = load_cell(DEMO)
    if args.allowance is not None:
        allowance = float(to_metres(args.allowance, "mm"))
        programs = tuple(dataclasses.replace(p, moves=tuple(dataclasses.replace(m, stopping_allowance=None)
                                                            for m in p.moves)) for p in cell.programs)
        cell = dataclasses.replace(cell, stopping_allowance=allowance, programs=programs)
    t = time.perf_counter()
    engine = engine_for(cell)
    t_engine = time.perf_counter() - t
    t = time.perf_counter()
    rows = run_sweep(cell, engine=engine)
    total = time.perf_counter() - t
    print(f"cell: {cell.name}  pairs: {len(engine.pairs)}  engine build {t_engine:.3f} s")
    head = (f"{'prog':<14}{'mv':>3} {'motion':<7}{'branch':<15}{'status':<15}{'min mm':>8}{'req mm':>8}"
            f"{'s':>7}{'queries':>8}{'ik':>6}{'uniform':>9}{'ratio':>7}{'time s':>8}")
    print(head)
    swept = [r for r in rows if r.queries > 0]
    for r in rows:
        ratio = r.uniform_samples / r.queries if r.queries else float("nan")
        print(f"{r.program[:13]:<14}{r.move:>3} {r.motion:<7}{r.branch:<15}{r.status:<15}"
              f"{to_mm(r.min_clearance):>8.2f}{to_mm(r.required):>8.2f}{r.where:>7.3f}{r.queries:>8}"
              f"{r.ik_samples:>6}{r.uniform_samples:>9}{ratio:>7.1f}{r.seconds:>8.3f}")
    q = sum(r.queries for r in swept)
    u = sum(r.uniform_samples for r in swept)
    print(f"moves swept: {len(swept)}  total {total:.2f} s ({total / max(len(swept), 1):.3f} s per move)")
    print(f"queries: {q}  uniform-sampling equivalent: {u}  ratio {u / max(q, 1):.1f}x "
          f"(smallest per move {min((r.uniform_samples / r.queries for r in swept), default=float('nan')):.1f}x)")


if __name__ == "__main__":
    main()
