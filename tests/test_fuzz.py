"""Generated inputs for the config loader, the lockfile reader and every comparison parser: only clean errors.

A small number of examples by default; HOLOTYPE_FUZZ_EXAMPLES=5000 for a nightly-sized run.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from holotype.compare.outputs import compare_sources
from holotype.compare.source import Source
from holotype.config import TOP_KEYS, config_from_dict
from holotype.errors import ConfigError, LockfileError, UnreadableOutput
from holotype.lockfile import dump_lock, parse_lock
from holotype.tolerance import RuleBook
from test_lockfile import sample_lock

pytestmark = pytest.mark.fuzz
EXAMPLES = int(os.environ.get("HOLOTYPE_FUZZ_EXAMPLES", "60"))
FUZZ = settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=list(HealthCheck))

toml_scalars = st.one_of(st.integers(), st.floats(), st.booleans(), st.text(max_size=20))
toml_values = st.recursive(toml_scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(st.text(max_size=10), inner, max_size=4)), max_leaves=12)
keys = st.one_of(st.sampled_from(TOP_KEYS), st.text(max_size=12))


@FUZZ
@given(st.dictionaries(keys, toml_values, max_size=8))
def test_config_loader_gives_config_or_clean_error(doc: dict) -> None:
    try:
        config_from_dict(doc, Path("/tmp/project"), Path("/tmp/project/holotype.toml"))
    except ConfigError as exc:
        assert "holotype.toml" in str(exc) and "\n" not in str(exc)


@FUZZ
@given(st.dictionaries(st.sampled_from(("run", "outputs", "inputs", "timeout", "other")), toml_values, max_size=5))
def test_analysis_tables_give_config_or_clean_error(table: dict) -> None:
    try:
        config_from_dict({"analyses": {"a": table}}, Path("/p"), Path("/p/holotype.toml"))
    except ConfigError:
        pass


@FUZZ
@given(st.binary(max_size=400))
def test_config_file_bytes(tmp_path_factory: pytest.TempPathFactory, raw: bytes) -> None:
    from holotype.config import load_config

    folder = tmp_path_factory.mktemp("cfg")
    (folder / "holotype.toml").write_bytes(raw)
    try:
        load_config(folder)
    except ConfigError:
        pass


VALID_LOCK = dump_lock(sample_lock())


@FUZZ
@given(st.text(max_size=600))
def test_lockfile_reader_random_text(text: str) -> None:
    try:
        parse_lock(text, Path("holotype.lock"))
    except LockfileError:
        pass


@FUZZ
@given(st.integers(0, len(VALID_LOCK.splitlines()) - 1), st.sampled_from(["drop", "dup", "garble", "type"]),
       st.text(max_size=8))
def test_lockfile_reader_mutated_lock(line_no: int, how: str, junk: str) -> None:
    lines = VALID_LOCK.splitlines(keepends=True)
    if how == "drop":
        del lines[line_no]
    elif how == "dup":
        lines.insert(line_no, lines[line_no])
    elif how == "garble":
        lines[line_no] = lines[line_no][: len(lines[line_no]) // 2] + junk + "\n"
    else:
        key = lines[line_no].split("=")[0]
        lines[line_no] = f"{key}= {junk!r}\n" if "=" in lines[line_no] else lines[line_no]
    try:
        parse_lock("".join(lines), Path("holotype.lock"))
    except LockfileError:
        pass


def _npy(values: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.save(buf, values)
    return buf.getvalue()


GOOD = {
    "r.csv": b"lake,depth,chl\nA,1.5,2\nB,2.5,nan\n",
    "r.tsv": b"lake\tdepth\nA\t1.5\n",
    "r.json": b'{"t": 2.5, "rows": [{"m": 1.0}, {"m": 2.0}]}',
    "r.npy": _npy(np.arange(6.0).reshape(2, 3)),
    "r.txt": b"t = 2.5, p = 0.01\nok\n",
}


@FUZZ
@given(st.sampled_from(sorted(GOOD)), st.binary(max_size=300))
def test_comparison_parsers_on_random_bytes(name: str, raw: bytes) -> None:
    try:
        compare_sources(name, Source.from_bytes(GOOD[name], name, "good"), Source.from_bytes(raw, name, "fuzzed"),
                        RuleBook())
    except UnreadableOutput as exc:
        assert exc.label in ("good", "fuzzed")


@FUZZ
@given(st.sampled_from(sorted(GOOD)), st.integers(0, 400), st.binary(min_size=1, max_size=8))
def test_comparison_parsers_on_damaged_good_files(name: str, at: int, patch: bytes) -> None:
    good = GOOD[name]
    at = at % len(good)
    damaged = good[:at] + patch + good[at + len(patch):]
    try:
        compare_sources(name, Source.from_bytes(good, name, "good"), Source.from_bytes(damaged, name, "damaged"),
                        RuleBook())
    except UnreadableOutput as exc:
        assert exc.label == "damaged"


@FUZZ
@given(st.lists(st.lists(st.one_of(st.floats(), st.text(alphabet="abc,\"\n 0123456789.-eE", max_size=6)),
                         min_size=2, max_size=2), max_size=6))
def test_csv_tables_from_generated_cells(rows: list[list[object]]) -> None:
    text = "a,b\n" + "".join(",".join(str(c) for c in row) + "\n" for row in rows)
    try:
        compare_sources("t.csv", Source.from_bytes(GOOD["r.csv"], "t.csv", "good"),
                        Source.from_bytes(text.encode(), "t.csv", "gen"), RuleBook())
    except UnreadableOutput as exc:
        assert exc.label == "gen"
