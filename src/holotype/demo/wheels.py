"""Tiny pure-Python wheels (PEP 427), written offline: the demo's invented lake-survey libraries.

A wheel is a zip holding the package's files and a .dist-info folder: METADATA (core metadata 2.1),
WHEEL, top_level.txt and RECORD (each file's urlsafe-base64 SHA-256 and size)."""

from __future__ import annotations

import base64
import hashlib
import zipfile
from pathlib import Path


def _record_line(name: str, data: bytes) -> str:
    digest = base64.urlsafe_b64encode(hashlib.sha256(data).digest()).rstrip(b"=").decode()
    return f"{name},sha256={digest},{len(data)}"


def write_wheel(folder: Path, name: str, version: str, sources: dict[str, str], requires: tuple[str, ...] = (),
                top_level: str | None = None, generator: str = "holotype-demo") -> Path:
    """A py3-none-any wheel of `name` `version` holding `sources` (path in the wheel -> text)."""
    dist = name.replace("-", "_")
    info = f"{dist}-{version}.dist-info"
    files: dict[str, bytes] = {
        **{rel: text.encode() for rel, text in sources.items()},
        f"{info}/METADATA": (f"Metadata-Version: 2.1\nName: {name}\nVersion: {version}\n"
                             + "".join(f"Requires-Dist: {r}\n" for r in requires)).encode(),
        f"{info}/WHEEL": f"Wheel-Version: 1.0\nGenerator: {generator}\nRoot-Is-Purelib: true\nTag: py3-none-any\n"
                         .encode(),
        f"{info}/top_level.txt": f"{top_level or dist}\n".encode(),
    }
    record = "\n".join(_record_line(n, d) for n, d in files.items()) + f"\n{info}/RECORD,,\n"
    files[f"{info}/RECORD"] = record.encode()
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{dist}-{version}-py3-none-any.whl"
    with zipfile.ZipFile(path, "w") as zf:
        for n, d in files.items():
            zf.writestr(n, d)
    return path
