"""Threads and the native libraries behind them: the variables that pin thread counts, and where
holotype's own copy of threadpoolctl lives (offered to analysis interpreters, never shadowing theirs)."""

from __future__ import annotations

from pathlib import Path

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS",
                    "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")


def thread_variables(threads: int | None) -> dict[str, str]:
    """The variables an analysis gets for `threads` (none when threads is not set)."""
    return {} if threads is None else {name: str(threads) for name in THREAD_VARIABLES}


def threadpoolctl_folder() -> str | None:
    """The folder holding the threadpoolctl module holotype runs with (a single pure-Python file)."""
    try:
        import threadpoolctl
    except ImportError:
        return None
    return str(Path(threadpoolctl.__file__).parent)
