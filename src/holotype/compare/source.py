"""One side of a comparison: a file on disk or bytes from the baseline store, named for messages."""

from __future__ import annotations

import hashlib
import io
import os
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

from holotype.errors import InputError, UnreadableOutput
from holotype.safe_files import open_regular, read_input


@dataclass(frozen=True)
class Source:
    name: str  # the output's relative name: decides the format and matches rules
    label: str  # how messages name it (a path, or "baseline of results/x.csv")
    path: Path | None = None
    data: bytes | None = None

    @classmethod
    def from_path(cls, path: Path, name: str | None = None) -> Source:
        """A file to compare. A pipe (`<(zcat baseline)`) can be read only once, so it is read now."""
        name = name or Path(path).name
        try:
            piped = read_input(path)
        except InputError as exc:
            raise UnreadableOutput(exc.detail, str(path)) from None
        if piped is not None:
            return cls(name, str(path), data=piped)
        return cls(name, str(path), path=Path(path))

    @classmethod
    def from_bytes(cls, data: bytes, name: str, label: str) -> Source:
        return cls(name, label, data=data)

    def open(self) -> BinaryIO:
        if self.data is not None:
            return io.BytesIO(self.data)
        assert self.path is not None
        try:
            return open_regular(self.path, follow=True)
        except InputError as exc:
            raise UnreadableOutput(exc.detail, self.label) from None

    def read_bytes(self) -> bytes:
        if self.data is not None:
            return self.data
        with self.open() as fh:
            return fh.read()

    def head(self, n: int) -> bytes:
        if self.data is not None:
            return self.data[:n]
        with self.open() as fh:
            return fh.read(n)

    def size(self) -> int:
        if self.data is not None:
            return len(self.data)
        with self.open() as fh:
            return os.fstat(fh.fileno()).st_size

    def sha256(self) -> str:
        if self.data is not None:
            return hashlib.sha256(self.data).hexdigest()
        h = hashlib.sha256()
        with self.open() as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
        return h.hexdigest()
