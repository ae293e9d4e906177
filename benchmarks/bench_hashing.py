"""Data fingerprints: the data part of record and of an unchanged check vs `sha256sum` over the same files.

Run: python benchmarks/bench_hashing.py [--small-files N]
Makes 15 files of 100 MiB (1.5 GiB) and N files of 1 KiB under benchmarks/work/hash/ once.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _timing import WORK, median_seconds, ratio_line
from holotype.capture.digest_cache import DigestCache
from holotype.capture.fingerprints import fingerprint_files
from holotype.capture.walk import ProjectWalker

BIG_FILES, BIG_SIZE = 15, 100 * 1024 * 1024


def make_big(folder: Path) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    block = os.urandom(1 << 20)
    for i in range(BIG_FILES):
        path = folder / f"survey-{i:02d}.bin"
        if not path.exists() or path.stat().st_size != BIG_SIZE:
            with open(path, "wb") as fh:
                for j in range(BIG_SIZE >> 20):
                    fh.write(block[j % 7:] + block[: j % 7])
        paths.append(path)
    return paths


def make_small(folder: Path, count: int) -> None:
    marker = folder / f".made-{count}"
    if marker.exists():
        return
    payload = os.urandom(1024)
    for i in range(count):
        sub = folder / f"d{i // 1000:03d}"
        if i % 1000 == 0:
            sub.mkdir(parents=True, exist_ok=True)
        (sub / f"s{i:06d}.dat").write_bytes(payload[i % 64:] + payload[: i % 64])
    marker.write_text("")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--small-files", type=int, default=100_000)
    args = parser.parse_args()
    root = WORK / "hash"
    big = make_big(root / "big")
    subprocess.run(["cat", *map(str, big)], stdout=subprocess.DEVNULL, check=True)  # page-cache them
    files, _ = ProjectWalker(root).collect(("big",))
    print(f"{len(files)} files, {sum(f.size for f in files.values()) / 2**30:.2f} GiB, {os.cpu_count()} cores")

    sha = median_seconds(lambda: subprocess.run(["sha256sum", *map(str, big)], stdout=subprocess.DEVNULL,
                                                check=True), repeat=3)
    first = median_seconds(lambda: fingerprint_files(files, cache=None), repeat=3)
    print(ratio_line("record, data part (no cache) vs sha256sum", first, sha, 0.35))
    if time.time() - max(p.stat().st_ctime for p in big) < 2.5:
        time.sleep(2.5)  # the cache does not trust files changed in the last two seconds
    with tempfile.TemporaryDirectory() as tmp:
        cache = DigestCache(Path(tmp) / "c.sqlite3")
        fingerprint_files(files, cache=cache)
        unchanged = median_seconds(lambda: fingerprint_files(ProjectWalker(root).collect(("big",))[0], cache=cache))
        print(ratio_line("unchanged check, data part (cached) vs sha256sum", unchanged, sha, 0.02))
        cache.close()
    # the whole command, start-up and interpreter probe included
    (root / "holotype.toml").write_text(f'python = "{sys.executable}"\ndata = ["big"]\ncode = []\nseed = 1\n')
    cli = [sys.executable, "-m", "holotype"]
    subprocess.run([*cli, "record", "--no-run", "-C", str(root), "--quiet"], check=True)
    whole = median_seconds(lambda: subprocess.run([*cli, "check", "-C", str(root), "--quiet"], check=True))
    print(ratio_line("whole `holotype check` command (cached) vs sha256sum", whole, sha, 0.02))

    small_root = root / "small"
    make_small(small_root, args.small_files)
    with tempfile.TemporaryDirectory() as tmp:
        cache = DigestCache(Path(tmp) / "c.sqlite3")
        start = time.perf_counter()
        small, _ = ProjectWalker(root).collect(("small",))
        result = fingerprint_files(small, cache=cache)
        first_s = time.perf_counter() - start
        start = time.perf_counter()
        small, _ = ProjectWalker(root).collect(("small",))
        again = fingerprint_files(small, cache=cache)
        cached_s = time.perf_counter() - start
        cache.close()
    n = len(small)
    print(f"{n:,} files of 1 KiB: first record {n / first_s:,.0f} files/s ({first_s:.2f}s, "
          f"{result.files_hashed:,} hashed); cached check {n / cached_s:,.0f} files/s ({cached_s:.2f}s, "
          f"{again.cache_hits:,} from the cache)")


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    main()
