"""Plain data that flows between capture, compare and the lockfile: what an analysis ran on.

Each record type is also the declaration of its lockfile table: `schema.py` reads and writes
them field by field, so adding a key to the lockfile is adding a field here (with its
`entry(...)` metadata where the TOML key or its rules differ from the plain field).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, NamedTuple

from holotype.schema import entry

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
    release: str = entry(read_default="")
    machine: str = entry()
    libc: str | None = None
    libc_version: str | None = None

    @property
    def libc_text(self) -> str:
        return f"{self.libc} {self.libc_version}" if self.libc else "none"


@dataclass(frozen=True)
class Origin:
    """Where an installed package came from (PEP 610 direct_url.json, credentials stripped)."""

    kind: str = entry(default="index", choices=ORIGIN_KINDS)
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
    name: str = entry(from_key=True)  # PEP 503 normalised
    version: str = entry()
    origin: Origin = entry(default_factory=Origin, key="source")
    installer: str | None = None
    requested: bool = False
    used: bool = False
    requires: tuple[str, ...] = ()
    top_level: tuple[str, ...] = entry(default=(), key="imports")
    # the wheel it was installed from, as its WHEEL file says: compatibility tags and build tag
    wheel_tags: tuple[str, ...] = ()
    build: str | None = None
    # the installed files' contents (capture/installed.py): one digest over the files RECORD lists
    files: str | None = entry(default=None, digest=True)
    edited: tuple[str, ...] = ()  # files that already differed from RECORD when recorded
    tree: dict[str, FileRecord] = entry(default_factory=dict)  # an editable or local install's source folder
    tree_note: str | None = None  # why that folder was not digested


def _file_kind(table: dict[str, Any]) -> str:
    return "symlink" if "symlink" in table else "file"


@dataclass(frozen=True)
class FileRecord:
    path: str = entry(from_key=True)  # project-relative POSIX path
    kind: str = entry(derive=_file_kind)  # "file" or "symlink"
    size: int = entry(default=0, omit_default=True)
    sha256: str | None = entry(default=None, digest=True)
    target: str | None = entry(default=None, key="symlink")  # symlink text


@dataclass(frozen=True)
class FolderRecord:
    """A data folder recorded as one entry (manifests.py): its files are listed in a store object."""

    path: str = entry(default="", from_key=True)  # project-relative POSIX path of the folder
    files: int = entry(default=0)
    bytes: int = entry(default=0)
    listing: str = entry(default="", digest=True)  # SHA-256 of the listing object (and its name in the store)


@dataclass(frozen=True)
class RuleRecord:
    """One [[rules]] entry as it decided verdicts: its match and the keys it set."""

    match: str
    settings: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class JudgementRecord:
    """Everything that decides a verdict besides the outputs themselves, as recorded."""

    tolerance: dict[str, Any] = field(default_factory=dict)  # the project default, keys as in [tolerance]
    rules: tuple[RuleRecord, ...] = ()
    threads: int | None = None
    seed_globals: bool = False
    policy: dict[str, str] = field(default_factory=dict)  # the [policy] overrides


@dataclass(frozen=True)
class OutputRecord:
    path: str = entry(from_key=True)
    sha256: str = entry(digest=True)
    size: int = entry()
    tolerance: dict[str, Any] = field(default_factory=dict)


def inputs_digest(data: dict[str, FileRecord], inputs: tuple[str, ...],
                  folders: dict[str, FolderRecord] | None = None) -> str:
    """SHA-256 over the sorted (path, digest) of an analysis' inputs: its declared inputs, else all data.

    A data folder recorded as one entry counts as (folder + "/", its listing digest), also when a declared
    input lies inside it: any change in that folder then counts as a change of the input."""
    import hashlib

    chosen = [(p, r.sha256 or f"link:{r.target}") for p, r in data.items() if not inputs or p in inputs]
    for folder, rec in (folders or {}).items():
        if not inputs or any(i.startswith(folder + "/") for i in inputs):
            chosen.append((folder + "/", f"listing:{rec.listing}"))
    chosen.sort()
    return hashlib.sha256("\n".join(f"{p}\t{d}" for p, d in chosen).encode("utf-8", "surrogateescape")).hexdigest()


@dataclass(frozen=True)
class AnalysisRecord:
    name: str = entry(from_key=True)
    command: str = entry()
    seed: int = entry()
    outputs: dict[str, OutputRecord] = field(default_factory=dict)
    inputs: tuple[str, ...] = ()
    modules: tuple[str, ...] = ()  # top-level modules the analysis process imported, standard library aside
    libraries: tuple[str, ...] = ()  # NativeLibrary keys of the libraries loaded in that process
    observed: bool = False  # the run-time hook reported both (else they are unknown, not empty)
    timeout: float | None = None
    made_from: str | None = entry(default=None, digest=True)  # digest of its inputs' digests when baselines were made


class Change(NamedTuple):
    """One output's baseline replaced: (output path, old digest, new digest)."""

    output: str
    old: str
    new: str


@dataclass(frozen=True)
class HistoryEntry:
    when: str
    who: str
    reason: str
    analyses: tuple[str, ...] = ()
    changes: tuple[Change, ...] = ()


@dataclass(frozen=True)
class NativeLibrary:
    """A BLAS, LAPACK or OpenMP library loaded in the analysis interpreter (threadpoolctl's view)."""

    user_api: str  # blas, openmp
    internal_api: str  # openblas, mkl, blis, flexiblas, openmp, …
    file: str  # the library's file name (never a path: that would name this machine)
    bundled_by: str | None = None  # the package whose folder ships it (numpy, scipy), when it can tell
    version: str | None = None
    threading_layer: str | None = None
    num_threads: int | None = None
    architecture: str | None = None  # the CPU kernel it picked at run time (OpenBLAS, BLIS)

    @property
    def key(self) -> str:
        """Stable across runs: which library, shipped by whom."""
        return f"{self.internal_api} ({self.bundled_by or self.file})"


