"""Plain data that flows between capture, compare and the lockfile: what an analysis ran on."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

ORIGIN_KINDS = ("index", "vcs", "directory", "editable", "archive", "unknown")


@dataclass(frozen=True)
class Interpreter:
    implementation: str
    version: str
    compiler: str = ""
    abi: str | None = None
    executable: str | None = None  # only when it lives inside the project (never a home path)

    @property
    def minor(self) -> str:
        return ".".join(self.version.split(".")[:2])


@dataclass(frozen=True)
class PlatformInfo:
    system: str
    release: str
    machine: str
    libc: str | None = None
    libc_version: str | None = None

    @property
    def libc_text(self) -> str:
        return f"{self.libc} {self.libc_version}" if self.libc else "none"


@dataclass(frozen=True)
class Origin:
    """Where an installed package came from (PEP 610 direct_url.json, credentials stripped)."""

    kind: str = "index"
    url: str | None = None
    vcs: str | None = None
    commit: str | None = None
    requested_revision: str | None = None
    archive_hash: str | None = None
    subdirectory: str | None = None

    def describe(self) -> str:
        if self.kind == "index":
            return "index"
        if self.kind == "vcs":
            return f"{self.vcs}+{self.url}@{self.commit}"
        if self.kind == "archive" and self.archive_hash:
            return f"{self.url} ({self.archive_hash})"
        return f"{self.kind} {self.url}"


@dataclass(frozen=True)
class PackageRecord:
    name: str  # PEP 503 normalised
    version: str
    origin: Origin = field(default_factory=Origin)
    installer: str | None = None
    requested: bool = False
    used: bool = False
    requires: tuple[str, ...] = ()
    top_level: tuple[str, ...] = ()


@dataclass(frozen=True)
class FileRecord:
    path: str  # project-relative POSIX path
    kind: str  # "file" or "symlink"
    size: int = 0
    sha256: str | None = None
    target: str | None = None  # symlink text


@dataclass(frozen=True)
class OutputRecord:
    path: str
    sha256: str
    size: int
    tolerance: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class AnalysisRecord:
    name: str
    run: str
    seed: int
    outputs: dict[str, OutputRecord] = field(default_factory=dict)
    inputs: tuple[str, ...] = ()


@dataclass(frozen=True)
class HistoryEntry:
    when: str
    who: str
    reason: str
    analyses: tuple[str, ...]
    changes: tuple[tuple[str, str, str], ...] = ()  # (output path, old digest, new digest)


@dataclass(frozen=True)
class Environment:
    """The target interpreter as the probe saw it."""

    interpreter: Interpreter
    platform: PlatformInfo
    packages: dict[str, PackageRecord]
    stdlib: frozenset[str] = frozenset()
    markers: dict[str, str] = field(default_factory=dict)


@dataclass
class Lock:
    interpreter: Interpreter
    platform: PlatformInfo
    packages: dict[str, PackageRecord]
    recorded: str = ""
    holotype: str = ""
    project_seed: int | None = None
    data: dict[str, FileRecord] = field(default_factory=dict)
    code: dict[str, FileRecord] = field(default_factory=dict)
    analyses: dict[str, AnalysisRecord] = field(default_factory=dict)
    history: list[HistoryEntry] = field(default_factory=list)
    format: int = 1
