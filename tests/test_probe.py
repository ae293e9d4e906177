"""The probe runs inside old interpreters too: check it under the oldest Python on this machine."""

from __future__ import annotations

import glob
import json
import os
import shutil
import subprocess
import sys

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
