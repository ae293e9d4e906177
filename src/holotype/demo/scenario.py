"""An invented freshwater lake survey. Every value is made up for the demo; no real lake is described.

Six lakes of two kinds: clear-water lakes (deep, low nutrients) and turbid lakes (shallow,
nutrient-rich, algae-laden), thirty sampling sites each. Variables are generated from a
lake-level trophic state plus site noise, so they correlate the way such surveys tend to:
more phosphorus, more chlorophyll-a and turbidity, less depth and transparency.
"""

from __future__ import annotations

import numpy as np

LAKES = [("Lake Veyra", "clear"), ("Lake Osmund", "clear"), ("Lake Tarrin", "clear"),
         ("Lake Bramble", "turbid"), ("Lake Mireth", "turbid"), ("Lake Dunmoor", "turbid")]
SITES_PER_LAKE = 30
COLUMNS = ["lake", "kind", "site", "depth_m", "temperature_c", "oxygen_mg_l", "ph", "conductivity_us_cm",
           "chlorophyll_ug_l", "turbidity_ntu", "phosphorus_ug_l"]
GENERATOR_SEED = 4172  # fixed: the demo data are the same on every machine


def survey_rows() -> list[list[str]]:
    """The survey as text rows (values rounded the way field instruments report them)."""
    rng = np.random.default_rng(GENERATOR_SEED)
    rows: list[list[str]] = []
    for lake_index, (lake, kind) in enumerate(LAKES):
        trophic = (0.0 if kind == "clear" else 1.6) + rng.normal(0, 0.25)  # lake-level nutrient state
        for site in range(1, SITES_PER_LAKE + 1):
            t = trophic + rng.normal(0, 0.35)
            phosphorus = np.exp(2.5 + 0.9 * t + rng.normal(0, 0.2))
            chlorophyll = np.exp(1.0 + 0.08 * np.log(phosphorus) + rng.normal(0, 0.6))
            turbidity = np.exp(-0.2 + 0.7 * t + rng.normal(0, 0.25))
            depth = max(0.6, (14.0 - 5.5 * t) * np.exp(rng.normal(0, 0.25)))
            temperature = 17.5 + 1.2 * t - 0.08 * depth + rng.normal(0, 0.6)
            oxygen = 10.2 - 0.045 * depth - 0.9 * max(t, 0) + 0.03 * chlorophyll + rng.normal(0, 0.4)
            ph = 7.1 + 0.35 * t + 0.01 * chlorophyll + rng.normal(0, 0.12)
            conductivity = 120 + 60 * t + 25 * (lake_index % 3) + rng.normal(0, 12)
            rows.append([lake, kind, f"{lake.split()[-1][:3].upper()}-{site:02d}", f"{depth:.1f}",
                         f"{temperature:.1f}", f"{oxygen:.2f}", f"{ph:.2f}", f"{conductivity:.0f}",
                         f"{chlorophyll:.2f}", f"{turbidity:.2f}", f"{phosphorus:.1f}"])
    return rows


def survey_csv() -> str:
    """The survey as CSV text with a header row."""
    return ",".join(COLUMNS) + "\n" + "".join(",".join(r) + "\n" for r in survey_rows())
