"""Benchmark of envelope's inverse kinematics (a script; pytest does not collect it).

Run:  /work/venv/bin/python tests/benchmarks/bench_ik.py [--n 100000]

For random reachable poses (made by FK of random joint values) of an ortho-parallel arm and of an arm
with general twists: batch IK time per pose (all branches), single-pose call latency, and the ratio
of batch IK time to batch FK time of the n * 8 configurations IK returned, in the same run; then
``Arm.ik_each`` (full per-pose ``IKSolutions``) on 10 000 poses, a tenth of them beyond reach, with
joint 6 limited to +-360 deg (turn variants).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from envelope.kinematics import Arm

PI = np.pi


def arms():
    ortho = Arm.from_dh([0.15, 0.6, 0.12, 0, 0, 0], [-PI / 2, 0, -PI / 2, PI / 2, -PI / 2, 0],
                        [0.45, 0, 0, 0.65, 0, 0.1], [0, -PI / 2, 0, 0, 0, 0], name="ortho-parallel")
    rng = np.random.default_rng(7)
    a, al, d, off = rng.uniform(-0.5, 0.5, 6), rng.uniform(-PI, PI, 6), rng.uniform(-0.5, 0.5, 6), rng.uniform(-PI, PI, 6)
    a[3] = a[4] = d[4] = 0.0
    general = Arm.from_dh(a, al, d, off, name="general-twist")
    return [ortho, general]


def best_of(fn, repeat, clock=time.perf_counter):
    times = []
    for _ in range(repeat):
        t = clock()
        out = fn()
        times.append(clock() - t)
    return min(times), out


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--n", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    n = args.n
    rng = np.random.default_rng(1)
    print(f"n = {n} poses, best of {args.repeat}")
    for arm in arms():
        T = arm.fk(rng.uniform(-PI, PI, (n, 6)))
        # process CPU time as well as wall time: on a shared machine the CPU time is the steadier figure
        t_ik, res = best_of(lambda: arm.ik(T), args.repeat)
        q = np.where(res.valid[..., None], res.q, 0.0).reshape(-1, 6)  # n * 8 configurations
        t_fk, _ = best_of(lambda: arm.fk(q), args.repeat)
        c_ik, _ = best_of(lambda: arm.ik(T), args.repeat, time.process_time)
        c_fk, _ = best_of(lambda: arm.fk(q), args.repeat, time.process_time)
        single = T[:200]
        t0 = time.perf_counter()
        for P in single:
            arm.ik(P)
        t_single = (time.perf_counter() - t0) / len(single)
        print(
            f"{arm.name:15s} batch IK {t_ik / n * 1e6:6.2f} us/pose   FK of 8 configs {t_fk / n * 1e6:6.2f} us/pose   "
            f"IK/FK {t_ik / t_fk:5.2f}   single-pose IK {t_single * 1e6:7.1f} us   "
            f"solutions/pose {res.valid.sum() / n:4.2f}"
        )
        print(f"{'':15s} CPU time: batch IK {c_ik / n * 1e6:6.2f} us/pose   FK of 8 configs {c_fk / n * 1e6:6.2f} us/pose   "
              f"IK/FK {c_ik / c_fk:5.2f}")


def bench_each(n_each=10_000):
    print(f"ik_each: {n_each} poses, joint 6 in +-360 deg (turn variants)")
    rng = np.random.default_rng(2)
    for arm in arms():
        lim = np.array(arm.limits)
        lim[5] = [-2 * PI, 2 * PI]
        arm = arm.with_limits(lim)
        T = arm.fk(rng.uniform(-PI, PI, (n_each, 6)))
        for label in ("all reachable", "10 % beyond reach"):
            if label != "all reachable":
                T[: n_each // 10, :3, 3] *= 4.0
                arm.ik_each(T[:10])  # build the cached grid of the unreachable-reason search
            w0, c0 = time.perf_counter(), time.process_time()
            sols = arm.ik_each(T)
            wall, cpu = time.perf_counter() - w0, time.process_time() - c0
            print(f"{arm.name:15s} ik_each, {label:17s} wall {wall:5.2f} s ({wall / n_each * 1e6:6.1f} us/pose)   "
                  f"CPU {cpu:5.2f} s ({cpu / n_each * 1e6:6.1f} us/pose)   rows {sum(len(s) for s in sols)}   "
                  f"unreachable {sum(not s.reachable for s in sols)}")
        reach = T[n_each // 10 : n_each // 10 + 200]
        c0 = time.process_time()
        for P in reach:
            arm.ik(P)
        print(f"{'':15s} single-pose arm.ik, reachable: CPU {(time.process_time() - c0) / len(reach) * 1e6:7.1f} us")


if __name__ == "__main__":
    main()
    bench_each()
