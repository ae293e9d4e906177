"""The demo: its statistics against SciPy and NIST's certified values, and the whole tour end to end."""

from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from conftest import run_cli
from holotype.compare.numbers import log_relative_error
from holotype.demo.scenario import survey_csv
from holotype.demo.scripts import pca as demo_pca
from holotype.demo.scripts import summary as demo_summary
from holotype.demo.scripts import tests as demo_tests


def chlorophyll() -> tuple[list[float], list[float]]:
    rows = list(csv.DictReader(io.StringIO(survey_csv())))
    turbid = [float(r["chlorophyll_ug_l"]) for r in rows if r["kind"] == "turbid"]
    clear = [float(r["chlorophyll_ug_l"]) for r in rows if r["kind"] == "clear"]
    return turbid, clear


def test_welch_against_scipy() -> None:
    turbid, clear = chlorophyll()
    ours = demo_tests.welch(turbid, clear)
    ref = scipy.stats.ttest_ind(turbid, clear, equal_var=False)  # SciPy's Welch test
    assert math.isclose(ours["t"], ref.statistic, rel_tol=1e-12)
    assert math.isclose(ours["df"], ref.df, rel_tol=1e-12)
    assert math.isclose(ours["p_value"], ref.pvalue, rel_tol=1e-9)


def test_rank_sum_against_scipy() -> None:
    turbid, clear = chlorophyll()
    ours = demo_tests.rank_sum(turbid, clear)
    ref = scipy.stats.mannwhitneyu(turbid, clear, method="asymptotic", use_continuity=True)
    assert ours["u"] == ref.statistic
    assert math.isclose(ours["p_value"], ref.pvalue, rel_tol=1e-9)


def test_rank_sum_with_ties_against_scipy() -> None:
    x, y = [1.0, 2.0, 2.0, 3.0, 5.0, 5.0, 7.0], [2.0, 3.0, 3.0, 4.0, 6.0, 8.0, 9.0, 9.0]
    ref = scipy.stats.mannwhitneyu(x, y, method="asymptotic", use_continuity=True)
    ours = demo_tests.rank_sum(x, y)
    assert ours["u"] == ref.statistic and math.isclose(ours["p_value"], ref.pvalue, rel_tol=1e-9)


@pytest.mark.parametrize(("a", "b", "x"), [(0.5, 0.5, 0.3), (2.0, 3.0, 0.9), (50.0, 0.5, 0.98), (0.5, 40.0, 0.01)])
def test_incomplete_beta_against_scipy(a: float, b: float, x: float) -> None:
    assert math.isclose(demo_tests.betainc(a, b, x), scipy.special.betainc(a, b, x), rel_tol=1e-12)


def test_permutation_and_bootstrap_are_seeded_and_sane() -> None:
    turbid, clear = chlorophyll()
    p1 = demo_tests.permutation_p(turbid, clear, np.random.default_rng(1))
    p2 = demo_tests.permutation_p(turbid, clear, np.random.default_rng(1))
    assert p1 == p2 and 0 < p1["p_value"] < 1
    # SciPy's permutation_test with the same statistic agrees within Monte Carlo error (3 standard errors)
    ref = scipy.stats.permutation_test((turbid, clear), lambda a, b: np.mean(a) - np.mean(b), n_resamples=10_000,
                                       alternative="two-sided", random_state=2)
    se = math.sqrt(ref.pvalue * (1 - ref.pvalue) / 10_000)
    assert abs(p1["p_value"] - ref.pvalue) < 3 * se + 2e-4
    ci = demo_tests.bootstrap_ci(turbid, clear, np.random.default_rng(3))
    diff = np.mean(turbid) - np.mean(clear)
    assert ci["low"] < diff < ci["high"]


# NIST StRD univariate summary statistics (certified values from memory of the NIST pages):
# NumAcc1: 10000001, 10000003, 10000002 -> mean 10000002, sd 1.
# NumAcc3: 1000000.2 then 1000000.1, 1000000.3 alternating (1001 values) -> mean 1000000.2, sd 0.1.
# NumAcc4: the same around 10000000.2 -> mean 10000000.2, sd 0.1.
# The last figure is the sd digits to demand: binary64 cannot even hold 10000000.1 closer than about
# 1e-9, which caps NumAcc4's standard deviation near 8 correct digits for any algorithm (accuracy
# studies of statistical software report about 8 there; from memory).
NUMACC = {
    "NumAcc1": ([10000001.0, 10000003.0, 10000002.0], 10000002.0, 1.0, 15),
    "NumAcc3": ([1000000.2] + [1000000.1, 1000000.3] * 500, 1000000.2, 0.1, 9),
    "NumAcc4": ([10000000.2] + [10000000.1, 10000000.3] * 500, 10000000.2, 0.1, 8),
}


@pytest.mark.parametrize("name", list(NUMACC))
def test_summary_statistics_on_nist_strd(name: str) -> None:
    values, mean, sd, sd_digits = NUMACC[name]
    d = demo_summary.describe(values)
    # LRE (correct significant digits), the measure used to judge statistical software on these data
    assert log_relative_error(np.array([mean]), np.array([d["mean"]]))[0] >= 14
    assert log_relative_error(np.array([sd]), np.array([d["sd"]]))[0] >= sd_digits
    assert d["n"] == len(values) and math.isclose(d["sem"], d["sd"] / math.sqrt(len(values)))


def test_quartiles_against_numpy() -> None:
    x = [3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, 6.0]
    d = demo_summary.describe(x)
    assert (d["q1"], d["median"], d["q3"]) == tuple(np.percentile(x, [25, 50, 75]))


def test_pca_explained_variance_against_eigh_of_the_correlation_matrix() -> None:
    rows = list(csv.DictReader(io.StringIO(survey_csv())))
    matrix = np.array([[float(r[v]) for v in demo_pca.CHEMISTRY] for r in rows])
    loadings, variances, scores = demo_pca.principal_components(matrix)
    eig = np.linalg.eigh(np.corrcoef(matrix, rowvar=False))[0][::-1]  # NumPy's symmetric eigensolver
    assert np.allclose(variances, eig, rtol=1e-10, atol=1e-12)
    assert math.isclose(variances.sum(), len(demo_pca.CHEMISTRY), rel_tol=1e-12)
    assert np.allclose(loadings.T @ loadings, np.eye(len(demo_pca.CHEMISTRY)), atol=1e-12)


def test_demo_end_to_end_then_the_folder_is_a_normal_project(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("COLUMNS", "300")  # wide enough that no table cell wraps
    folder = tmp_path / "demo"
    result = run_cli("demo", folder)
    assert result.code == 0, result.out[-6000:] + result.err  # the table the demo refers to
    for words in ("modified: size", "sign flipped as a whole in PC2", "permutation.p_value", "Back to clean",
                  "not a verified one"):
        assert words in result.out
    # the upgrade event: three invented libraries upgraded, pinpoint names the one that moved the clarity table
    assert "with only lake-optics 1.0 → 2.0 applied to the recorded environment" in result.out
    assert "lake-tables 1.0 → 2.0 applied" not in result.out and "lake-units 1.0 → 2.0 applied" not in result.out
    check = run_cli("check", "-C", folder, "--format", "json")
    assert check.code == 0 and json.loads(check.out)["ok"] is True
    replay = run_cli("replay", "-C", folder, "--format", "json")
    assert replay.code == 0, replay.out
    again = run_cli("demo", folder)
    assert again.code == 2 and "not empty" in again.err
