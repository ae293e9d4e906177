"""Run the stdlib-only probe inside the target interpreter and turn its JSON into an Environment."""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import threading
import time
from importlib import resources
from pathlib import Path
from typing import IO, Any

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


MAX_PROBE_BYTES = 256 << 20  # the most of the probe's answer kept; an interpreter printing more is refused
MAX_PROBE_ERROR = 64 << 10  # the last bytes of its stderr kept for the message


def probe_timeout() -> float:
    """Seconds the probe may take: HOLOTYPE_PROBE_TIMEOUT (1 to 3600), else PROBE_TIMEOUT."""
    text = os.environ.get("HOLOTYPE_PROBE_TIMEOUT")
    if text is None:
        return float(PROBE_TIMEOUT)
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not 1 <= value <= 3600:
        raise HolotypeError(f"HOLOTYPE_PROBE_TIMEOUT={text[:40]!r} should be seconds from 1 to 3600")
    return value


class _Drain(threading.Thread):
    """Read a pipe to its end in the background, keeping the first `keep` bytes (or the last, with `tail`)."""

    def __init__(self, stream: IO[bytes], keep: int, *, tail: bool = False) -> None:
        super().__init__(daemon=True)
        self.stream, self.keep, self.tail = stream, keep, tail
        self.data = bytearray()
        self.overflow = False

    def run(self) -> None:
        try:
            while chunk := self.stream.read(1 << 16):
                self.data += chunk
                if len(self.data) > self.keep:
                    self.overflow = True
                    self.data = self.data[-self.keep:] if self.tail else self.data[: self.keep]
        except (OSError, ValueError):
            pass


class ProbeRun:
    """The probe running in the target interpreter; start it early, collect the answer when needed.

    It runs isolated (`-I`: no PYTHON* variables, no user site, neither the current folder nor the script's
    on sys.path) from a neutral folder, so no module of the project can be imported by it: check runs nothing
    of the project. It gets its own process group, killed whole on a timeout."""

    def __init__(self, python: str, cwd: Path, how: str = "", *, script: str = "probe.py", args: tuple[str, ...] = (),
                 extra_env: dict[str, str] | None = None, format_key: str = "probe_format") -> None:
        self.python = python
        self.how = how
        self.format_key = format_key
        env = {k: v for k, v in os.environ.items() if not k.startswith("PYTHON")}
        env.update(extra_env or {})
        source = resources.files("holotype.capture").joinpath(script).read_text(encoding="utf-8")
        try:
            self.proc = subprocess.Popen([python, "-I", "-c", source, *args], cwd=os.path.abspath(os.sep), env=env,
                                         stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                         start_new_session=True)
        except OSError as exc:
            where = f" (from {how})" if how else ""
            raise HolotypeError(f"cannot run target interpreter {python}{where}: {exc.strerror}; "
                                "set python = \"...\" in holotype.toml or pass --python PATH") from None
        assert self.proc.stdout is not None and self.proc.stderr is not None
        self.out = _Drain(self.proc.stdout, MAX_PROBE_BYTES)
        self.err = _Drain(self.proc.stderr, MAX_PROBE_ERROR, tail=True)
        self.out.start()
        self.err.start()

    def stop(self) -> None:
        """Kill the probe's whole group (a child it started may hold its pipes open)."""
        try:
            os.killpg(self.proc.pid, signal.SIGKILL)
        except (OSError, AttributeError):
            self.proc.kill()
        self.proc.wait()

    def result(self) -> dict[str, Any]:
        """Wait for the probe and return its parsed JSON."""
        limit = probe_timeout()
        deadline = time.monotonic() + limit
        while self.proc.poll() is None and not self.out.overflow and time.monotonic() < deadline:
            time.sleep(0.005)
        if self.proc.poll() is None:
            self.stop()
            if self.out.overflow:
                raise HolotypeError(f"target interpreter {self.python} printed more than {MAX_PROBE_BYTES:,} bytes "
                                    "instead of describing itself")
            raise HolotypeError(f"target interpreter {self.python} did not answer within {limit:g}s")
        self.out.join(timeout=2)
        self.err.join(timeout=2)
        if self.out.is_alive() or self.err.is_alive():  # a child of it still holds the pipes
            self.stop()
        if self.out.overflow:
            raise HolotypeError(f"target interpreter {self.python} printed more than {MAX_PROBE_BYTES:,} bytes "
                                "instead of describing itself")
        if self.proc.returncode != 0:
            tail = bytes(self.err.data).decode("utf-8", "replace").strip().splitlines()[-1:] or ["no error text"]
            raise HolotypeError(f"target interpreter {self.python} failed to describe itself: {tail[0][:500]} "
                                "(holotype needs Python 3.8 or newer there)")
        try:
            doc = json.loads(bytes(self.out.data))
        except ValueError:
            raise HolotypeError(f"target interpreter {self.python} printed something that is not the probe's "
                                "JSON") from None
        if not isinstance(doc, dict) or doc.get(self.format_key) != 1:
            raise HolotypeError(f"target interpreter {self.python}: unexpected probe answer")
        return doc


def run_probe(python: str, cwd: Path, how: str = "") -> dict[str, Any]:
    """Execute the probe with `python` in `cwd` and return its parsed JSON."""
    return ProbeRun(python, cwd, how).result()


def environment_from_probe(doc: dict[str, Any], root: Path | None = None, python: str = "the target") -> Environment:
    """Turn the probe's JSON into typed records (names normalised per PEP 503, origins stripped).

    An answer of the wrong shape (missing keys, wrong types) is one clear error naming the interpreter."""
    try:
        return _environment(doc, root)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        what = f"missing key {exc}" if isinstance(exc, KeyError) else f"{type(exc).__name__}: {exc}"
        raise HolotypeError(f"the probe of interpreter {python} gave an answer holotype cannot read ({what}); "
                            "is it a real Python 3.8+?") from None


def _environment(doc: dict[str, Any], root: Path | None) -> Environment:
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
    locations: dict[str, str] = {}
    sources: dict[str, str] = {}
    for dist in doc["distributions"]:
        name = canonicalize_name(dist["name"])
        if name in packages:
            continue
        packages[name] = PackageRecord(
            name=name,
            version=str(dist["version"]),
            origin=origin_from_direct_url(dist.get("direct_url"), root),
            installer=dist.get("installer"),
            requested=bool(dist.get("requested")),
            requires=tuple(dist.get("requires") or ()),
            top_level=tuple(dist.get("top_level") or ()),
            wheel_tags=tuple(str(t) for t in dist.get("wheel_tags") or ()),
            build=str(dist["build"]) if dist.get("build") else None,
        )
        if isinstance(dist.get("location"), str):
            locations[name] = dist["location"]
        url = (dist.get("direct_url") or {}).get("url") if isinstance(dist.get("direct_url"), dict) else None
        if isinstance(url, str) and url.startswith("file://"):
            sources[name] = url
    return Environment(
        interpreter=interpreter,
        platform=platform,
        packages=packages,
        stdlib=frozenset(doc.get("stdlib") or ()),
        markers={k: str(v) for k, v in (doc.get("markers") or {}).items()},
        locations=locations,
        sources=sources,
    )


def capture_environment(python: str, root: Path, how: str = "") -> Environment:
    """Describe the target interpreter at `python`."""
    return environment_from_probe(run_probe(python, root, how), root, python)
