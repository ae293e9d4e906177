"""The numeric stack of the analysis interpreter: run `numerics_probe.py` there and build a NumericStack.

Only the numeric packages the project uses, and only those installed, are imported there; nothing is
ever installed. holotype's own copy of threadpoolctl is offered to the interpreter (appended to its
sys.path, so an installed copy wins). Without NumPy and friends the stack is absent, not an error.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import Any

from holotype.capture.digest_cache import DigestCache
from holotype.capture.environment import ProbeRun
from holotype.capture.numerics_probe import VARIABLES
from holotype.errors import HolotypeError
from holotype.records import Environment, NativeLibrary, NumericStack
from holotype.threads import thread_variables, threadpoolctl_folder

# distribution name -> what to import so its native libraries load (scipy's BLAS loads with scipy.linalg)
NUMERIC_PACKAGES = {"numpy": "numpy", "scipy": "scipy.linalg", "numexpr": "numexpr"}
FORMAT = 1  # of the cached answer


def _bundler(filepath: str) -> str | None:
    """numpy.libs/…, scipy.libs/…, or numpy/.libs/… tell which wheel shipped the library."""
    parts = Path(filepath).parts
    for part in reversed(parts[:-1]):
        if part.endswith(".libs") and part != ".libs":
            return part[: -len(".libs")]
    if len(parts) >= 3 and parts[-2] == ".libs":
        return parts[-3]
    return None


def libraries_from_info(infos: Any) -> list[NativeLibrary]:
    """threadpoolctl's dictionaries as records (file names only: a path would name this machine)."""
    out = []
    for info in infos:
        path = str(info.get("filepath", ""))
        threads = info.get("num_threads")
        out.append(NativeLibrary(
            user_api=str(info.get("user_api", "")), internal_api=str(info.get("internal_api", "")),
            file=os.path.basename(path), bundled_by=_bundler(path),
            version=None if info.get("version") is None else str(info.get("version")),
            threading_layer=None if info.get("threading_layer") is None else str(info.get("threading_layer")),
            num_threads=threads if isinstance(threads, int) else None,
            architecture=None if info.get("architecture") is None else str(info.get("architecture"))))
    return out


def stack_from_answer(doc: dict[str, Any]) -> NumericStack | None:
    """Typed records from the inspection's JSON (None when nothing numeric was imported)."""
    imported = tuple(str(x) for x in doc.get("imported") or ())
    if not imported:
        return None
    libraries = libraries_from_info(doc.get("libraries") or ())
    numpy = doc.get("numpy") or {}
    cpu = doc.get("cpu") or {}

    def built(part: str) -> str | None:
        entry = numpy.get(part) or {}
        text = " ".join(x for x in (entry.get("name"), entry.get("version")) if x)
        return text or None

    return NumericStack(
        imported=imported,
        libraries=tuple(sorted(libraries, key=lambda lib: (lib.user_api, lib.key))),
        inspection="threadpoolctl" if doc.get("libraries") is not None else "numpy build information",
        numpy_version=numpy.get("version") or None,
        numpy_blas=built("blas"), numpy_lapack=built("lapack"),
        numpy_cpu_baseline=tuple(numpy.get("cpu_baseline") or ()),
        numpy_cpu_dispatch=tuple(numpy.get("cpu_dispatch") or ()),
        numpy_cpu_features=tuple(numpy.get("cpu_features") or ()),
        cpu_vendor=str(cpu.get("vendor", "")), cpu_model=str(cpu.get("model", "")),
        cpu_flags=tuple(cpu.get("flags") or ()), logical_cpus=int(cpu.get("logical_cpus") or 0),
        variables={str(k): str(v) for k, v in (doc.get("variables") or {}).items()},
    )


def start_inspection(python: str, threads: int | None) -> ProbeRun:
    """Start the inspection now (it runs while files are hashed); every numeric package is tried, and
    those not installed are simply not imported."""
    args = json.dumps({"packages": list(NUMERIC_PACKAGES.values()), "threadpoolctl": threadpoolctl_folder()})
    return ProbeRun(python, Path(os.sep), script="numerics_probe.py", args=(args,),
                    extra_env=thread_variables(threads), format_key="numerics_format")


def inspection_key(python: str, env: Environment, threads: int | None) -> str:
    """What decides the answer: the interpreter file, the numeric packages' versions and origins, the CPU
    model and the numerics variables. The same key means the same libraries, kernels and settings."""
    try:
        st = os.stat(python)
        exe = [os.path.realpath(python), st.st_ino, st.st_size, st.st_mtime_ns]
    except OSError:
        exe = [python]
    packages = {d: [env.packages[d].version, env.packages[d].origin.describe()] for d in NUMERIC_PACKAGES
                if d in env.packages}
    variables = {**{k: os.environ[k] for k in VARIABLES if k in os.environ}, **thread_variables(threads)}
    cpu = ""
    try:
        with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as fh:
            cpu = next((line for line in fh if line.lower().startswith("model name")), "")
    except OSError:
        pass
    doc = json.dumps([FORMAT, exe, packages, variables, cpu], sort_keys=True)
    return "numerics:" + hashlib.sha256(doc.encode()).hexdigest()


def start_unless_known(python: str, env: Environment, threads: int | None,
                       cache: DigestCache | None) -> ProbeRun | None:
    """The inspection started now, unless the cache holds its answer or no numeric package is installed."""
    if not any(d in env.packages for d in NUMERIC_PACKAGES) or (
            cache is not None and cache.fact(inspection_key(python, env, threads)) is not None):
        return None
    return start_inspection(python, threads)


def finish_inspection(run: ProbeRun | None, python: str, env: Environment, threads: int | None,
                      cache: DigestCache | None) -> NumericStack | None:
    """The numeric stack: from the cache when nothing that decides it changed, else from the inspection
    (`run`, started early; None: started now, only when the cache cannot answer)."""
    if not any(d in env.packages for d in NUMERIC_PACKAGES):
        if run is not None:
            run.stop()
        return None
    key = inspection_key(python, env, threads)
    remembered = cache.fact(key) if cache is not None else None
    if remembered is not None:
        if run is not None:
            run.stop()
        doc = json.loads(remembered)
    else:
        doc = (run or start_inspection(python, threads)).result()
        if cache is not None:
            cache.remember(key, json.dumps(doc))
    try:
        return stack_from_answer(doc)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise HolotypeError(f"the numeric inspection of {python} gave an answer holotype cannot read "
                            f"({type(exc).__name__}: {exc})") from None


def capture_numerics(python: str, env: Environment, threads: int | None,
                     cache: DigestCache | None = None) -> NumericStack | None:
    """Inspect the numeric stack `python` loads (None: no numeric package installed there)."""
    return finish_inspection(start_inspection(python, threads), python, env, threads, cache)
