"""The lockfile format: round trip, stable bytes, refusals, atomic replacement."""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

import pytest

from holotype.atomic import TEMP_PREFIX, write_atomic
from holotype.errors import LockfileError
from holotype.lockfile import dump_lock, read_lock, write_lock
from holotype.records import (
    AnalysisRecord,
    FileRecord,
    HistoryEntry,
    Interpreter,
    LockContents,
    Origin,
    OutputRecord,
    PackageRecord,
    PlatformInfo,
)


def sample_lock() -> LockContents:
    return LockContents(
        interpreter=Interpreter("cpython", "3.11.7", "GCC 12.2.0", "cpython-311-x86_64-linux-gnu", ".venv/bin/python"),
        platform=PlatformInfo("Linux", "6.1.0", "x86_64", "glibc", "2.36"),
        packages={
            "zeta": PackageRecord("zeta", "1.0", used=False),
            "alpha": PackageRecord("alpha", "2.0.1", Origin("vcs", url="https://example.org/a.git", vcs="git",
                                                               commit="c" * 40), "pip", True, True,
                                   ("beta>=1",), ("alpha",)),
        },
        recorded="2026-12-01T10:00:00Z",
        holotype="0.1.0",
        project_seed=20261201,
        data={"data/b.csv": FileRecord("data/b.csv", "file", 10, "b" * 64),
              "data/a b é.csv": FileRecord("data/a b é.csv", "file", 0, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"),
              "data/link": FileRecord("data/link", "symlink", target="b.csv")},
        code={"analysis/x.py": FileRecord("analysis/x.py", "file", 3, "d" * 64)},
        analyses={"summary": AnalysisRecord("summary", "python analysis/x.py", 1234,
                                            {"results/s.csv": OutputRecord("results/s.csv", "f" * 64, 99,
                                                                           {"rtol": 1e-9})}, ("data/b.csv",))},
        history=[HistoryEntry("2026-12-01T11:00:00Z", "someone", "new data", ("summary",),
                              (("results/s.csv", "0" * 64, "f" * 64),))],
    )


def test_round_trip(tmp_path: Path) -> None:
    path = tmp_path / "holotype.lock"
    write_lock(path, sample_lock())
    assert read_lock(path) == sample_lock()


def test_same_input_same_bytes_and_sorted_tables() -> None:
    text = dump_lock(sample_lock())
    assert text == dump_lock(sample_lock())
    assert text.index("[packages.alpha]") < text.index("[packages.zeta]")
    assert text.index('"data/a b é.csv"') < text.index('"data/b.csv"')
    # parses as plain TOML (the TOML 1.0 spec's reader in the standard library)
    assert tomllib.loads(text)["format"] == 2


def test_refuses_newer_format(tmp_path: Path) -> None:
    path = tmp_path / "holotype.lock"
    path.write_text(dump_lock(sample_lock()).replace("format = 2", "format = 3"))
    with pytest.raises(LockfileError, match="newer holotype .format 3."):
        read_lock(path)


def test_refuses_truncated_lock(tmp_path: Path) -> None:
    path = tmp_path / "holotype.lock"
    text = dump_lock(sample_lock())
    cut = text[: text.index("[packages.zeta]")]  # still valid TOML, but cut short
    path.write_text(cut)
    with pytest.raises(LockfileError, match="truncated"):
        read_lock(path)


def test_wrong_type_names_the_key(tmp_path: Path) -> None:
    path = tmp_path / "holotype.lock"
    path.write_text(dump_lock(sample_lock()).replace('version = "2.0.1"', "version = 2"))
    with pytest.raises(LockfileError, match=r"packages\.alpha\.version"):
        read_lock(path)


def test_toml_syntax_error_gives_line_and_column(tmp_path: Path) -> None:
    path = tmp_path / "holotype.lock"
    path.write_text("format = 1\n[interpreter\n")
    with pytest.raises(LockfileError, match=r"line 2, column"):
        read_lock(path)


def test_atomic_replacement_keeps_old_file_on_failure(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "holotype.lock"
    write_lock(path, sample_lock())
    before = path.read_bytes()

    def broken_replace(src: str, dst: str) -> None:
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", broken_replace)
    with pytest.raises(OSError):
        write_atomic(path, "half")
    assert path.read_bytes() == before
    assert not list(tmp_path.glob(TEMP_PREFIX + "*"))


def test_atomic_write_preserves_mode(tmp_path: Path) -> None:
    path = tmp_path / "f.txt"
    path.write_text("x")
    path.chmod(0o640)
    write_atomic(path, "y")
    assert path.read_text() == "y" and (path.stat().st_mode & 0o777) == 0o640


def test_new_files_take_the_umask_without_writes_setting_it(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # reading the umask means setting it (os.umask), which would race with threads creating files (the
    # store writes its objects from several): it is read once, at import, never while writing
    import os
    import stat
    from concurrent.futures import ThreadPoolExecutor

    from holotype import atomic

    def no_umask(mask: int) -> int:
        raise AssertionError("os.umask was called while writing")

    monkeypatch.setattr(os, "umask", no_umask)
    paths = [tmp_path / f"object-{i}" for i in range(16)]
    with ThreadPoolExecutor(max_workers=4) as pool:
        list(pool.map(lambda p: write_atomic(p, "x"), paths))
    assert {stat.S_IMODE(p.stat().st_mode) for p in paths} == {0o666 & ~atomic.UMASK}
