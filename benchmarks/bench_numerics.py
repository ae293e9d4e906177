"""What recording the numeric stack costs (issue 16 targets: at most +0.3 s on `record` with NumPy and SciPy
installed, and nothing on `check` while the stack and the environment are unchanged).

Measured in the same run, on this interpreter (which has NumPy and SciPy): the capture `record --no-run`
does, with and without the numeric inspection, and the same for `check` with a warm cache.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
from pathlib import Path

from _timing import WORK, median_seconds


def main() -> None:
    from holotype.capture.project import capture_project
    from holotype.config import load_config

    root = WORK / "numerics"
    shutil.rmtree(root, ignore_errors=True)
    (root / "data").mkdir(parents=True)
    (root / "data" / "a.csv").write_text("x\n1\n")
    (root / "analysis.py").write_text("import numpy, scipy.linalg\n")
    (root / "holotype.toml").write_text(f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\nthreads = 1\n')
    config = load_config(root)
    with tempfile.TemporaryDirectory() as cache:
        os.environ["HOLOTYPE_CACHE_DIR"] = cache
        capture_project(config)  # warm the file cache and the remembered inspection
        # as record captures: listings built, the inspection started before the files are hashed
        plain = median_seconds(lambda: capture_project(config, numerics=False, full=True, listings=True))
        inspected = median_seconds(lambda: capture_project(config, numerics=True, full=True, listings=True))
        print(f"record's capture (no cache): without the numeric stack {plain:.3f}s, with it {inspected:.3f}s: "
              f"+{inspected - plain:.3f}s (target <= +0.3 s: {'meets' if inspected - plain <= 0.3 else 'MISSES'})")
        warm_plain = median_seconds(lambda: capture_project(config, numerics=False))
        warm = median_seconds(lambda: capture_project(config, numerics=True))
        print(f"check's capture (warm cache): without {warm_plain:.3f}s, with {warm:.3f}s: "
              f"+{warm - warm_plain:.3f}s (target: about nothing)")
    print(f"(interpreter: {sys.executable}; project: {Path(root)})")


if __name__ == "__main__":
    main()
