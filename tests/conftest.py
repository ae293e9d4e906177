"""Shared test helpers: run the CLI in-process, make projects, build tiny wheels and virtual environments offline."""

from __future__ import annotations

import base64
import hashlib
import json
import os
import shutil
import subprocess
import sys
import textwrap
import zipfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest
from click.testing import CliRunner

from holotype.cli import app
from holotype.demo.wheels import write_wheel

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"


@pytest.fixture(scope="session")
def _session_cache(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return tmp_path_factory.mktemp("cache")


@pytest.fixture(autouse=True)
def _private_cache(_session_cache: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # One digest cache for the session, never the user's: entries are keyed by file identity, so sharing them is
    # as safe as holotype's own use across projects, and the test interpreter's ~15,000 installed files are
    # read once, not once per test. Tests of the cache itself point HOLOTYPE_CACHE_DIR at their own folder.
    monkeypatch.setenv("HOLOTYPE_CACHE_DIR", str(_session_cache))
    monkeypatch.delenv("NO_COLOR", raising=False)
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)


@dataclass
class CliResult:
    code: int
    out: str
    err: str


def run_cli(*args: str | os.PathLike[str]) -> CliResult:
    """Run holotype in-process, the way a user types it."""
    result = CliRunner().invoke(app, [str(a) for a in args], catch_exceptions=False, prog_name="holotype")
    return CliResult(result.exit_code, result.stdout, result.stderr)


@pytest.fixture
def cli() -> object:
    return run_cli


def write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


# ----------------------------------------------------------------------------- tiny wheels, offline


def _record_line(name: str, data: bytes) -> str:
    digest = base64.urlsafe_b64encode(hashlib.sha256(data).digest()).rstrip(b"=").decode()
    return f"{name},sha256={digest},{len(data)}"


def build_wheel(folder: Path, name: str, version: str, requires: tuple[str, ...] = (),
                module_text: str | None = None, modules: dict[str, str] | None = None,
                top_level: str | None = None) -> Path:
    """A minimal pure-Python wheel (PEP 427) providing module `name` (or the files `modules` names, under
    top-level `top_level`: a namespace package's part, say)."""
    sources = modules or {f"{name.replace('-', '_')}/__init__.py": module_text or f"VERSION = {version!r}\n"}
    return write_wheel(folder, name, version, sources, requires, top_level, generator="holotype-tests")


def built_once(tmp_path_factory: pytest.TempPathFactory, name: str,
               build: Callable[[Path], dict[str, Path]]) -> dict[str, Path]:
    """What `build(folder)` made, built once for the whole run: the xdist workers share the folder (the
    first one to get there builds it, under a file lock, and the others read what it wrote). Only for
    things the tests that use them do not change for each other (each test its own project, say)."""
    import fcntl

    base = tmp_path_factory.getbasetemp()
    shared = base.parent if os.environ.get("PYTEST_XDIST_WORKER") else base  # one folder per run
    done = shared / f"{name}.json"
    with open(shared / f"{name}.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if not done.exists():
            folder = shared / name
            shutil.rmtree(folder, ignore_errors=True)
            folder.mkdir()
            made = build(folder)
            done.write_text(json.dumps({k: str(v) for k, v in made.items()}))
    return {k: Path(v) for k, v in json.loads(done.read_text()).items()}


@dataclass
class Venv:
    root: Path
    wheels: Path

    @property
    def python(self) -> Path:
        return self.root / "bin" / "python"

    def pip(self, *args: str) -> None:
        subprocess.run([str(self.python), "-m", "pip", "--disable-pip-version-check", "-q", *args],
                       check=True, capture_output=True)

    def install(self, *specs: str) -> None:
        self.pip("install", "--no-index", "--find-links", str(self.wheels), *specs)

    @property
    def site(self) -> Path:
        return next((self.root / "lib").glob("python*/site-packages"))

    def install_editable(self, name: str, source: Path, code_root: Path) -> None:
        """What an installer leaves for an editable install (PEP 660, PEP 610): a .pth putting `code_root` on
        sys.path and a .dist-info whose direct_url.json says editable, from folder `source`."""
        dist = name.replace("-", "_")
        info = self.site / f"{dist}-1.0.dist-info"
        info.mkdir()
        files = {f"_{dist}_editable.pth": f"{code_root}\n".encode(),
                 f"{info.name}/METADATA": f"Metadata-Version: 2.1\nName: {name}\nVersion: 1.0\n".encode(),
                 f"{info.name}/INSTALLER": b"pip\n",
                 f"{info.name}/direct_url.json": json.dumps({"url": source.as_uri(),
                                                             "dir_info": {"editable": True}}).encode()}
        for rel, data in files.items():
            (self.site / rel).write_bytes(data)
        record = "\n".join(_record_line(rel, data) for rel, data in files.items()) + f"\n{info.name}/RECORD,,\n"
        (info / "RECORD").write_text(record)


def wheel_of_installed(folder: Path, name: str, as_version: str | None = None) -> Path:
    """A wheel re-made from a distribution installed here, from the files its RECORD lists (offline: for build
    tools such as `wheel` that a test environment needs and no test wheelhouse offers). With `as_version`,
    the same code under another version number (a "newer" installer for the upgrade test)."""
    from importlib import metadata

    dist = metadata.distribution(name)
    version = as_version or dist.version
    old_info = f"{name.replace('-', '_')}-{dist.version}.dist-info"
    info = f"{name.replace('-', '_')}-{version}.dist-info"
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name.replace('-', '_')}-{version}-py3-none-any.whl"
    with zipfile.ZipFile(path, "w") as zf:
        for item in dist.files or ():
            rel = item.as_posix()
            if rel.startswith("..") or "__pycache__" in rel or rel.endswith(".pyc") or \
                    rel.endswith(("/INSTALLER", "/REQUESTED", "/direct_url.json")):
                continue
            full = Path(str(item.locate()))
            if not full.is_file():
                continue
            data = full.read_bytes()
            if rel.startswith(old_info):
                rel = info + rel[len(old_info):]
                if rel.endswith("/METADATA"):
                    data = data.replace(f"\nVersion: {dist.version}\r".encode(), f"\nVersion: {version}\r".encode(), 1) \
                        .replace(f"\nVersion: {dist.version}\n".encode(), f"\nVersion: {version}\n".encode(), 1)
                elif rel.endswith("/RECORD"):
                    data = data.replace(old_info.encode(), info.encode())
            zf.writestr(rel, data)
    assert any(n.startswith(info) for n in zipfile.ZipFile(path).namelist())
    return path


def make_venv(root: Path, wheels: Path) -> Venv:
    subprocess.run([sys.executable, "-m", "venv", str(root)], check=True, capture_output=True)
    return Venv(root, wheels)


@pytest.fixture(scope="session")
def wheelhouse(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """alpha (imported by the test project) requires beta; gamma is unrelated tooling."""
    folder = tmp_path_factory.mktemp("wheels")
    build_wheel(folder, "alpha", "1.0", ("beta>=1.0",))
    build_wheel(folder, "alpha", "1.1", ("beta>=1.0",))
    build_wheel(folder, "beta", "1.0")
    build_wheel(folder, "beta", "2.0")
    build_wheel(folder, "gamma", "1.0")
    build_wheel(folder, "gamma", "2.0")
    return folder


@pytest.fixture
def survey(tmp_path: Path) -> Path:
    """A small recorded project whose analysis runs on this interpreter."""
    root = tmp_path / "lab"
    write(root / "data" / "a.csv", "x\n1\n2\n")
    write(root / "run.py", "import os, json\nos.makedirs('out', exist_ok=True)\n"
                           "json.dump({'mean': 1.5 * (1 + float(os.environ.get('SHIFT', '0')))}, open('out/r.json', 'w'))\n")
    write(root / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 9\n\n'
                                  '[analyses.mean]\ncommand = "python run.py"\noutputs = ["out/r.json"]\n')
    assert run_cli("record", "-C", root).code == 0
    return root


def one_analysis_project(root: Path, script: str, outputs: tuple[str, ...], *, name: str = "a",
                         data: tuple[tuple[str, str], ...] = (("data/a.csv", "x\n1\n"),), settings: str = "",
                         analysis: str = "", python: str | os.PathLike[str] = sys.executable, seed: int = 1) -> Path:
    """A project with data files, one analysis `run.py` and its holotype.toml (not recorded yet).

    `settings` goes at the top level of the config, `analysis` into the analysis' table."""
    for rel, text in data:
        write(root / rel, text)
    write(root / "run.py", script)
    listed = ", ".join(f'"{o}"' for o in outputs)
    write(root / "holotype.toml", f'python = "{python}"\ndata = ["data"]\nseed = {seed}\n{settings}\n'
                                  f'[analyses.{name}]\ncommand = "python run.py"\noutputs = [{listed}]\n{analysis}')
    return root
