"""Chlorophyll-a between lake kinds: Welch's t-test, the rank-sum test, a permutation test, a bootstrap CI."""

import csv
import json
import math
import os
from collections.abc import Sequence
from typing import Any

PERMUTATIONS = 10_000
BOOTSTRAPS = 10_000


def _betacf(a: float, b: float, x: float) -> float:
    # continued fraction for the regularised incomplete beta function (modified Lentz method)
    tiny = 1e-300
    c, d = 1.0, 1.0 - (a + b) * x / (a + 1.0)
    d = 1.0 / (d if abs(d) > tiny else tiny)
    h = d
    for m in range(1, 400):
        m2 = 2 * m
        aa = m * (b - m) * x / ((a + m2 - 1.0) * (a + m2))
        d = 1.0 + aa * d
        d = 1.0 / (d if abs(d) > tiny else tiny)
        c = 1.0 + aa / c if abs(c) > tiny else 1.0 + aa / tiny
        h *= d * c
        aa = -(a + m) * (a + b + m) * x / ((a + m2) * (a + m2 + 1.0))
        d = 1.0 + aa * d
        d = 1.0 / (d if abs(d) > tiny else tiny)
        c = 1.0 + aa / c if abs(c) > tiny else 1.0 + aa / tiny
        delta = d * c
        h *= delta
        if abs(delta - 1.0) < 1e-16:
            break
    return h


def betainc(a: float, b: float, x: float) -> float:
    """Regularised incomplete beta I_x(a, b)."""
    if x <= 0.0:
        return 0.0
    if x >= 1.0:
        return 1.0
    front = math.exp(math.lgamma(a + b) - math.lgamma(a) - math.lgamma(b) + a * math.log(x) + b * math.log1p(-x))
    if x < (a + 1.0) / (a + b + 2.0):
        return front * _betacf(a, b, x) / a
    return 1.0 - front * _betacf(b, a, 1.0 - x) / b


def welch(x: Sequence[float], y: Sequence[float]) -> dict[str, float]:
    """Welch's unequal-variance t-test, two-sided: t, degrees of freedom, p-value."""
    n1, n2 = len(x), len(y)
    m1, m2 = sum(x) / n1, sum(y) / n2
    v1 = sum((v - m1) ** 2 for v in x) / (n1 - 1)
    v2 = sum((v - m2) ** 2 for v in y) / (n2 - 1)
    se2 = v1 / n1 + v2 / n2
    t = (m1 - m2) / math.sqrt(se2)
    df = se2 ** 2 / ((v1 / n1) ** 2 / (n1 - 1) + (v2 / n2) ** 2 / (n2 - 1))
    p = betainc(df / 2.0, 0.5, df / (df + t * t))
    return {"t": t, "df": df, "p_value": p}


def ranks(values: Sequence[float]) -> list[float]:
    """Ranks 1..n, ties given their average rank."""
    order = sorted(range(len(values)), key=lambda i: values[i])
    out = [0.0] * len(values)
    i = 0
    while i < len(order):
        j = i
        while j + 1 < len(order) and values[order[j + 1]] == values[order[i]]:
            j += 1
        for k in range(i, j + 1):
            out[order[k]] = (i + j) / 2.0 + 1.0
        i = j + 1
    return out


def rank_sum(x: Sequence[float], y: Sequence[float]) -> dict[str, float]:
    """Wilcoxon rank-sum (Mann-Whitney U), two-sided, normal approximation with tie and continuity corrections."""
    n1, n2 = len(x), len(y)
    r = ranks(list(x) + list(y))
    u1 = sum(r[:n1]) - n1 * (n1 + 1) / 2.0
    u = max(u1, n1 * n2 - u1)
    n = n1 + n2
    counts: dict[float, int] = {}
    for v in list(x) + list(y):
        counts[v] = counts.get(v, 0) + 1
    ties = sum(c ** 3 - c for c in counts.values())
    sigma = math.sqrt(n1 * n2 / 12.0 * ((n + 1) - ties / (n * (n - 1))))
    z = (u - n1 * n2 / 2.0 - 0.5) / sigma
    p = min(1.0, math.erfc(z / math.sqrt(2.0)))
    return {"u": u1, "z": z, "p_value": p}


def permutation_p(x: Sequence[float], y: Sequence[float], rng: Any, count: int = PERMUTATIONS) -> dict[str, Any]:
    """Two-sided permutation p-value for the difference in means, counting the observed split ((b+1)/(m+1))."""
    import numpy as np

    pooled = np.concatenate([np.asarray(x, float), np.asarray(y, float)])
    observed = abs(np.mean(x) - np.mean(y))
    shuffled = rng.permuted(np.tile(pooled, (count, 1)), axis=1)
    diffs = np.abs(shuffled[:, : len(x)].mean(axis=1) - shuffled[:, len(x):].mean(axis=1))
    extreme = int(np.sum(diffs >= observed - 1e-12 * observed))
    return {"observed_difference": float(np.mean(x) - np.mean(y)), "permutations": count,
            "p_value": (extreme + 1) / (count + 1)}


def bootstrap_ci(x: Any, y: Any, rng: Any, count: int = BOOTSTRAPS, level: float = 0.95) -> dict[str, Any]:
    """Percentile bootstrap confidence interval for the difference in means."""
    import numpy as np

    x, y = np.asarray(x, float), np.asarray(y, float)
    bx = x[rng.integers(0, x.size, (count, x.size))].mean(axis=1)
    by = y[rng.integers(0, y.size, (count, y.size))].mean(axis=1)
    low, high = np.percentile(bx - by, [50 * (1 - level), 50 * (1 + level)])
    return {"level": level, "resamples": count, "low": float(low), "high": float(high)}


def main() -> None:
    from holotype.seeds import rng

    rows = list(csv.DictReader(open("data/lakes.csv", newline="")))
    turbid = [float(r["chlorophyll_ug_l"]) for r in rows if r["kind"] == "turbid"]
    clear = [float(r["chlorophyll_ug_l"]) for r in rows if r["kind"] == "clear"]
    generator = rng()  # seeded by holotype: HOLOTYPE_SEED, or the project seed when run by hand
    result: dict[str, Any] = {
        "variable": "chlorophyll_ug_l",
        "groups": {"turbid": len(turbid), "clear": len(clear)},
        "welch": welch(turbid, clear),
        "rank_sum": rank_sum(turbid, clear),
        "permutation": permutation_p(turbid, clear, generator),
        "bootstrap_difference": bootstrap_ci(turbid, clear, generator),
    }
    os.makedirs("results", exist_ok=True)
    with open("results/tests.json", "w") as fh:
        json.dump(result, fh, indent=2)
    print(f"tests: Welch t = {result['welch']['t']:.3f}, permutation p = {result['permutation']['p_value']:.5f}")


if __name__ == "__main__":
    main()
