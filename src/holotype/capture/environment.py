"""Run the stdlib-only probe inside the target interpreter and turn its JSON into an Environment."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from importlib import resources
from pathlib import Path
from typing import Any

from holotype.capture.origins import origin_from_direct_url
from holotype.errors import HolotypeError
from holotype.records import Environment, Interpreter, PackageRecord, PlatformInfo

PROBE_TIMEOUT = 120


def probe_source() -> str:
    """The probe script's text, as shipped inside the package."""
    return resources.files("holotype.capture").joinpath("probe.py").read_text(encoding="utf-8")


VENV_INTERPRETERS = (".venv/bin/python", ".venv/Scripts/python.exe", "venv/bin/python")


def venv_interpreter(folder: Path) -> Path:
    """Where a virtual environment made in `folder` keeps its interpreter on this platform."""
    return Path(folder) / ("Scripts/python.exe" if os.name == "nt" else "bin/python")


def resolve_python(configured: str | None, root: Path, override: str | None = None) -> tuple[str, str]:
    """The interpreter to inspect and how it was chosen: --python, config, the project's .venv, or this one."""
    import sys

    if override:
        candidate, how = override, "--python"
    elif configured:
        candidate, how = configured, "python in the config"
    else:
        for rel in VENV_INTERPRETERS:
            if (root / rel).exists():
                return str(root / rel), f"the project's {rel.split('/')[0]}"
        return sys.executable, "the running interpreter"
    path = Path(candidate).expanduser()
    if not path.is_absolute() and ("/" in candidate or "\\" in candidate):
        path = root / path
    elif not path.is_absolute():
        found = shutil.which(candidate)
        if found is None:
            raise HolotypeError(f"target interpreter '{candidate}' (from {how}) is not on PATH; "
                                "set python = \"...\" in holotype.toml or pass --python PATH")
        path = Path(found)
    if not path.exists():
        raise HolotypeError(f"target interpreter {path} (from {how}) does not exist; build it from the lock with "
                            "'holotype recreate DIR', or set python = \"...\" in holotype.toml or pass --python PATH")
    return str(path), how


class ProbeRun:
    """The probe running in the target interpreter; start it early, collect the answer when needed."""

    def __init__(self, python: str, cwd: Path, how: str = "") -> None:
        self.python = python
        self.how = how
        env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME", "PYTHONSTARTUP")}
        env["PYTHONIOENCODING"] = "utf-8"
        try:
            self.proc = subprocess.Popen([python, "-c", probe_source()], cwd=cwd, env=env, stdin=subprocess.DEVNULL,
                                         stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        except OSError as exc:
            where = f" (from {how})" if how else ""
            raise HolotypeError(f"cannot run target interpreter {python}{where}: {exc.strerror}; "
                                "set python = \"...\" in holotype.toml or pass --python PATH") from None

    def result(self) -> dict[str, Any]:
        """Wait for the probe and return its parsed JSON."""
        try:
            out, err = self.proc.communicate(timeout=PROBE_TIMEOUT)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.communicate()
            raise HolotypeError(f"target interpreter {self.python} did not answer within {PROBE_TIMEOUT}s") from None
        if self.proc.returncode != 0:
            tail = err.decode("utf-8", "replace").strip().splitlines()[-1:] or ["no error text"]
            raise HolotypeError(f"target interpreter {self.python} failed to describe itself: {tail[0]} "
                                "(holotype needs Python 3.8 or newer there)")
        try:
            doc = json.loads(out)
        except ValueError:
            raise HolotypeError(f"target interpreter {self.python} printed something that is not the probe's "
                                "JSON") from None
        if not isinstance(doc, dict) or doc.get("probe_format") != 1:
            raise HolotypeError(f"target interpreter {self.python}: unexpected probe answer")
        return doc


def run_probe(python: str, cwd: Path, how: str = "") -> dict[str, Any]:
    """Execute the probe with `python` in `cwd` and return its parsed JSON."""
    return ProbeRun(python, cwd, how).result()


def environment_from_probe(doc: dict[str, Any], root: Path | None = None) -> Environment:
    """Turn the probe's JSON into typed records (names normalised per PEP 503, origins stripped)."""
    from packaging.utils import canonicalize_name

    it = doc["interpreter"]
    executable = None
    if root is not None:
        try:
            executable = Path(it["executable"]).relative_to(Path(root).resolve()).as_posix()
        except ValueError:
            try:
                executable = Path(it["executable"]).relative_to(Path(root)).as_posix()
            except ValueError:
                executable = None  # outside the project: an absolute path would name this machine's user
    interpreter = Interpreter(
        implementation=str(it["implementation"]),
        version=str(it["version"]),
        compiler=str(it.get("compiler") or ""),
        abi=it.get("abi"),
        executable=executable,
    )
    pf = doc["platform"]
    platform = PlatformInfo(
        system=str(pf["system"]), release=str(pf["release"]), machine=str(pf["machine"]),
        libc=pf.get("libc"), libc_version=pf.get("libc_version"),
    )
    packages: dict[str, PackageRecord] = {}
    for dist in doc["distributions"]:
        name = canonicalize_name(dist["name"])
        if name in packages:
            continue
        packages[name] = PackageRecord(
            name=name,
            version=str(dist["version"]),
            origin=origin_from_direct_url(dist.get("direct_url")),
            installer=dist.get("installer"),
            requested=bool(dist.get("requested")),
            requires=tuple(dist.get("requires") or ()),
            top_level=tuple(dist.get("top_level") or ()),
        )
    return Environment(
        interpreter=interpreter,
        platform=platform,
        packages=packages,
        stdlib=frozenset(doc.get("stdlib") or ()),
        markers={k: str(v) for k, v in (doc.get("markers") or {}).items()},
    )


def capture_environment(python: str, root: Path, how: str = "") -> Environment:
    """Describe the target interpreter at `python`."""
    return environment_from_probe(run_probe(python, root, how), root)
