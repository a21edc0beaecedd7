"""Time and size of clearance.json / clearance.csv for a big synthetic result (not collected by pytest).

    /work/venv/bin/python tests/benchmarks/bench_report.py [rows] [pairs]

Rows are copies of invented pair tables with seeded random distances; the figures, HTML and PDF are
timed too. Extrapolate linearly to 80 000 rows x 200 pairs.
"""

from __future__ import annotations

import dataclasses
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_report_support import invented_result  # noqa: E402

from envelope.check import CheckResult, PairRow  # noqa: E402
from envelope.report import write_report  # noqa: E402
from envelope.report.tables import write_csv, write_json  # noqa: E402


def big_result(n_rows: int, n_pairs: int) -> CheckResult:
    rng = np.random.default_rng(7)
    base = invented_result()
    template = [r for r in base.rows if r.pairs][0]
    p0 = template.pairs[0]
    pairs = []
    for k in range(n_pairs):
        d = float(rng.uniform(-0.01, 1.0))
        pairs.append(
            PairRow(f"link{k % 7}", f"zone{k // 7}", "zone", "fence", str(k % 3), 0.1, d, d + 0.001, True,
                    k % 5 == 0, rng.uniform(-1, 1, 3), rng.uniform(-1, 1, 3), "clear" if d > 0.1 else "below margin")
        )
    pairs = tuple(pairs)
    rows = []
    for i in range(n_rows):
        rows.append(dataclasses.replace(template, target=f"t{i // 8}", branch=f"b{i % 8}", pairs=pairs,
                                        clearance=float(rng.uniform(0, 1)), margin=float(rng.uniform(-0.1, 1))))
    del p0
    return CheckResult(cell=base.cell, rows=tuple(rows))


def main():
    n_rows = int(sys.argv[1]) if len(sys.argv) > 1 else 2000
    n_pairs = int(sys.argv[2]) if len(sys.argv) > 2 else 200
    result = big_result(n_rows, n_pairs)
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp)
        t = time.perf_counter()
        write_json(result, out / "clearance.json")
        tj = time.perf_counter() - t
        t = time.perf_counter()
        write_csv(result, out / "clearance.csv")
        tc = time.perf_counter() - t
        t = time.perf_counter()
        write_report(result, out / "all")
        ta = time.perf_counter() - t
        size = (out / "clearance.json").stat().st_size
        scale = 80000 * 200 / (n_rows * n_pairs)
        print(f"{n_rows} rows x {n_pairs} pairs: json {tj:.2f} s {size / 1e6:.1f} MB, csv {tc:.2f} s, "
              f"whole report {ta:.2f} s")
        print(f"extrapolated to 80000 x 200: json {tj * scale:.0f} s, {size * scale / 1e9:.2f} GB")


if __name__ == "__main__":
    main()
