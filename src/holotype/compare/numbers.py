"""The numeric kernel: value-by-value errors and the tolerance test, vectorised with NumPy.

A value passes when it meets at least one numeric criterion that is set:
  atol    |actual - expected| <= atol
  rtol    |actual - expected| <= rtol * |expected|     (relative to the RECORDED value)
  ulps    distance in IEEE-754 binary64 ordering <= ulps
  digits  log relative error (correct significant digits) >= digits
NaN equals NaN; an infinity equals only the same infinity; with no criterion set, equality is exact.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from holotype.tolerance import Tolerance

# log10(2**53): binary64 holds at most this many correct significant digits; an exact match scores it.
MAX_LRE = 15.95

_SIGN = np.int64(-0x8000000000000000)


def ordered_bits(x: np.ndarray) -> np.ndarray:
    """Map binary64 values to int64 so that integer order equals numeric order (-0.0 and +0.0 map to 0)."""
    bits = np.ascontiguousarray(x, dtype=np.float64).view(np.int64)
    return np.asarray(np.where(bits < 0, _SIGN - bits, bits), dtype=np.int64)


def ulp_distance(expected: np.ndarray, actual: np.ndarray) -> np.ndarray:
    """How many representable binary64 values lie between the two (as uint64)."""
    a = ordered_bits(actual).astype(np.uint64)
    e = ordered_bits(expected).astype(np.uint64)
    forward = a - e  # wraps modulo 2**64; the shorter way round is the distance
    backward = e - a
    distance: np.ndarray = np.minimum(forward, backward)
    return distance


def log_relative_error(expected: np.ndarray, actual: np.ndarray) -> np.ndarray:
    """LRE as used to judge statistical software: -log10(|a-e|/|e|), or -log10(|a-e|) where e == 0.

    Exact agreement scores MAX_LRE; the result is clipped to [0, MAX_LRE].
    """
    e = np.asarray(expected, dtype=np.float64)
    a = np.asarray(actual, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        diff = np.abs(a - e)
        scale = np.where(e == 0, 1.0, np.abs(e))
        lre = -np.log10(diff / scale)
    lre = np.where(diff == 0, MAX_LRE, lre)
    lre = np.where(np.isnan(lre), 0.0, lre)
    return np.clip(lre, 0.0, MAX_LRE)


@dataclass
class Verdict:
    """Per-value outcome for two aligned float vectors."""

    passed: np.ndarray  # bool
    abs_err: np.ndarray  # float; inf where special values disagree
    rel_err: np.ndarray  # float; relative to expected (absolute where expected is 0)
    all_finite: bool = False  # no NaN or infinity on either side (an error is then infinite only by overflow)


# binary64 holds every integer up to 2**53; beyond it neighbouring integers share one double
EXACT_INTEGERS = float(2 ** 53)


def _float_of(value: Any) -> float:
    try:
        return float(value)
    except OverflowError:  # an integer beyond binary64's range: its sign and magnitude as infinity
        return math.inf if value > 0 else -math.inf  # copysign would convert the integer, and overflow too


def as_binary64(values: np.ndarray) -> np.ndarray:
    """Numbers of any kind (float, integer, or Python numbers in an object array) as float64."""
    if values.dtype.kind != "O":
        return values.astype(np.float64, copy=False)
    return np.array([_float_of(v) for v in values.tolist()], dtype=np.float64)


@dataclass
class IntegerGaps:
    """Integers that differ although their binary64 values are equal: where, and by how much exactly."""

    at: np.ndarray  # positions
    abs_err: np.ndarray
    rel_err: np.ndarray  # never 0: a difference below binary64's range is its smallest number
    exact: list[tuple[int, int]]  # (|a - e|, |e|) as integers, for the tolerance test


def integer_gaps(expected: np.ndarray, actual: np.ndarray, e64: np.ndarray, a64: np.ndarray,
                 negate: bool = False) -> IntegerGaps | None:
    """Where integer values (beyond 2**53) differ by less than binary64 can show (`negate`: actual's
    negation), or None: a changed 19-digit identifier or nanosecond time would otherwise compare as equal."""
    if expected.dtype.kind not in "iuO" or actual.dtype.kind not in "iuO":
        return None
    with np.errstate(invalid="ignore"):
        cand = np.flatnonzero(((-a64 if negate else a64) == e64) & (np.abs(e64) >= EXACT_INTEGERS))
    if not cand.size:
        return None
    ec, ac = expected[cand], actual[cand]
    if negate or ec.dtype != ac.dtype or ec.dtype.kind == "O":  # exact comparison, no wrapping
        ec, ac = ec.astype(object), ac.astype(object)
        if negate:
            ac = -ac
    differ = np.flatnonzero(ec != ac)
    at: list[int] = []
    abs_err: list[float] = []
    rel_err: list[float] = []
    exact: list[tuple[int, int]] = []
    for k in differ.tolist():
        x, y = ec[k], ac[k]
        try:
            xi, yi = int(x), int(y)  # beyond 2**53 a float is an integer too
        except (OverflowError, ValueError, TypeError):
            continue  # an infinity or NaN: the kernel's special values
        gap = abs(yi - xi)
        at.append(int(cand[k]))
        abs_err.append(_float_of(gap))
        rel_err.append(max(gap / abs(xi), _TINY) if xi else _float_of(gap))
        exact.append((gap, abs(xi)))
    if not at:
        return None
    return IntegerGaps(np.array(at, dtype=np.int64), np.array(abs_err), np.array(rel_err), exact)


_TINY = 5e-324  # the smallest positive binary64 number


def _meets(gap: int, size: int, tol: Tolerance) -> bool:
    """Whether integers `gap` apart, the recorded one of magnitude `size`, meet `tol`, in exact arithmetic."""
    if tol.exact:
        return False
    if tol.atol is not None and Fraction(gap) <= Fraction(tol.atol):
        return True
    if tol.rtol is not None and gap <= Fraction(tol.rtol) * size:
        return True
    if tol.ulps is not None and tol.ulps >= 1:
        return True
    return tol.digits is not None and size > 0 and min(math.log10(size) - math.log10(gap), MAX_LRE) >= tol.digits


def settle_gaps(verdict: Verdict, gaps: IntegerGaps | None, tol: Tolerance) -> Verdict:
    """The verdict with integer gaps judged by their exact differences: unequal integers are never exact,
    and lie at least one binary64 step apart."""
    if gaps is None:
        return verdict
    ok = np.array([_meets(gap, size, tol) for gap, size in gaps.exact], dtype=bool)
    passed, abs_err, rel_err = verdict.passed.copy(), verdict.abs_err.copy(), verdict.rel_err.copy()
    passed[gaps.at], abs_err[gaps.at], rel_err[gaps.at] = ok, gaps.abs_err, gaps.rel_err
    return Verdict(passed, abs_err, rel_err, verdict.all_finite and bool(np.isfinite(gaps.abs_err).all()))


def judge(expected: np.ndarray, actual: np.ndarray, tol: Tolerance) -> Verdict:
    """Apply `tol` to aligned binary64 vectors."""
    e = np.asarray(expected, dtype=np.float64)
    a = np.asarray(actual, dtype=np.float64)
    # written with `out=` where it can: a chunk's vectors are large enough that each new temporary is fresh
    # memory from the OS, and faulting it in cost more than the arithmetic
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        diff = np.subtract(a, e)
        np.abs(diff, out=diff)
        e_abs = np.abs(e)
        rel = np.divide(diff, e_abs)
        zero = e == 0
        if zero.any():
            np.copyto(rel, diff, where=zero)  # absolute where the recorded value is 0
    # NaN and infinities are rare: when both vectors are finite (two passes), none of their handling runs
    any_special = not (np.isfinite(e).all() and np.isfinite(a).all())
    if any_special:
        e_nan, a_nan = np.isnan(e), np.isnan(a)
        e_inf, a_inf = np.isinf(e), np.isinf(a)
        special = e_nan | a_nan | e_inf | a_inf
        same_special = (e_nan & a_nan) | (e_inf & a_inf & (e == a))
    if tol.exact:
        passed = e == a
        if any_special:
            passed |= e_nan & a_nan
    else:
        passed = np.zeros(e.shape, dtype=bool)
        with np.errstate(invalid="ignore"):
            if tol.atol is not None:
                passed |= diff <= tol.atol
            if tol.rtol is not None:
                passed |= diff <= np.multiply(e_abs, tol.rtol, out=e_abs)  # e_abs is not needed after this
            if tol.ulps is not None:
                if any_special:
                    finite = ~special
                    dist = ulp_distance(np.where(finite, e, 0.0), np.where(finite, a, 0.0))
                    passed |= finite & (dist <= np.uint64(tol.ulps))
                else:
                    passed |= ulp_distance(e, a) <= np.uint64(tol.ulps)
            if tol.digits is not None:
                close = log_relative_error(e, a) >= tol.digits
                passed |= ~special & close if any_special else close
        if any_special:
            passed = np.where(special, same_special, passed)
    if not any_special:
        return Verdict(passed, diff, rel, all_finite=True)
    abs_err = np.where(special, np.where(same_special, 0.0, np.inf), diff)
    rel_err = np.where(special, np.where(same_special, 0.0, np.inf), rel)
    return Verdict(passed, abs_err, rel_err)
