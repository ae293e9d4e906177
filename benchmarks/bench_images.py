"""A 20,000 x 3,000 PNG pair: `holotype compare` vs decoding both with Pillow and `numpy.array_equal`.

The anchor is the least a user would do by hand; holotype also finds how many pixels moved and by how
much, and stays within one decoded image of memory. Wall time and peak resident memory of each command are
measured by a fresh wrapper process, medians of three.

Run: python benchmarks/bench_images.py
"""

from __future__ import annotations

import statistics
import sys

from _timing import WORK, ratio_line, wall_and_peak

WIDTH, HEIGHT = 20_000, 3_000
NAIVE = ("import sys\nimport numpy as np\nfrom PIL import Image\n"
         "a = np.array(Image.open(sys.argv[1]))\nb = np.array(Image.open(sys.argv[2]))\n"
         "print(a.shape == b.shape and np.array_equal(a, b))\n")


def main() -> None:
    from PIL import Image, ImageDraw

    WORK.mkdir(parents=True, exist_ok=True)
    paths = []
    for name, shift in (("before", 0), ("after", 1)):
        path = WORK / f"figure-{name}.png"
        if not path.exists():
            image = Image.new("RGB", (WIDTH, HEIGHT), "white")
            draw = ImageDraw.Draw(image)
            for k in range(0, WIDTH, 400):  # a field of curves, one of them shifted by a pixel
                draw.line([(k, 200), (k + 300, HEIGHT - 200 + (shift if k == 4000 else 0))], fill="navy", width=3)
            image.save(path)
        paths.append(str(path))
    script = WORK / "naive_images.py"
    script.write_text(NAIVE)
    ours = [wall_and_peak([sys.executable, "-m", "holotype", "compare", *paths]) for _ in range(3)]
    anchor = [wall_and_peak([sys.executable, str(script), *paths]) for _ in range(3)]
    print(f"{WIDTH:,} x {HEIGHT:,} RGB PNG pair")
    print(ratio_line("holotype compare vs Pillow + numpy.array_equal (time)", statistics.median(o[0] for o in ours),
                     statistics.median(a[0] for a in anchor), 1.5))
    print(ratio_line("holotype compare vs Pillow + numpy.array_equal (peak memory)",
                     statistics.median(o[1] for o in ours), statistics.median(a[1] for a in anchor), 0.5, unit=" MiB"))


if __name__ == "__main__":
    main()
