"""Summary statistics per lake kind: n, mean, standard deviation, standard error, median, quartiles."""

import csv
import math
import os
from collections.abc import Sequence
from typing import Any

VARIABLES = ["depth_m", "temperature_c", "oxygen_mg_l", "ph", "conductivity_us_cm", "chlorophyll_ug_l",
             "turbidity_ntu", "phosphorus_ug_l"]


def describe(values: Sequence[float]) -> dict[str, Any]:
    """n, mean, sample standard deviation (two-pass), standard error of the mean, median, quartiles."""
    import numpy as np

    x = np.asarray(values, dtype=np.float64)
    n = x.size
    mean = float(np.sum(x) / n)
    # two passes: deviations from the mean, then a corrected sum, keeps digits on data with a large offset
    dev = x - mean
    mean += float(np.sum(dev) / n)
    dev = x - mean
    sd = math.sqrt(float(np.sum(dev * dev)) / (n - 1))
    q1, median, q3 = (float(v) for v in np.percentile(x, [25, 50, 75]))
    return {"n": n, "mean": mean, "sd": sd, "sem": sd / math.sqrt(n), "median": median, "q1": q1, "q3": q3}


def main() -> None:
    rows = list(csv.DictReader(open("data/lakes.csv", newline="")))
    os.makedirs("results", exist_ok=True)
    with open("results/summary.csv", "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["kind", "variable", "n", "mean", "sd", "sem", "median", "q1", "q3"])
        for kind in ("clear", "turbid"):
            for var in VARIABLES:
                d = describe([float(r[var]) for r in rows if r["kind"] == kind])
                out.writerow([kind, var, d["n"]] + [repr(d[k]) for k in ("mean", "sd", "sem", "median", "q1", "q3")])
    print(f"summary: {len(rows)} sites, {len(VARIABLES)} variables")


if __name__ == "__main__":
    main()
