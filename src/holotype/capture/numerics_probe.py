"""Run INSIDE the analysis interpreter: the numeric stack it actually loads. Standard library only, Python 3.8+.

Given (as argv[1], JSON) the numeric packages to import and the folder of holotype's own copy of
threadpoolctl, it imports those packages (never installs anything), then reports:

- every BLAS/LAPACK/OpenMP library loaded, through threadpoolctl's `threadpool_info()` (an installed
  threadpoolctl wins; holotype's copy is appended to the end of sys.path, so it never shadows one);
- NumPy's build configuration (`numpy.show_config(mode="dicts")`) and its CPU feature detection
  (baseline, dispatched and detected SIMD extensions), as a fallback and as the build's own word;
- the CPU: vendor, model, the instruction-set flags that change floating-point results, logical CPUs;
- the environment variables that change numerics (holotype's docs/numerics.md lists them and why).

Prints one JSON document.
"""

import json
import os
import platform
import sys

# environment variables that change what numeric libraries compute or how (docs/numerics.md)
VARIABLES = (
    "OMP_NUM_THREADS", "OMP_DYNAMIC", "OMP_PROC_BIND", "OMP_SCHEDULE", "OMP_WAIT_POLICY",
    "OPENBLAS_NUM_THREADS", "OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE", "OPENBLAS_VERBOSE",
    "GOTO_NUM_THREADS",
    "MKL_NUM_THREADS", "MKL_DYNAMIC", "MKL_CBWR", "MKL_ENABLE_INSTRUCTIONS", "MKL_THREADING_LAYER",
    "MKL_DEBUG_CPU_TYPE",
    "KMP_DETERMINISTIC_REDUCTION", "KMP_AFFINITY",
    "BLIS_NUM_THREADS", "BLIS_ARCH_TYPE",
    "NUMEXPR_NUM_THREADS", "NUMEXPR_MAX_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NPY_DISABLE_CPU_FEATURES", "NPY_ENABLE_CPU_FEATURES",
)
# CPU flags that change floating-point results (fused multiply-add, vector widths, ARM vectors)
FLAGS = ("fma", "fma4", "avx", "avx2", "avx512f", "avx512dq", "avx512bw", "avx512vl", "avx512cd", "avx512_fp16",
         "avx512_bf16", "sse4_1", "sse4_2", "f16c", "neon", "asimd", "asimdhp", "sve", "sve2", "fphp")


def _libraries(holotype_copy):
    try:
        import threadpoolctl  # noqa: F401  (an installed copy wins)
    except ImportError:
        if holotype_copy and os.path.isdir(holotype_copy):
            sys.path.append(holotype_copy)
    try:
        from threadpoolctl import threadpool_info

        return [dict(info) for info in threadpool_info()], None
    except Exception as exc:  # no threadpoolctl, or it cannot inspect this platform: say so, do not fail
        return None, f"{type(exc).__name__}: {exc}"


def _numpy():
    numpy = sys.modules.get("numpy")
    if numpy is None:
        return None
    out = {"version": getattr(numpy, "__version__", "")}
    try:
        config = numpy.show_config(mode="dicts")
        deps = config.get("Build Dependencies", {})
        for part in ("blas", "lapack"):
            entry = deps.get(part) or {}
            out[part] = {"name": str(entry.get("name", "")), "version": str(entry.get("version", "")),
                         "configuration": str(entry.get("openblas configuration", ""))}
    except Exception:
        pass  # NumPy < 1.25 has no dict form; the libraries threadpoolctl found still say it
    umath = None
    for name in ("numpy._core._multiarray_umath", "numpy.core._multiarray_umath"):
        try:
            __import__(name)
            umath = sys.modules[name]
            break
        except Exception:
            continue
    if umath is not None:
        out["cpu_baseline"] = list(getattr(umath, "__cpu_baseline__", []))
        out["cpu_dispatch"] = list(getattr(umath, "__cpu_dispatch__", []))
        out["cpu_features"] = sorted(k for k, v in getattr(umath, "__cpu_features__", {}).items() if v)
    return out


def _cpu():
    cpu = {"logical_cpus": os.cpu_count() or 0, "vendor": "", "model": "", "flags": []}
    if sys.platform.startswith("linux"):
        try:
            with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as fh:
                text = fh.read(1 << 20)
        except OSError:
            text = ""
        for line in text.splitlines():
            key, _, value = line.partition(":")
            key, value = key.strip().lower(), value.strip()
            if key in ("vendor_id", "cpu implementer") and not cpu["vendor"]:
                cpu["vendor"] = value
            elif key in ("model name", "cpu model", "hardware") and not cpu["model"]:
                cpu["model"] = value
            elif key in ("flags", "features") and not cpu["flags"]:
                have = set(value.split())
                cpu["flags"] = [f for f in FLAGS if f in have]
    elif sys.platform == "darwin":
        import subprocess

        for key, field in (("machdep.cpu.brand_string", "model"), ("machdep.cpu.vendor", "vendor")):
            try:
                cpu[field] = subprocess.run(["sysctl", "-n", key], capture_output=True, text=True,
                                            timeout=10).stdout.strip()
            except Exception:
                pass
    if not cpu["model"]:
        cpu["model"] = platform.processor() or platform.machine()
    return cpu


def describe(packages, holotype_copy):
    imported, failed = [], {}
    for name in packages:
        try:
            __import__(name)
            imported.append(name)
        except Exception as exc:  # installed but broken, or absent: recorded, never fatal
            failed[name] = f"{type(exc).__name__}: {str(exc)[:200]}"
    libraries, why = _libraries(holotype_copy)
    return {
        "numerics_format": 1,
        "imported": imported,
        "failed": failed,
        "libraries": libraries,
        "libraries_unavailable": why,
        "numpy": _numpy(),
        "cpu": _cpu(),
        "variables": {k: os.environ[k] for k in VARIABLES if k in os.environ},
    }


if __name__ == "__main__":
    args = json.loads(sys.argv[1]) if len(sys.argv) > 1 else {}
    sys.stdout.write(json.dumps(describe(args.get("packages", []), args.get("threadpoolctl"))))
