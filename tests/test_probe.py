"""The probe runs inside old interpreters too: check it under the oldest Python on this machine."""

from __future__ import annotations

import glob
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from holotype.capture.environment import environment_from_probe, probe_source


def _candidates() -> list[str]:
    found = [sys.executable]
    for minor in range(8, 14):
        exe = shutil.which(f"python3.{minor}")
        if exe:
            found.append(exe)
    found += glob.glob(os.path.expanduser("~/.pyenv/versions/3.*/bin/python3"))
    return found


def _version(exe: str) -> tuple[int, int] | None:
    try:
        out = subprocess.run([exe, "-c", "import sys; print(sys.version_info[0], sys.version_info[1])"],
                             capture_output=True, text=True, timeout=30)
    except (OSError, subprocess.TimeoutExpired):
        return None
    if out.returncode != 0:
        return None
    major, minor = map(int, out.stdout.split())
    return major, minor


def oldest_python() -> str:
    """The oldest Python 3.8+ here (the running interpreter when it is the only one)."""
    versions = {exe: _version(exe) for exe in _candidates()}
    usable = {exe: v for exe, v in versions.items() if v is not None and v >= (3, 8)}
    return min(usable, key=lambda exe: usable[exe])  # type: ignore[arg-type, return-value]


def test_probe_json_under_the_oldest_python() -> None:
    exe = oldest_python()
    proc = subprocess.run([exe, "-c", probe_source()], capture_output=True, timeout=120)
    assert proc.returncode == 0, proc.stderr.decode()
    doc = json.loads(proc.stdout)
    assert doc["probe_format"] == 1
    it = doc["interpreter"]
    assert isinstance(it["implementation"], str) and it["version"].count(".") == 2
    assert isinstance(it["compiler"], str)
    assert {"system", "release", "machine", "libc", "libc_version"} <= set(doc["platform"])
    assert "os" in doc["stdlib"] and "json" in doc["stdlib"] and "numpy" not in doc["stdlib"]
    assert {"python_version", "sys_platform", "platform_machine"} <= set(doc["markers"])
    for dist in doc["distributions"]:
        assert isinstance(dist["name"], str) and isinstance(dist["version"], str)
        assert isinstance(dist["requires"], list) and isinstance(dist["top_level"], list)
        assert isinstance(dist["requested"], bool)
    env = environment_from_probe(doc)
    assert env.interpreter.version == it["version"]
    assert all(name == name.lower() for name in env.packages)


def test_fast_metadata_reader_agrees_with_importlib_metadata() -> None:
    # the probe reads METADATA headers itself for speed; the standard library's reader is the reference
    from importlib import metadata

    from holotype.capture import probe

    ours = {d["name"]: d for d in probe.describe()["distributions"]}
    checked = 0
    for dist in metadata.distributions():
        name = dist.metadata["Name"]
        if name in ours:
            assert ours[name]["version"] == dist.version
            assert ours[name]["requires"] == list(dist.requires or [])
            checked += 1
    assert checked >= 10


def test_header_parser_handles_folded_lines_and_the_body() -> None:
    from holotype.capture.probe import _headers

    text = ("Metadata-Version: 2.1\nName: lake-tools\nVersion: 1.2\nLicense: line one\n         \n  line two\n"
            "Requires-Dist: numpy>=1.24\nRequires-Dist: scipy;\n extra == 'stats'\n\nRequires-Dist: not-a-header\n")
    assert _headers(text) == ("lake-tools", "1.2", ["numpy>=1.24", "scipy; extra == 'stats'"])


def _dist_folder(parent: Path, folder: str, name: str, version: str = "1.0", record: str | None = None) -> None:
    meta = parent / folder
    meta.mkdir(parents=True)
    (meta / "METADATA").write_text(f"Metadata-Version: 2.1\nName: {name}\nVersion: {version}\n\n")
    if record is not None:
        (meta / "RECORD").write_text(record)


