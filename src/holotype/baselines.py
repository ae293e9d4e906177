"""The baseline store: recorded analysis outputs, content-addressed by SHA-256 and gzip-compressed.

Lives at .holotype/baselines/ inside the project and is meant to be committed. An object's
name is the SHA-256 of the original bytes; reading verifies it, so a damaged object is
reported instead of silently compared.
"""

from __future__ import annotations

import gzip
import hashlib
import zlib
from pathlib import Path

from holotype.atomic import remove_stale_temps, write_atomic

STORE_FOLDER = ".holotype"
BASELINE_FOLDER = "baselines"


class BaselineError(Exception):
    """A baseline object is missing, unreadable or does not match its digest."""


class BaselineStore:
    def __init__(self, root: Path) -> None:
        self.folder = Path(root) / STORE_FOLDER / BASELINE_FOLDER

    def path_for(self, digest: str) -> Path:
        return self.folder / digest[:2] / f"{digest[2:]}.gz"

    def put(self, data: bytes) -> str:
        """Store `data` (if not already there) and return its SHA-256."""
        digest = hashlib.sha256(data).hexdigest()
        target = self.path_for(digest)
        if not target.exists():
            # mtime=0 keeps the compressed bytes identical for identical outputs
            write_atomic(target, gzip.compress(data, compresslevel=6, mtime=0))
        return digest

    def get(self, digest: str) -> bytes:
        """The original bytes for `digest`, verified."""
        path = self.path_for(digest)
        try:
            packed = path.read_bytes()
        except FileNotFoundError:
            raise BaselineError(f"baseline {digest[:12]}… is missing from {self.folder}") from None
        except OSError as exc:
            raise BaselineError(f"baseline {path} cannot be read: {exc.strerror}") from None
        try:
            data = gzip.decompress(packed)
        except (OSError, EOFError, zlib.error) as exc:
            raise BaselineError(f"baseline {path} does not decompress ({exc})") from None
        if hashlib.sha256(data).hexdigest() != digest:
            raise BaselineError(f"baseline {path} does not match its SHA-256 (damaged or edited)")
        return data

    def clean_temps(self) -> None:
        if self.folder.is_dir():
            for sub in self.folder.iterdir():
                if sub.is_dir():
                    remove_stale_temps(sub)