@dataclass(frozen=True)
class NumericStack:
    """The numeric layer a package list does not show: native libraries, kernels, CPU, variables."""

    imported: tuple[str, ...] = ()  # the packages imported to inspect it
    libraries: tuple[NativeLibrary, ...] = ()
    inspection: str = "threadpoolctl"  # or "numpy build information" when threadpoolctl could not run
    numpy_version: str | None = None
    numpy_blas: str | None = None  # the BLAS NumPy was built against, e.g. "scipy-openblas 0.3.31"
    numpy_lapack: str | None = None
    numpy_cpu_baseline: tuple[str, ...] = ()
    numpy_cpu_dispatch: tuple[str, ...] = ()
    numpy_cpu_features: tuple[str, ...] = ()  # the SIMD extensions NumPy detected on this CPU
    cpu_vendor: str = ""
    cpu_model: str = ""
    cpu_flags: tuple[str, ...] = ()  # of those that change floating-point results (FMA, AVX*, NEON, SVE)
    logical_cpus: int = 0
    variables: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class Environment:
    """The target interpreter as the probe saw it."""

    interpreter: Interpreter
    platform: PlatformInfo
    packages: dict[str, PackageRecord]
    stdlib: frozenset[str] = frozenset()
    markers: dict[str, str] = field(default_factory=dict)
    locations: dict[str, str] = field(default_factory=dict)  # package -> its .dist-info folder (never recorded)
    sources: dict[str, str] = field(default_factory=dict)  # package -> the raw URL of a local install's folder


@dataclass
class LockContents:
    """Everything holotype.lock holds (the format is `lockfile.py`; the keys are these fields)."""

    interpreter: Interpreter = entry(order=4)
    platform: PlatformInfo = entry(order=5)
    packages: dict[str, PackageRecord] = entry(order=6)
    recorded: str = entry(default="", order=2)
    holotype: str = entry(default="", order=1)
    project_seed: int | None = entry(default=None, order=3)
    # SOURCE_DATE_EPOCH the analyses ran with (seconds since 1970): replay gives them the same
    source_date_epoch: int | None = entry(default=None, order=3.2)
    data: dict[str, FileRecord] = entry(default_factory=dict, order=7)
    # folders of at least manifests.FOLDER_THRESHOLD files: one entry each, their files listed in the store
    data_folders: dict[str, FolderRecord] = entry(default_factory=dict, order=7.5)
    code: dict[str, FileRecord] = entry(default_factory=dict, order=8)
    analyses: dict[str, AnalysisRecord] = entry(default_factory=dict, order=9)
    history: list[HistoryEntry] = entry(default_factory=list, order=10)
    numerics: NumericStack | None = entry(default=None, order=5.5)
    judgement: JudgementRecord | None = entry(default=None, order=3.5)
    requested_from: str = entry(default="installer", order=5.2)  # or "declared dependencies and imports"
    # said once to the user when this was read from an older format; never written
    notices: tuple[str, ...] = entry(default=(), skip=True)


@dataclass(frozen=True)
class ProducedOutput:
    """An output file as a run left it, digested right after that run ended."""

    path: str
    sha256: str
    size: int
    data: bytes = field(repr=False, default=b"")


@dataclass
class RunResult:
    """What one run of one analysis did: exit status, duration, log, and the outputs it produced."""

    name: str
    command: str
    seed: int
    log: Path
    timeout: float | None = None
    returncode: int | None = None
    seconds: float = 0.0
    timed_out: bool = False
    tail: list[str] = field(default_factory=list)
    outputs: dict[str, ProducedOutput] = field(default_factory=dict)
    missing: list[str] = field(default_factory=list)
    error: str | None = None
    wrote_others: list[tuple[str, str]] = field(default_factory=list)  # (output, the analysis that declares it)
    left_children: bool = False  # processes of its group were still running after it exited (then stopped)
    refused: dict[str, str] = field(default_factory=dict)  # outputs that are links, pipes or devices: why
    log_problem: str | None = None  # the log could not be written (the run went on)
    modules: tuple[str, ...] | None = None  # top-level modules the process imported (None: the hook said nothing)
    libraries: tuple[dict[str, Any], ...] | None = None  # threadpoolctl's view of its native libraries

    @property
    def ok(self) -> bool:
        return (self.error is None and self.returncode == 0 and not self.timed_out and not self.missing
                and not self.refused)

    def failure_text(self) -> str:
        if self.error:
            return self.error
        tail = " | ".join(line.strip() for line in self.tail[-3:] if line.strip())
        if self.timed_out:
            return f"timed out after {self.timeout or 0:g}s" + (f"; last output: {tail}" if tail else "")
        if self.returncode != 0:
            return f"exited with code {self.returncode}" + (f": {tail}" if tail else "")
        if self.refused:
            return "; ".join(f"{out}: {why}" for out, why in sorted(self.refused.items()))
        return "did not write " + ", ".join(self.missing)


def stored_objects(lock: LockContents) -> set[str]:
    """The store objects `lock` refers to: its output baselines and its data folders' listings."""
    return ({o.sha256 for rec in lock.analyses.values() for o in rec.outputs.values()}
            | {f.listing for f in lock.data_folders.values()})


def data_file_count(lock: LockContents) -> int:
    """How many data files `lock` records, those inside folder entries included."""
    return len(lock.data) + sum(f.files for f in lock.data_folders.values())
