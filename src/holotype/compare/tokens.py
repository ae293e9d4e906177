"""One splitter for numbers inside text: text lines, table cells and JSON strings all use it.

A piece of text becomes its *shape* (the text with each number replaced by a marker, and by default
every run of white space made one space) and its numbers. Two texts of the same shape are compared
number by number with the tolerance that applies; anything else in them must match exactly. So
`'144.086957:350.1092'` against `'143.738587:350.4783'` is two numbers that moved 0.2 %, not an
unequal string, and `to_string()` padding that shifted because a sign appeared is not a change.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

import numpy as np

from holotype.compare.numbers import EXACT_INTEGERS

NUMBER = re.compile(
    r"(?<![A-Za-z0-9_.])[-+]?(?:(?:\d+\.\d*|\.\d+|\d+)(?:[eE][-+]?\d+)?|inf(?:inity)?|nan)(?![A-Za-z0-9_])",
    re.IGNORECASE,
)
MARK = "\x00"
_SPACE = re.compile(r"\s+")
_INTEGER = re.compile(r"[+-]?[0-9]+(?:\.0*)?")
_SEP = "\x01"
_LEADING_ZERO = re.compile(_SEP + r"[-+]?0\d")  # a number token that starts with a zero and another digit
_BUILT_DIGITS = 4000  # digits an integer from text may have: under Python's 4,300-digit limit for printing it

# Dates, clock times and durations, as reports print them (used only to explain a failure, never to pass one)
TIMELIKE = re.compile(
    r"\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:Z|[+-]\d{2}:?\d{2})?)?"
    r"|\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:\s?[AaPp][Mm])?"
    r"|\d{1,2}[/.]\d{1,2}[/.]\d{2,4}"
    r"|\b(?:Mon|Tue|Wed|Thu|Fri|Sat|Sun)[a-z]*\b|\b(?:Jan|Feb|Mar|Apr|May|Jun|Jul|Aug|Sep|Oct|Nov|Dec)[a-z]*\b"
    r"|\b\d+(?:\.\d+)?\s?(?:ms|s|sec|secs|seconds|min|minutes|h|hours)\b"
    r"|\b\d{1,2}\s(?=(?:Jan|Feb|Mar|Apr|May|Jun|Jul|Aug|Sep|Oct|Nov|Dec))|\b(?:19|20)\d{2}\b",
)


def split_numbers(text: str, *, exact_space: bool = False) -> tuple[str, list[str]]:
    """The text's shape and its numbers' texts (see the module text). Leading zeros belong to the shape:
    in '1,05' or '12:05' they place the digits, so '1,05' and '1,5' must not become the same numbers."""
    numbers: list[str] = []

    def keep(m: re.Match[str]) -> str:
        numbers.append(m.group(0))
        return MARK

    def keep_zeros(m: re.Match[str]) -> str:
        token = m.group(0)
        sign = token[:1] if token[:1] in "+-" else ""
        body = token[len(sign):]
        if len(body) > 1 and body[0] == "0" and body[1].isdigit():
            digits = body.lstrip("0")
            if not digits[:1].isdigit():
                digits = "0" + digits  # '000' or '00.5': keep the zero the number needs
            numbers.append(sign + digits)
            return "0" * (len(body) - len(digits)) + MARK
        numbers.append(token)
        return MARK

    # keep() stays short for the common case; only a text with a number that starts with a zero ('05',
    # '-007') is split again with keep_zeros (one search over the numbers found decides)
    shape = NUMBER.sub(keep, text)
    if numbers and _LEADING_ZERO.search(_SEP + _SEP.join(numbers)):
        numbers.clear()
        shape = NUMBER.sub(keep_zeros, text)
    if not exact_space:
        shape = _SPACE.sub(" ", shape).strip()
    return shape, numbers


def exact_number(token: str) -> float | int:
    """A number token as a float, or as an int where it is an integer binary64 would round (beyond 2**53),
    written as one ('1234567890123456789', or with a zero fraction: '1234567890123456789.0')."""
    # cheap tests first: a float's text (17 significant digits) ends in a non-zero digit after its point
    if 15 < len(token) <= _BUILT_DIGITS and (token[-1] == "0" or "." not in token) and _INTEGER.fullmatch(token):
        value = int(token.partition(".")[0])
        if abs(value) > EXACT_INTEGERS:
            return value
    number = float(token)
    lead = token.lstrip("+-")[:1]
    if math.isinf(number) and (lead.isdigit() or lead == "."):
        # a finite number beyond binary64 ('1e400' and '1e401' would both be infinity): the integer it names,
        # when that integer is of a size to build (not '1e999999999')
        exact = Decimal(token)
        if exact.adjusted() <= _BUILT_DIGITS:
            return int(exact)
    return number


def numbers_of(tokens: list[str]) -> list[float | int]:
    """Number tokens as floats, with an integer beyond 2**53 kept exact (only tokens that large are looked at
    again, so ordinary numbers cost one float() each)."""
    values: list[float | int] = list(map(float, tokens))
    if values:
        top = max(map(abs, values))
        if top >= EXACT_INTEGERS or top != top:  # a NaN hides what follows it from max()
            values = [exact_number(t) if not abs(v) < EXACT_INTEGERS else v for t, v in zip(tokens, values)]
    return values


def number_array(values: list[float | int]) -> np.ndarray:
    """Numbers from text as an array: float64, or objects where an integer must stay exact."""
    exact = int in set(map(type, values))
    return np.array(values, dtype=object if exact else np.float64)


def embedded_numbers(expected: str, actual: str) -> tuple[list[float | int], list[float | int]] | None:
    """The numbers of two texts of the same shape, paired; None when their shapes differ (or hold none)."""
    e_shape, e_nums = split_numbers(expected)
    a_shape, a_nums = split_numbers(actual)
    if e_shape != a_shape or len(e_nums) != len(a_nums) or not e_nums:
        return None
    return numbers_of(e_nums), numbers_of(a_nums)


def only_time_differs(expected: str, actual: str) -> bool:
    """Whether two unequal texts become equal once dates, times and durations are masked."""
    if expected == actual:
        return False
    return _SPACE.sub(" ", TIMELIKE.sub(MARK, expected)).strip() == _SPACE.sub(" ", TIMELIKE.sub(MARK, actual)).strip()
