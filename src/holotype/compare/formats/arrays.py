"""NumPy .npy and .npz outputs: dtype and shape first, then values; never unpickled.

For sign-free arrays the unit that may flip is a slice along the last axis (a column of a
loadings matrix); a 1-D array flips as a whole.
"""

from __future__ import annotations

import tokenize
import zipfile
from fnmatch import fnmatchcase
from typing import Any, BinaryIO

import numpy as np

from holotype.compare.formats import register
from holotype.compare.judge import ColumnJudge, Where
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.errors import UnreadableOutput
from holotype.tolerance import RuleBook

# what NumPy raises for a damaged header or archive (found by fuzzing; see tests/test_fuzz.py)
LOAD_ERRORS = (ValueError, SyntaxError, tokenize.TokenError, EOFError, OSError, KeyError, zipfile.BadZipFile,
               TypeError, MemoryError)


MAX_ARRAY_BYTES = 1 << 30  # the largest array a .npy or an .npz member may declare (1 GiB)
MAX_ARCHIVE_BYTES = 2 << 30  # all arrays of one .npz together


def declared_bytes(fh: BinaryIO) -> int:
    """The size an .npy header declares (shape x item size), read without loading the data."""
    version = np.lib.format.read_magic(fh)
    if version == (1, 0):
        shape, _, dtype = np.lib.format.read_array_header_1_0(fh)
    else:
        shape, _, dtype = np.lib.format.read_array_header_2_0(fh)
    count = 1
    for n in shape:
        count *= int(n)
    return count * int(dtype.itemsize)


def _refuse_large(src: Source) -> None:
    """Check what each array declares before NumPy allocates it (an .npz of a few MB can declare GBs)."""
    with src.open() as fh:
        magic = fh.read(6)
        fh.seek(0)
        if magic.startswith(b"PK"):
            total = 0
            with zipfile.ZipFile(fh) as archive:
                for info in archive.infolist():
                    if not info.filename.endswith(".npy"):
                        continue
                    with archive.open(info) as member:
                        size = declared_bytes(member)  # type: ignore[arg-type]
                    total += size
                    if size > MAX_ARRAY_BYTES or total > MAX_ARCHIVE_BYTES:
                        raise UnreadableOutput(f"array '{info.filename[:-4]}' declares {size:,} bytes (the archive "
                                               f"{total:,} so far), more than holotype compares "
                                               f"({MAX_ARRAY_BYTES:,} per array, {MAX_ARCHIVE_BYTES:,} in all)",
                                               src.label)
        else:
            size = declared_bytes(fh)
            if size > MAX_ARRAY_BYTES:
                raise UnreadableOutput(f"the array declares {size:,} bytes, more than holotype compares "
                                       f"({MAX_ARRAY_BYTES:,})", src.label)


def load_arrays(src: Source) -> dict[str, np.ndarray]:
    """{name: array}; a .npy file holds one array named 'array'. allow_pickle is always False."""
    try:
        _refuse_large(src)
        loaded = np.load(src.open(), allow_pickle=False)
        if isinstance(loaded, np.ndarray):
            return {"array": loaded}
        with loaded as archive:
            return {name: archive[name] for name in archive.files}
    except LOAD_ERRORS as exc:
        text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        if "allow_pickle" in text or "Object arrays" in text:
            text = "holds Python objects (object dtype); holotype never unpickles"
        raise UnreadableOutput(f"not a readable NumPy file: {text}", src.label) from None


def _index_text(shape: tuple[int, ...], flat: int) -> str:
    if not shape:
        return "()"
    return "(" + ", ".join(str(int(i)) for i in np.unravel_index(flat, shape)) + ")"


def _slice_index(sub_shape: tuple[int, ...], flat: int, last: int) -> str:
    head = [str(int(i)) for i in np.unravel_index(flat, sub_shape)] if sub_shape else []
    return "(" + ", ".join([*head, str(last)]) + ")"


def _slice_where(label: str, sub_shape: tuple[int, ...], last: int) -> Where:
    return lambda i: f"{label}index {_slice_index(sub_shape, i, last)}"


