"""Water clarity per lake: light attenuation from turbidity (the invented lake-optics library) and the
depth where 1 % of surface light is left, z = ln(100 / percent) / k (Beer-Lambert attenuation)."""

import csv
import importlib
import math
import os


def main() -> None:
    optics = importlib.import_module("lake_optics")  # invented libraries of the demo environment
    units = importlib.import_module("lake_units")
    tables = importlib.import_module("lake_tables")
    rows = list(csv.DictReader(open("data/lakes.csv", newline="")))
    lakes = sorted({r["lake"] for r in rows})
    os.makedirs("results", exist_ok=True)
    with open("results/clarity.csv", "w", newline="") as fh:
        fh.write("lake,attenuation_per_m,light_depth_m\n")
        for lake in lakes:
            ks = [optics.attenuation(float(r["turbidity_ntu"])) for r in rows if r["lake"] == lake]
            k = sum(ks) / len(ks)
            depth = math.log(100.0 / units.PERCENT_LIGHT_LEFT) / k
            fh.write(f"{lake},{tables.cell(k)},{tables.cell(depth)}\n")


if __name__ == "__main__":
    main()