def test_the_probes_own_search_finds_what_importlib_metadata_finds_in_its_order(tmp_path: Path,
                                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    # the probe lists plain folders itself (importing importlib.metadata is the slow part of the probe);
    # the standard library's distributions() is the reference, entry kinds and order included
    import zipfile
    from importlib import metadata

    from holotype.capture import probe

    site = tmp_path / "site"
    _dist_folder(site, "Alpha_Pkg-1.0.dist-info", "Alpha-Pkg")
    _dist_folder(site, "beta-2.0.dist-info", "beta", "2.0")
    _dist_folder(site, "alpha.pkg-0.9.DIST-INFO", "alpha.pkg", "0.9")  # the same normalised name: one group
    _dist_folder(site, "legacy-3.0-py3.11.egg-info", "legacy", "3.0")
    (site / "single_file-1.0.egg-info").write_text("Metadata-Version: 1.0\nName: single-file\nVersion: 1.0\n")
    (site / "notmeta").mkdir()
    for i in range(12):  # pairs of one normalised name: importlib.metadata lists each pair together
        _dist_folder(site, f"pair{i}_x-1.0.dist-info", f"pair{i}-x")
        _dist_folder(site, f"Pair{i}.X-2.0.dist-info", f"pair{i}.x", "2.0")
    second = tmp_path / "second"
    _dist_folder(second, "beta-1.0.dist-info", "beta", "1.0")
    egg = tmp_path / "old-1.0-py3.11.egg"
    (egg / "EGG-INFO").mkdir(parents=True)
    (egg / "EGG-INFO" / "PKG-INFO").write_text("Metadata-Version: 1.0\nName: old\nVersion: 1.0\n")
    zipped = tmp_path / "bundle.zip"
    with zipfile.ZipFile(zipped, "w") as zf:
        zf.writestr("zipped-4.0.dist-info/METADATA", "Metadata-Version: 2.1\nName: zipped\nVersion: 4.0\n\n")
    path = [str(site), str(tmp_path / "missing"), str(second), str(egg), str(zipped), str(site) + "/",
            str(tmp_path / "site" / ".." / "second")]
    monkeypatch.setattr(probe, "_search_path", lambda: path)
    ours = [(str(d._path), d.read_text("METADATA") or d.read_text("PKG-INFO"))  # type: ignore[attr-defined]
            for d in probe._discovered()]
    theirs = [(str(d._path), d.read_text("METADATA") or d.read_text("PKG-INFO"))  # type: ignore[attr-defined]
              for d in metadata.distributions(path=path)]
    assert ours == theirs
    assert len(ours) >= 32
    by_name = {d["name"]: d["version"] for d in probe._distributions()}
    assert by_name["beta"] == "2.0" and by_name["zipped"] == "4.0" and by_name["old"] == "1.0"


def test_top_level_names_from_record_rows_of_every_shape() -> None:
    # the quick reading of RECORD (one partition per row) against the row-by-row reading it replaced
    from holotype.capture import probe

    def careful(record: str) -> list[str]:
        names: set[str] = set()
        for row in record.splitlines():
            path = row.rsplit(",", 2)[0].strip('"') if row.count(",") >= 2 else row
            parts = path.replace("\\", "/").split("/")
            first = parts[0]
            if first.endswith((".dist-info", ".egg-info", ".data")) or first in ("..", "__pycache__", ""):
                continue
            if len(parts) == 1:
                if first.endswith(".py"):
                    names.add(first[:-3])
                elif first.endswith((".so", ".pyd")):
                    names.add(first.split(".")[0])
            elif first.isidentifier():
                names.add(first)
        return sorted(names)

    rows = ["pkg/__init__.py,sha256=abc,12", "pkg/sub/mod.py,,", "six.py,sha256=ab/cd,3", "_speed.cpython-311.so,,",
            '"a,b/c.py",sha256=x,1', "win\\mod.py,,", "winpkg\\sub\\m.py,,", "pkg-1.0.dist-info/RECORD,,",
            "pkg-1.0.data/scripts/x,,", "../../bin/tool,,", "__pycache__/x.pyc,,", "", "/abs/path.py,,",
            "9bad/x.py,,", "odd.pyd", "odd/", "a/b", "top.py", "x,y/z.py,,", "nocomma/file.py"]

    class Dist:
        def __init__(self, record: str) -> None:
            self.record = record

        def read_text(self, name: str) -> str | None:
            return self.record if name == "RECORD" else None

    record = "\n".join(rows)
    assert probe._top_level_names(Dist(record)) == careful(record)
    for row in rows:
        assert probe._top_level_names(Dist(row)) == careful(row), row
