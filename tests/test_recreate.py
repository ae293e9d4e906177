"""recreate for real projects: exact wheels from holotype's cache, git and editable packages, portable paths."""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest

from conftest import build_wheel, make_venv, run_cli, wheel_of_installed, write
from holotype.lockfile import read_lock

pytestmark = pytest.mark.slow

SETUP = ('[build-system]\nrequires = ["setuptools"]\nbuild-backend = "setuptools.build_meta"\n'
         '[project]\nname = "{name}"\nversion = "{version}"\n')


def _package(folder: Path, name: str, version: str, text: str) -> Path:
    write(folder / "pyproject.toml", SETUP.format(name=name, version=version))
    write(folder / name / "__init__.py", text)
    return folder


def _git(folder: Path, *args: str) -> str:
    return subprocess.run(["git", *args], cwd=folder, check=True, capture_output=True, text=True).stdout.strip()


@pytest.fixture(scope="module")
def wheelhouse(tmp_path_factory: pytest.TempPathFactory, wheelhouse: Path) -> Path:
    """The test wheelhouse plus `wheel`, which the venv's bundled setuptools needs to build the git and
    editable packages offline."""
    folder = tmp_path_factory.mktemp("recreate") / "wheelhouse"
    shutil.copytree(wheelhouse, folder)
    wheel_of_installed(folder, "wheel")
    wheel_of_installed(folder, "packaging")  # what wheel itself requires
    wheel_of_installed(folder, "pip", as_version="99.0")  # "newer" than the pip a fresh venv bundles
    return folder


@pytest.fixture(scope="module")
def real_project(tmp_path_factory: pytest.TempPathFactory, wheelhouse: Path, _session_cache: Path) -> Path:
    """A project with index packages, a git package at a commit and an editable helper inside the project
    (built once for the module: the tests read it, recreate from it and copy it, never change it)."""
    base = tmp_path_factory.mktemp("recreate") / "lab"
    root = base / "survey"
    repo = _package(base / "songbird", "songbird", "0.3", "CALLS = 12\n")
    _git(repo, "init", "-q")
    _git(repo, "-c", "user.name=t", "-c", "user.email=t@example.org", "add", ".")
    _git(repo, "-c", "user.name=t", "-c", "user.email=t@example.org", "commit", "-q", "-m", "first")
    commit = _git(repo, "rev-parse", "HEAD")
    _package(root / "tools" / "lakehelp", "lakehelp", "1.0", "THRESHOLD = 0.5\n")
    _package(root / "tools" / "gauges", "gauges", "2.0", "UNITS = 'cm'\n")
    venv = make_venv(root / ".venv", wheelhouse)
    venv.install("alpha==1.0", "beta==1.0", "wheel")
    venv.pip("install", "--no-deps", "--no-build-isolation", f"git+{repo.as_uri()}@{commit}")
    venv.pip("install", "--no-deps", "--no-build-isolation", "-e", str(root / "tools" / "lakehelp"))
    venv.pip("install", "--no-deps", "--no-build-isolation", str(root / "tools" / "gauges"))  # a local folder
    write(root / "fit.py", "import alpha, songbird, lakehelp, gauges\n")
    write(root / "holotype.toml", 'python = ".venv/bin/python"\nseed = 3\nexclude = ["tools"]\n')
    with pytest.MonkeyPatch.context() as patch:  # the session's cache, never the user's
        patch.setenv("HOLOTYPE_CACHE_DIR", str(_session_cache))
        result = run_cli("record", "--no-run", "-C", root)
    assert result.code == 0, result.out + result.err
    return root


def test_the_lock_keeps_wheel_tags_and_portable_local_paths(real_project: Path) -> None:
    lock = read_lock(real_project / "holotype.lock")
    assert lock.packages["alpha"].wheel_tags == ("py3-none-any",)
    assert lock.packages["lakehelp"].origin.kind == "editable"
    assert lock.packages["lakehelp"].origin.url == "./tools/lakehelp"
    assert lock.packages["gauges"].origin.kind == "directory" and lock.packages["gauges"].origin.url == "./tools/gauges"
    assert lock.packages["songbird"].origin.kind == "vcs" and lock.packages["songbird"].origin.url == "../songbird"
    text = (real_project / "holotype.lock").read_text()
    assert str(real_project) not in text and str(real_project.parent) not in text  # no path of this machine


