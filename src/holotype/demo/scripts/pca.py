"""Principal components of the standardised water-chemistry variables, by singular value decomposition."""

import csv
import os
from typing import Any

CHEMISTRY = ["temperature_c", "oxygen_mg_l", "ph", "conductivity_us_cm", "chlorophyll_ug_l", "turbidity_ntu",
             "phosphorus_ug_l"]


def principal_components(matrix: Any) -> tuple[Any, Any, Any]:
    """Loadings (variables x components), explained variances and scores of the standardised matrix."""
    import numpy as np

    x = np.asarray(matrix, dtype=np.float64)
    z = (x - x.mean(axis=0)) / x.std(axis=0, ddof=1)
    u, s, vt = np.linalg.svd(z, full_matrices=False)
    variances = s ** 2 / (x.shape[0] - 1)  # eigenvalues of the correlation matrix
    return vt.T, variances, u * s


def main() -> None:
    import numpy as np

    rows = list(csv.DictReader(open("data/lakes.csv", newline="")))
    matrix = [[float(r[v]) for v in CHEMISTRY] for r in rows]
    loadings, variances, scores = principal_components(matrix)
    os.makedirs("results", exist_ok=True)
    names = [f"PC{i + 1}" for i in range(len(CHEMISTRY))]
    with open("results/pca_loadings.csv", "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["variable"] + names)
        for var, row in zip(CHEMISTRY, loadings):
            out.writerow([var] + [repr(float(v)) for v in row])
    with open("results/pca_variance.csv", "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["component", "eigenvalue", "proportion", "cumulative"])
        total = float(variances.sum())
        running = 0.0
        for name, value in zip(names, variances):
            running += float(value)
            out.writerow([name, repr(float(value)), repr(float(value) / total), repr(running / total)])
    np.save("results/pca_scores.npy", scores)
    print(f"pca: first two components explain {100 * float(variances[:2].sum() / variances.sum()):.1f}%")


if __name__ == "__main__":
    main()
