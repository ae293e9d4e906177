"""Two 1,000,000 x 10 float CSV files (17 significant digits, one with 1e-12 relative noise) compared at
rtol = 1e-9: `holotype compare` vs pandas.read_csv on both + pandas.testing.assert_frame_equal, and vs
pandas.read_csv of both files alone (the parser's limit), same run. Then a wide pair (20,000 columns x 1,000
rows: a table of per-sample measurements, read a few rows at a time) against read_csv of both alone.

Run: python benchmarks/bench_compare.py [--rows N] [--skip-wide]
"""

from __future__ import annotations

import argparse
import statistics
import sys
from pathlib import Path

import numpy as np

from _timing import WORK, ratio_line, wall_and_peak

READ_ONLY = """
import sys, pandas as pd
a = pd.read_csv(sys.argv[1]); b = pd.read_csv(sys.argv[2])
"""
BASELINE = """
import sys, pandas as pd
a = pd.read_csv(sys.argv[1]); b = pd.read_csv(sys.argv[2])
pd.testing.assert_frame_equal(a, b, check_exact=False, rtol=1e-9)
"""


def make_files(rows: int) -> tuple[Path, Path]:
    folder = WORK / "compare"
    folder.mkdir(parents=True, exist_ok=True)
    expected, actual = folder / f"expected-{rows}.csv", folder / f"actual-{rows}.csv"
    if expected.exists() and actual.exists():
        return expected, actual
    rng = np.random.default_rng(20261201)
    header = ",".join(f"v{i}" for i in range(10)) + "\n"
    with open(expected, "w") as fe, open(actual, "w") as fa:
        fe.write(header)
        fa.write(header)
        for start in range(0, rows, 100_000):
            block = rng.standard_normal((min(100_000, rows - start), 10)) * 1e3
            noisy = block * (1 + 1e-12 * rng.standard_normal(block.shape))
            np.savetxt(fe, block, fmt="%.17g", delimiter=",")
            np.savetxt(fa, noisy, fmt="%.17g", delimiter=",")
    return expected, actual


def make_wide(columns: int, rows: int) -> tuple[Path, Path]:
    folder = WORK / "compare"
    folder.mkdir(parents=True, exist_ok=True)
    expected, actual = (folder / f"wide-expected-{columns}x{rows}.csv",
                        folder / f"wide-actual-{columns}x{rows}.csv")
    if expected.exists() and actual.exists():
        return expected, actual
    rng = np.random.default_rng(20261204)
    block = rng.standard_normal((rows, columns))
    header = ",".join(f"s{i}" for i in range(columns))
    np.savetxt(expected, block, fmt="%.17g", delimiter=",", header=header, comments="")
    np.savetxt(actual, block * (1 + 1e-12 * rng.standard_normal(block.shape)), fmt="%.17g", delimiter=",",
               header=header, comments="")
    return expected, actual


def wide(repeat: int) -> None:
    expected, actual = make_wide(20_000, 1_000)
    print(f"20,000 columns x 1,000 rows, {expected.stat().st_size / 1e6:.0f} MB per file")
    ours = [wall_and_peak([sys.executable, "-m", "holotype", "compare", str(expected), str(actual), "--rtol", "1e-9",
                           "--quiet"]) for _ in range(repeat)]
    read = [wall_and_peak([sys.executable, "-c", READ_ONLY, str(expected), str(actual)]) for _ in range(repeat)]
    ours_wall, read_wall = statistics.median(w for w, _ in ours), statistics.median(w for w, _ in read)
    # no target in the issue: the narrow file's targets, as a yardstick
    print(ratio_line("wide: wall time, holotype compare vs read_csv of both alone", ours_wall, read_wall, 0.8))
    print(ratio_line("wide: peak memory, holotype compare vs read_csv alone", max(p for _, p in ours),
                     max(p for _, p in read), 0.35, unit=" MiB"))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--skip-wide", action="store_true")
    args = parser.parse_args()
    expected, actual = make_files(args.rows)
    print(f"{args.rows:,} x 10 floats, {expected.stat().st_size / 1e6:.0f} MB per file")
    ours = [wall_and_peak([sys.executable, "-m", "holotype", "compare", str(expected), str(actual), "--rtol", "1e-9",
                           "--quiet"]) for _ in range(args.repeat)]
    base = [wall_and_peak([sys.executable, "-c", BASELINE, str(expected), str(actual)]) for _ in range(args.repeat)]
    ours_wall, base_wall = statistics.median(w for w, _ in ours), statistics.median(w for w, _ in base)
    ours_peak, base_peak = max(p for _, p in ours), max(p for _, p in base)
    print(ratio_line("wall time, holotype compare vs pandas", ours_wall, base_wall, 1.0))
    print(ratio_line("peak memory, holotype compare vs pandas", ours_peak, base_peak, 0.5, unit=" MiB"))
    # the parser's limit: pandas reading both files, comparing nothing
    read = [wall_and_peak([sys.executable, "-c", READ_ONLY, str(expected), str(actual)]) for _ in range(args.repeat)]
    read_wall, read_peak = statistics.median(w for w, _ in read), max(p for _, p in read)
    print(ratio_line("wall time, holotype compare vs pandas read_csv of both files alone", ours_wall, read_wall, 0.8))
    print(ratio_line("peak memory, holotype compare vs read_csv alone", ours_peak, read_peak, 0.35, unit=" MiB"))
    # what of the anchor any compare pays as well: starting Python and importing the parser's library (pandas
    # 3.1 then parses a big file on every core, so the rest of the anchor is already the parse at full width)
    start = statistics.median(wall_and_peak([sys.executable, "-c", "import pandas"])[0] for _ in range(args.repeat))
    print(f"  of read_csv's {read_wall:.3f}s, {start:.3f}s is starting Python and importing pandas; the parse of "
          f"both files takes the other {read_wall - start:.3f}s")
    if not args.skip_wide:
        wide(args.repeat)


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    main()