def test_recreate_installs_git_editable_and_index_packages_and_checks_clean(real_project: Path, tmp_path: Path,
                                                                           wheelhouse: Path) -> None:
    target = tmp_path / "rebuilt"
    result = run_cli("recreate", target, "-C", real_project, "--find-links", wheelhouse, "--no-index",
                     "--format", "json")
    assert result.code == 0, result.out + result.err
    doc = json.loads(result.out)
    assert not [f for f in doc["findings"] if f["area"] == "package" and f["severity"] != "info"], result.out
    log = (target / "holotype-install.log").read_text()
    # the bundled installer was brought up to date before the git package was installed
    assert log.index("Successfully installed pip-99.0") < log.index("songbird")
    meta = next((target / "lib").glob("python*/site-packages/lakehelp-1.0.dist-info"))
    assert json.loads((meta / "direct_url.json").read_text())["dir_info"] == {"editable": True}
    gauges = next((target / "lib").glob("python*/site-packages/gauges-2.0.dist-info"))
    assert json.loads((gauges / "direct_url.json").read_text())["dir_info"] == {}  # a plain folder install
    # a second recreate needs no package source for the index packages: holotype's wheel cache has them
    again = run_cli("recreate", tmp_path / "again", "-C", real_project, "--no-index", "--format", "json")
    assert again.code == 0, again.out + again.err
    # and pins --to pylock hashes the cached wheels (the venv's own pip and setuptools come from ensurepip's)
    import ensurepip

    bundled = Path(ensurepip.__file__).parent / "_bundled"
    pylock = run_cli("pins", "--to", "pylock", "-C", real_project, "--find-links", bundled)
    assert pylock.code == 0, pylock.err
    assert "alpha-1.0-py3-none-any.whl" in pylock.out


def test_the_same_lock_recreated_from_a_moved_copy_is_clean(real_project: Path, tmp_path: Path,
                                                            wheelhouse: Path) -> None:
    moved = tmp_path / "elsewhere" / "copy"
    shutil.copytree(real_project.parent, moved, ignore=shutil.ignore_patterns(".venv"), symlinks=True)
    root = moved / "survey"
    result = run_cli("recreate", tmp_path / "env2", "-C", root, "--find-links", wheelhouse, "--no-index",
                     "--format", "json")
    assert result.code == 0, result.out + result.err
    assert not [f for f in json.loads(result.out)["findings"] if f["severity"] == "fail"]


def test_a_look_alike_wheel_is_refused(real_project: Path, tmp_path: Path, wheelhouse: Path,
                                       monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("HOLOTYPE_CACHE_DIR", str(tmp_path / "fresh-cache"))
    other = tmp_path / "other-wheels"
    other.mkdir()
    for wheel in wheelhouse.glob("*.whl"):
        if not wheel.name.startswith("alpha-1.0-"):
            shutil.copy(wheel, other)
    rebuilt = build_wheel(tmp_path / "another-build", "alpha", "1.0")
    # the same version, rebuilt: build tag 1 (named so; the file is the same tiny wheel)
    shutil.copy(rebuilt, other / "alpha-1.0-1-py3-none-any.whl")
    rebuilt.unlink()
    result = run_cli("recreate", tmp_path / "env3", "-C", real_project, "--find-links", other, "--no-index")
    [error] = [line for line in result.err.splitlines() if line.startswith("holotype:")]  # one line
    assert result.code == 2 and "alpha 1.0" in error
    assert "alpha 1.0" in result.err and "alpha-1.0-1-py3-none-any.whl" in result.err and "look-alike" in result.err


def test_an_installer_failure_says_its_first_error_line_and_names_the_log(real_project: Path, tmp_path: Path,
                                                                         monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("HOLOTYPE_CACHE_DIR", str(tmp_path / "empty-cache"))
    result = run_cli("recreate", tmp_path / "env4", "-C", real_project, "--no-index")
    assert result.code == 2 and "ERROR:" in result.err and "holotype-install.log" in result.err
    assert (tmp_path / "env4" / "holotype-install.log").exists()


def test_pins_pylock_writes_no_path_of_this_machine(real_project: Path, tmp_path: Path, wheelhouse: Path) -> None:
    import ensurepip
    import tomllib

    from packaging.pylock import Pylock

    bundled = Path(ensurepip.__file__).parent / "_bundled"
    result = run_cli("pins", "--to", "pylock", "-C", real_project, "--find-links", wheelhouse, "--find-links",
                     bundled)
    assert result.code == 0, result.err
    doc = tomllib.loads(result.out)
    Pylock.from_dict(doc)  # PEP 751's reference reader
    assert str(tmp_path) not in result.out  # no absolute path of this machine: every path is project-relative
    paths = [w["path"] for p in doc["packages"] for w in p.get("wheels", [])]
    paths += [p["directory"]["path"] for p in doc["packages"] if "directory" in p]
    assert paths and not [p for p in paths if p.startswith("/")]
    assert {"path": "tools/lakehelp", "editable": True} in [p.get("directory") for p in doc["packages"]]
