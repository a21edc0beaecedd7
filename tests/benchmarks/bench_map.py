"""Poses per second of a clearance map of the demo cell (not collected by pytest).

    /work/venv/bin/python tests/benchmarks/bench_map.py [--sizes 1e4,1e5,1e6] [--backends serial,jobs2,dask2]
                                                        [--cell capsules]

For each grid size (a cube of TCP positions around the arm, tool pointing down, one orientation)
and backend (this process; a 2-process pool; a 2-worker Dask LocalCluster) it prints the wall time,
poses per second, poses per second per core, the within-limits branches of the first chunks and the
share of them left to the clearance engine (``n_engine``: the configurations the compiled loop of
envelope.margins flags; all of them on a cell it does not support), and the fraction of positions
reachable and clear. ``--cell capsules`` uses the test cell of tests/test_mapping.py (generated
capsule links, which the compiled loop does not support: every branch goes to the engine) instead.
Each measurement runs in a fresh process so that a crash of python-fcl on one grid does not stop the
others (it is reported as a crash). With BENCH_MAP_PROGRESS=FILE, every finished chunk appends the
elapsed time, poses done and the running rate to FILE (a run stopped early still gives a rate).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve()
sys.path.insert(0, str(HERE.parents[1]))


def grid_for(cell, n, mapping):
    """A cube of about ``n`` positions: x -587..1413, y -993..1007, z 13..2013 mm (offset by 13 mm so
    no grid pose touches a zone's round coordinates exactly)."""
    per = max(2, round(n ** (1 / 3)))
    step = 2000.0 / (per - 1)
    region = [[-587, -587 + step * (per - 1)], [-993, -993 + step * (per - 1)], [13, 13 + step * (per - 1)]]
    return mapping.make_grid(cell, region, step, [[180, 0, 0]])


def one(args) -> dict:
    import numpy as np

    from envelope import mapping
    from envelope.cell import load_cell

    if args.cell == "capsules":
        from test_mapping import CELL_TOML

        path = Path(tempfile.mkdtemp()) / "cell.toml"
        path.write_text(CELL_TOML)
        cell = load_cell(path)
    else:
        from envelope.demo import demo_cell_path

        cell = load_cell(demo_cell_path())
    g = grid_for(cell, int(float(args.size)), mapping)
    kw = {"serial": {}, "jobs2": {"jobs": 2}, "dask2": {"jobs": 2, "dask": "local"}}[args.backend]
    stats = {"configs": 0, "engine": 0}
    orig = mapping.evaluate_chunk

    log = os.environ.get("BENCH_MAP_PROGRESS")  # a file to append progress lines to (partial runs)

    def progress(done, total, rate, eta):
        if log:
            with open(log, "a") as fh:
                fh.write(f"{time.perf_counter() - t0:.1f} s: {done}/{total} poses, {rate:.1f} poses/s, eta {eta:.0f} s\n")

    t0 = time.perf_counter()
    res = mapping.run_map(cell, g, progress=progress, **kw)
    wall = time.perf_counter() - t0
    cores = 1 if args.backend == "serial" else 2
    # the engine share, measured serially on the first chunks (cheap to repeat)
    n_probe = min(g.size, 8 * mapping.DEFAULT_CHUNK)
    for s in range(0, n_probe, mapping.DEFAULT_CHUNK):
        r = orig(cell, g, s, min(s + mapping.DEFAULT_CHUNK, n_probe))
        stats["configs"] += r.n_configs
        stats["engine"] += r.n_engine
    return {
        "cell": cell.name, "size": g.size, "shape": list(g.shape), "backend": args.backend,
        "wall_s": round(wall, 2), "poses_per_s": round(g.size / wall, 1),
        "poses_per_s_per_core": round(g.size / wall / cores, 1),
        "configs_first_chunks": stats["configs"], "engine_first_chunks": stats["engine"],
        "engine_share_first_chunks": round(stats["engine"] / max(stats["configs"], 1), 3),
        "reachable_fraction": round(float(res.reachable.mean()), 4), "clear_fraction": round(float(res.clear.mean()), 4),
        "branches_per_pose": round(float(res.n_within.mean()), 3),
        "note": "" if np.isfinite(res.best_margin[res.reachable]).all() else "some best margins -inf (unknown depth)",
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1e4,1e5")
    ap.add_argument("--backends", default="serial,jobs2,dask2")
    ap.add_argument("--cell", default="demo", choices=("demo", "capsules"))
    ap.add_argument("--size", help=argparse.SUPPRESS)
    ap.add_argument("--backend", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.size:  # a child run
        print(json.dumps(one(args)))
        return
    print(f"cpu cores: {os.cpu_count()}; cell: {args.cell}")
    for size in args.sizes.split(","):
        for backend in args.backends.split(","):
            cmd = [sys.executable, str(HERE), "--size", size, "--backend", backend, "--cell", args.cell]
            t0 = time.perf_counter()
            p = subprocess.run(cmd, capture_output=True, text=True)
            if p.returncode != 0:
                tail = (p.stderr.strip().splitlines() or ["?"])[-1]
                print(json.dumps({"size": size, "backend": backend, "crashed": p.returncode,
                                  "after_s": round(time.perf_counter() - t0, 1), "stderr": tail[:300]}))
            else:
                print(p.stdout.strip().splitlines()[-1], flush=True)


if __name__ == "__main__":
    main()
