"""The tolerance kernel against references outside the project."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from holotype.compare.numbers import MAX_LRE, judge, log_relative_error, ulp_distance
from holotype.tolerance import Tolerance

finite = st.floats(allow_nan=False, allow_infinity=False, width=64)
small_tol = st.floats(min_value=0, max_value=1, allow_nan=False)


@settings(max_examples=400, deadline=None)
@given(finite, finite, small_tol)
def test_rtol_matches_math_isclose_with_the_recorded_value_as_reference(e: float, a: float, rtol: float) -> None:
    # PEP 485's math.isclose is symmetric: |a-b| <= max(rtol*|a|, rtol*|b|, abs_tol).
    # holotype is relative to the RECORDED value only, so the reference is the one-sided form;
    # the two agree whenever |a| <= |e|.
    ours = bool(judge(np.array([e]), np.array([a]), Tolerance(rtol=rtol)).passed[0])
    if abs(a) <= abs(e) and math.isfinite(a - e):
        assert ours == math.isclose(a, e, rel_tol=rtol, abs_tol=0.0) or math.isclose(abs(a - e), rtol * abs(e))
    with np.errstate(over="ignore"):
        diff = abs(a - e)
    if math.isfinite(diff):
        assert ours == (diff <= rtol * abs(e))


@settings(max_examples=400, deadline=None)
@given(finite, finite, small_tol, small_tol)
def test_atol_or_rtol_matches_numpy_isclose(e: float, a: float, rtol: float, atol: float) -> None:
    # numpy.isclose(a, b) tests |a - b| <= atol + rtol*|b|, relative to its second argument, like holotype;
    # holotype passes a value meeting EITHER criterion (max, not sum), so numpy's test is looser by at most 2x.
    with np.errstate(over="ignore", invalid="ignore"):
        diff = abs(a - e)
    if not math.isfinite(diff):
        return
    ours = bool(judge(np.array([e]), np.array([a]), Tolerance(atol=atol, rtol=rtol)).passed[0])
    if ours:
        assert np.isclose(a, e, rtol=rtol, atol=atol)
    if np.isclose(a, e, rtol=rtol / 2, atol=atol / 2):
        assert ours


def test_ulp_distance_against_math_nextafter_and_ulp() -> None:
    # IEEE 754 binary64 via the standard library: nextafter steps one representable value.
    for x in [0.0, 1.0, -1.0, 1e-308, 5e-324, 1.7976931348623157e308, 123.456, -2.5e-10]:
        y = x
        for k in range(1, 6):
            y = math.nextafter(y, -math.inf if x == 1.7976931348623157e308 else math.inf)
            assert int(ulp_distance(np.array([x]), np.array([y]))[0]) == k
    # across zero: -min_subnormal, -0.0/+0.0 (distance 0 between them), +min_subnormal
    assert int(ulp_distance(np.array([-5e-324]), np.array([5e-324]))[0]) == 2
    assert int(ulp_distance(np.array([-0.0]), np.array([0.0]))[0]) == 0
    # math.ulp(1.0) is the gap above 1.0: one step
    assert int(ulp_distance(np.array([1.0]), np.array([1.0 + math.ulp(1.0)]))[0]) == 1


def test_ulps_criterion() -> None:
    e = np.array([1.0, 1.0])
    a = np.array([math.nextafter(math.nextafter(1.0, 2), 2), math.nextafter(1.0, 2) + 4 * math.ulp(1.0)])
    assert judge(e, a, Tolerance(ulps=2)).passed.tolist() == [True, False]


def test_lre_on_nist_strd_certified_values() -> None:
    # NIST StRD univariate summary statistics, certified values (quoted from memory of the NIST pages):
    # NumAcc1: mean 10000002, standard deviation 1. NumAcc4: mean 10000000.2.
    # LRE = -log10(|x - c| / |c|) (McCullough's measure of correct significant digits).
    numacc1 = [10000001.0, 10000003.0, 10000002.0]
    naive_mean = sum(numacc1) / 3
    assert log_relative_error(np.array([10000002.0]), np.array([naive_mean]))[0] == MAX_LRE
    sd = math.sqrt(sum((x - naive_mean) ** 2 for x in numacc1) / 2)
    assert log_relative_error(np.array([1.0]), np.array([sd]))[0] == MAX_LRE
    # a result off by 0.5 in the mean has LRE -log10(0.5/10000002), about 7.3 digits
    lre = float(log_relative_error(np.array([10000002.0]), np.array([10000002.5]))[0])
    assert math.isclose(lre, -math.log10(0.5 / 10000002.0), rel_tol=1e-12)
    # NumAcc4 certified mean 10000000.2: a one-pass sum in float32 loses most digits
    values = np.array([10000000.2] + [10000000.1, 10000000.3] * 500, dtype=np.float64)
    mean32 = float(np.sum(values.astype(np.float32), dtype=np.float32) / np.float32(values.size))
    lre32 = float(log_relative_error(np.array([10000000.2]), np.array([mean32]))[0])
    assert lre32 < 8
    assert judge(np.array([10000000.2]), np.array([mean32]), Tolerance(digits=9)).passed.tolist() == [False]
    assert judge(np.array([10000000.2]), np.array([np.mean(values)]), Tolerance(digits=9)).passed.tolist() == [True]


def test_lre_uses_absolute_error_where_the_reference_is_zero() -> None:
    assert math.isclose(float(log_relative_error(np.array([0.0]), np.array([1e-7]))[0]), 7.0)


def test_special_values() -> None:
    e = np.array([np.nan, np.inf, np.inf, -np.inf, 1.0, np.nan])
    a = np.array([np.nan, np.inf, -np.inf, -np.inf, np.nan, 1.0])
    for tol in (Tolerance(), Tolerance(rtol=1.0), Tolerance(atol=1e300), Tolerance(ulps=2**62), Tolerance(digits=0)):
        assert judge(e, a, tol).passed.tolist() == [True, True, False, True, False, False]


def test_exact_when_no_criterion_is_set() -> None:
    assert judge(np.array([1.0, 0.0]), np.array([math.nextafter(1.0, 2), -0.0]), Tolerance()).passed.tolist() == [
        False, True]


def test_defaults_pass_last_bit_noise_and_catch_real_change() -> None:
    from holotype.tolerance import DEFAULT_TOLERANCE

    rng = np.random.default_rng(7)
    x = rng.standard_normal(10_000) * 1e3
    noisy = x * (1 + rng.integers(-64, 65, x.size) * np.finfo(float).eps)  # up to 64 ULPs of drift
    assert judge(x, noisy, DEFAULT_TOLERANCE).passed.all()
    changed = x.copy()
    changed[17] *= 1 + 1e-6  # one value moved in its sixth digit
    assert judge(x, changed, DEFAULT_TOLERANCE).passed.tolist().count(False) == 1


def test_the_tally_keeps_the_least_lre_and_the_decades_of_every_value() -> None:
    # the tally takes the least LRE from the largest relative error; checked against the LRE of every value
    # and against decades counted with NumPy's log10 value by value (zeros, NaN, infinities and an
    # overflowing difference included)
    from holotype.compare.tally import Tally

    rng = np.random.default_rng(5)
    for special in (False, True):
        e = rng.normal(size=5000) * 10.0 ** rng.integers(-8, 8, size=5000)
        a = e * (1 + rng.normal(size=5000) * 10.0 ** rng.integers(-16, -1, size=5000))
        a[:50], e[50:60] = e[:50], 0.0
        if special:
            e[60:63], a[63:66], e[66], a[66] = np.nan, np.inf, 1.7e308, -1.7e308
        tally = Tally("x", Tolerance(rtol=1e-9))
        verdict = judge(e, a, Tolerance(rtol=1e-9))
        tally.add_numeric(e, a, verdict, str)
        finite = np.isfinite(e) & np.isfinite(a)
        assert tally.min_lre == min(MAX_LRE, float(log_relative_error(e[finite], a[finite]).min()))
        rel = verdict.rel_err
        with np.errstate(divide="ignore"):
            decades = np.floor(np.log10(rel[(rel != 0) & np.isfinite(rel)])).astype(int)
        expected = {f"1e{d}": int((decades == d).sum()) for d in set(decades.tolist())}
        expected["exact"] = int((rel == 0).sum())
        if (~np.isfinite(rel)).any():
            expected["inf"] = int((~np.isfinite(rel)).sum())
        assert tally.decades == expected
