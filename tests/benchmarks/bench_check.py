"""Benchmark: `envelope check` on a generated variant of the demo cell with many targets.

Usage: python tests/benchmarks/bench_check.py [--targets 10000] [--jobs 1 2]

Copies the demo cell into a scratch folder, replaces its targets CSV by N seeded random TCP poses (the few inline targets stay) in
the arm's working region (tool pointing down, random yaw), drops its programs, and runs the check
through the library (the same calls the CLI makes: ``check_cell`` then ``write_report``), reporting
wall time, rows per second, and the time spent in IK, clearance, row building, the space check and
report writing, for each --jobs value.
"""

from __future__ import annotations

import argparse
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np

from envelope.cell import load_cell
from envelope.check import check_cell
from envelope.demo import demo_cell_path
from envelope.report import write_report


def make_cell(folder: Path, n: int, seed: int = 1) -> Path:
    shutil.copytree(demo_cell_path().parent, folder, symlinks=False, ignore=shutil.ignore_patterns("__*"))
    rng = np.random.default_rng(seed)
    r = rng.uniform(0.35, 0.85, n)
    phi = rng.uniform(-np.pi * 0.9, np.pi * 0.9, n)
    x, y = r * np.cos(phi) * 1000, r * np.sin(phi) * 1000
    z = rng.uniform(500, 1300, n)
    yaw = rng.uniform(-180, 180, n)
    lines = ["name,frame,x,y,z,convention,euler_1,euler_2,euler_3,qw,qx,qy,qz"]
    lines += [f"g{i},world,{x[i]:.3f},{y[i]:.3f},{z[i]:.3f},fixed-xyz,180,0,{yaw[i]:.3f},,,," for i in range(n)]
    (folder / "targets.csv").write_text("\n".join(lines) + "\n")
    text = (folder / "cell.toml").read_text()
    text = text.split("# ---------------------------------------------------------------- programs")[0]
    (folder / "cell.toml").write_text(text)
    return folder / "cell.toml"


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--targets", type=int, default=10000)
    ap.add_argument("--jobs", type=int, nargs="+", default=[1, 2])
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        path = make_cell(Path(tmp) / "cell", args.targets)
        for jobs in args.jobs:
            t0 = time.perf_counter()
            cell = load_cell(path)
            t1 = time.perf_counter()
            result = check_cell(cell, jobs=jobs)  # what `envelope check` runs (targets, programs, space check)
            t2 = time.perf_counter()
            write_report(result, Path(tmp) / f"out{jobs}", jobs=jobs)
            t3 = time.perf_counter()
            n_rows = len(result.rows)
            print(
                f"targets {len(cell.targets)}  jobs {jobs}: wall {t3 - t0:.2f} s  rows {n_rows}  "
                f"rows/s {n_rows / (t3 - t0):.0f}  load {t1 - t0:.2f} s  ik {result.timings['ik_s']:.2f} s  "
                f"clearance {result.timings['clearance_s']:.2f} s  rows {result.timings['rows_s']:.2f} s  "
                f"space {result.timings['space_s']:.2f} s  "
                f"report {t3 - t2:.2f} s  verdict {result.verdict}"
            )


if __name__ == "__main__":
    main()
