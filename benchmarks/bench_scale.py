"""Many small data files: cached `check` vs `git status`, first `record --no-run` vs parallel `sha256sum`,
and `check` on ten times as many files (peak memory, and how the time scales).

Run: python benchmarks/bench_scale.py [--files 100000] [--big 1000000] [--skip-big]
Builds the trees under benchmarks/work/scale/ once: FILES files of 1 KiB in folders of 1,000, committed to
git, and BIG files of 64 bytes. Every ratio is against an anchor measured in the same run.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

from _timing import WORK, median_seconds, ratio_line, wall_and_peak

CLI = [sys.executable, "-m", "holotype"]


def make_tree(root: Path, count: int, size: int) -> None:
    """`count` files of `size` bytes in folders of 1,000 under root/data, written once."""
    marker = root / f".made-{count}-{size}"
    if marker.exists():
        return
    shutil.rmtree(root, ignore_errors=True)
    payload = os.urandom(size + 64)
    for i in range(count):
        if i % 1000 == 0:
            sub = root / "data" / f"plate{i // 1000:04d}"
            sub.mkdir(parents=True, exist_ok=True)
        with open(sub / f"well{i % 1000:04d}.dat", "wb") as fh:
            fh.write(payload[i % 64:i % 64 + size - 8] + i.to_bytes(8, "big"))
    (root / "holotype.toml").write_text(f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\n')
    marker.write_text("")


def commit(root: Path) -> bool:
    if shutil.which("git") is None:
        return False
    if not (root / ".git").exists():
        env = {**os.environ, "GIT_AUTHOR_NAME": "bench", "GIT_AUTHOR_EMAIL": "bench@example.org",
               "GIT_COMMITTER_NAME": "bench", "GIT_COMMITTER_EMAIL": "bench@example.org"}
        for argv in (["git", "init", "-q"], ["git", "add", "-A"], ["git", "commit", "-qm", "tree"]):
            subprocess.run(argv, cwd=root, check=True, env=env, stdout=subprocess.DEVNULL)
    return True


def quiet(argv: list[str], cwd: Path | None = None) -> None:
    subprocess.run(argv, cwd=cwd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def parallel_sha256sum(root: Path) -> None:
    find = subprocess.Popen(["find", str(root / "data"), "-type", "f", "-print0"], stdout=subprocess.PIPE)
    subprocess.run(["xargs", "-0", "-P", str(os.cpu_count() or 1), "-n", "2000", "sha256sum"], stdin=find.stdout,
                   check=True, stdout=subprocess.DEVNULL)
    find.wait()


def fresh_record(root: Path, cache: Path, warm: Path | None = None) -> None:
    """A first record: no lock, and no digest of any data file in the cache (with `warm`, the cache holotype
    had after recording a one-file project in the same interpreter: the environment is known)."""
    shutil.rmtree(cache, ignore_errors=True)
    if warm is not None:
        shutil.copytree(warm, cache)
    for name in ("holotype.lock", ".holotype"):
        shutil.rmtree(root / name, ignore_errors=True) if (root / name).is_dir() else (root / name).unlink(
            missing_ok=True)
    quiet([*CLI, "record", "--no-run", "--quiet", "-C", str(root)])


def settle(root: Path) -> None:
    """The digest cache does not trust files changed in the last two seconds: wait them out."""
    newest = max(os.stat(root / "holotype.lock").st_mtime, os.stat(root / "data").st_mtime)
    time.sleep(max(0.0, 2.5 - (time.time() - newest)))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--files", type=int, default=100_000)
    parser.add_argument("--big", type=int, default=1_000_000)
    parser.add_argument("--skip-big", action="store_true")
    args = parser.parse_args()
    os.environ["HOLOTYPE_CACHE_DIR"] = str(WORK / "scale-cache")
    cache = Path(os.environ["HOLOTYPE_CACHE_DIR"])
    root = WORK / "scale" / "tree"
    make_tree(root, args.files, 1024)
    has_git = commit(root)
    quiet(["cat", *[str(p) for p in (root / "data").glob("plate0000/*")]])
    print(f"{args.files:,} files of 1 KiB, {os.cpu_count()} cores")

    sha = median_seconds(lambda: parallel_sha256sum(root), repeat=3)
    warm = WORK / "scale-warm-cache"
    if not warm.exists():
        tiny = WORK / "scale" / "tiny"
        (tiny / "data").mkdir(parents=True, exist_ok=True)
        (tiny / "data" / "one.csv").write_text("x\n1\n")
        (tiny / "holotype.toml").write_text(f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\n')
        fresh_record(tiny, cache)
        shutil.copytree(cache, warm)
    first = median_seconds(lambda: fresh_record(root, cache, warm), repeat=3)
    print(ratio_line(f"first `record --no-run` vs find | xargs -P{os.cpu_count()} sha256sum", first, sha, 2.0))
    cold = median_seconds(lambda: fresh_record(root, cache), repeat=1)
    print(f"  the same with an empty cache (every installed package's files digested too): {cold:.2f}s "
          f"= {cold / sha:.1f}x")
    lock_size = (root / "holotype.lock").stat().st_size
    print(f"holotype.lock: {lock_size / 1024:.1f} KiB")
    settle(root)
    quiet([*CLI, "check", "--quiet", "-C", str(root)])  # fills the cache
    check = median_seconds(lambda: quiet([*CLI, "check", "--quiet", "-C", str(root)]), repeat=5)
    if has_git:
        git = median_seconds(lambda: quiet(["git", "status", "--porcelain"], cwd=root), repeat=5)
        print(ratio_line("cached `check`, nothing changed, vs `git status`", check, git, 3.0))
    else:
        print(f"cached `check`: {check:.3f}s (git not found: no `git status` anchor)")

    small_wall, small_peak = wall_and_peak([*CLI, "check", "--quiet", "-C", str(root)])
    if args.skip_big:
        return
    big = WORK / "scale" / "big"
    make_tree(big, args.big, 64)
    cache = WORK / "scale-cache-big"  # its own cache: the small tree's answers above stay valid
    os.environ["HOLOTYPE_CACHE_DIR"] = str(cache)
    fresh_record(big, cache, warm)
    settle(big)
    quiet([*CLI, "check", "--quiet", "-C", str(big)])
    wall, peak = wall_and_peak([*CLI, "check", "--quiet", "-C", str(big)])
    print(f"cached `check` on {args.big:,} files of 64 bytes: {wall:.2f}s, peak {peak:.0f} MiB "
          f"({args.files:,} files: {small_wall:.2f}s, peak {small_peak:.0f} MiB)")
    per_file = (wall / args.big) / (small_wall / args.files)
    print(f"time per file, {args.big:,} vs {args.files:,}: {per_file:.2f}x (linear is 1.0; target <= 1.2x)")


if __name__ == "__main__":
    main()