def _flat_where(label: str, shape: tuple[int, ...], suffix: str) -> Where:
    return lambda i: f"{label}index {_index_text(shape, i)}{suffix}"


def _numeric_kind(dtype: np.dtype[Any]) -> bool:
    return dtype.kind in "biuf"


def compare_arrays(output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
    outcome = Outcome()
    ignored = rules.for_output(output).ignore
    e_all = {k: v for k, v in load_arrays(expected).items() if not any(fnmatchcase(k, g) for g in ignored)}
    a_all = {k: v for k, v in load_arrays(actual).items() if not any(fnmatchcase(k, g) for g in ignored)}
    for name in e_all:
        if name not in a_all:
            outcome.problem("output.shape", f"array '{name}' missing", name, None)
    for name in a_all:
        if name not in e_all:
            outcome.problem("output.shape", f"new array '{name}'", None, name)
    for name in (n for n in e_all if n in a_all):
        e, a = e_all[name], a_all[name]
        label = "" if name == "array" and len(e_all) == 1 else f"{name} "
        if e.shape != a.shape:
            outcome.problem("output.shape", f"{label}shape {e.shape} recorded, {a.shape} found",
                                     list(e.shape), list(a.shape))
            continue
        tol = rules.for_column(output, name) if label else rules.for_output(output)
        if e.dtype != a.dtype:
            same_family = (_numeric_kind(e.dtype) and _numeric_kind(a.dtype)) or (e.dtype.kind == a.dtype.kind == "c")
            if not same_family:
                outcome.problem("output.shape", f"{label}dtype {e.dtype} recorded, {a.dtype} found",
                                         str(e.dtype), str(a.dtype))
                continue
            outcome.notes.append(f"{label}dtype {e.dtype} recorded, {a.dtype} found; values compared as float64")
        if e.dtype.kind == "c":
            parts = [("real", e.real, a.real), ("imag", e.imag, a.imag)]
        elif _numeric_kind(e.dtype):
            parts = [("", e, a)]
        else:  # strings, bytes, dates, structured records: exact
            judge_ = ColumnJudge(name, tol)
            ef, af = e.reshape(-1), a.reshape(-1)
            unequal = np.where(ef != af)[0] if ef.dtype == af.dtype else np.arange(ef.size)
            judge_.tally.compared += ef.size - unequal.size
            judge_.tally.decades["exact"] = ef.size - unequal.size
            for i in unequal[:1000].tolist():
                judge_.exact(False, f"{label}index {_index_text(e.shape, i)}", ef[i].item(), af[i].item())
            outcome.tallies.append(judge_.result())
            continue
        for part, ep, ap in parts:
            # integer arrays go in as they are: beyond 2**53 their values are judged exactly
            ep64 = ep if ep.dtype.kind in "iu" else np.asarray(ep, dtype=np.float64)
            ap64 = ap if ap.dtype.kind in "iu" else np.asarray(ap, dtype=np.float64)
            suffix = f".{part}" if part else ""
            if ep64.ndim >= 2 and tol.sign_free:
                # each last-axis slice is a unit that may flip as a whole
                for j in range(ep64.shape[-1]):
                    judge_ = ColumnJudge(f"{label}[..., {j}]{suffix}".strip(), tol)
                    es, as_ = ep64[..., j].reshape(-1), ap64[..., j].reshape(-1)
                    sub_shape = ep64.shape[:-1]
                    judge_.numeric(es, as_, _slice_where(label, sub_shape, j))
                    outcome.tallies.append(judge_.result())
            else:
                judge_ = ColumnJudge(f"{label}{suffix}".strip() or "values", tol)
                judge_.numeric(ep64.reshape(-1), ap64.reshape(-1), _flat_where(label, ep64.shape, suffix))
                outcome.tallies.append(judge_.result())
    return outcome


class ArrayFormat:
    name: str = "numpy"
    suffixes: tuple[str, ...] = (".npy", ".npz")
    honours: frozenset[str] = frozenset({"ignore", "sign_free"})  # ignore: by array name inside an .npz

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_arrays(output, expected, actual, rules)


register(ArrayFormat())
