"""`holotype compare` on every format and rule key, driven the way a user would."""

from __future__ import annotations

import io
import json
import math
from pathlib import Path

import numpy as np
import pytest

from conftest import run_cli, write


def compare(*args: object) -> tuple[int, dict, str]:
    result = run_cli("compare", *args, "--format", "json")
    doc = json.loads(result.out) if result.code in (0, 1) else {}
    return result.code, doc, result.err


def output_findings(doc: dict) -> list[dict]:
    return [f for f in doc["findings"] if f["kind"] in ("output.match", "output.mismatch")]


def csv_text(rows: list[list[object]], header: list[str], sep: str = ",") -> str:
    return sep.join(header) + "\n" + "\n".join(sep.join(repr(v) if isinstance(v, float) else str(v) for v in r)
                                            for r in rows) + "\n"


# ----------------------------------------------------------------------------- CSV / TSV


def test_identical_bytes_short_circuit(tmp_path: Path) -> None:
    a = write(tmp_path / "a.csv", "x\n1\n")
    b = write(tmp_path / "b.csv", "x\n1\n")
    code, doc, _ = compare(a, b)
    assert code == 0 and output_findings(doc)[0]["message"] == "identical bytes"


def test_within_and_outside_tolerance_with_figures(tmp_path: Path) -> None:
    rows = [[i, float(i) * 1.5, f"s{i}"] for i in range(1, 101)]
    a = write(tmp_path / "a.csv", csv_text(rows, ["id", "value", "site"]))
    close = [[i, v * (1 + 1e-12), s] for i, v, s in rows]
    b = write(tmp_path / "b.csv", csv_text(close, ["id", "value", "site"]))
    code, doc, _ = compare(a, b)
    assert code == 0
    [f] = output_findings(doc)
    assert f["compared"] == 300 and f["mismatches"] == 0 and f["max_rel_err"] < 1e-11

    far = [list(r) for r in rows]
    far[41][1] = far[41][1] * (1 + 1e-4)
    c = write(tmp_path / "c.csv", csv_text(far, ["id", "value", "site"]))
    code, doc, _ = compare(a, c)
    assert code == 1
    [f] = output_findings(doc)
    assert f["severity"] == "fail" and f["mismatches"] == 1
    assert f["worst"] == "row 42, column value"
    assert math.isclose(f["max_rel_err"], 1e-4, rel_tol=1e-6)
    assert math.isclose(f["max_abs_err"], 63.0 * 1e-4, rel_tol=1e-6)
    assert "1e-5" in f["error_decades"] and f["error_decades"]["exact"] == 299
    assert doc["ok"] is False


def test_text_cells_nan_inf_and_missing(tmp_path: Path) -> None:
    a = write(tmp_path / "a.csv", "k,v\nx,nan\ny,inf\nz,\nw,NA\nq,1_000.5\n")
    b = write(tmp_path / "b.csv", "k,v\nx,NaN\ny,inf\nz,NA\nw,\nq,1000.5\n")
    assert compare(a, b)[0] == 0
    for bad in ("k,v\nx,nan\ny,-inf\nz,\nw,NA\nq,1000.5\n",   # infinity changed sign
                "k,v\nx,0\ny,inf\nz,\nw,NA\nq,1000.5\n",       # NaN became a number
                "k,v\nx,nan\ny,inf\nz,0\nw,NA\nq,1000.5\n",    # missing became a number
                "k,v\nX,nan\ny,inf\nz,\nw,NA\nq,1000.5\n"):    # a text cell changed
        assert compare(a, write(tmp_path / "bad.csv", bad))[0] == 1


def test_shape_findings(tmp_path: Path) -> None:
    a = write(tmp_path / "a.csv", "x,y,z\n1,2,3\n4,5,6\n")
    code, doc, _ = compare(a, write(tmp_path / "b.csv", "x,y\n1,2\n4,5\n"))
    assert code == 1 and any("column(s) missing: z" in f["message"] for f in doc["findings"])
    code, doc, _ = compare(a, write(tmp_path / "c.csv", "z,y,x\n3,2,1\n6,5,4\n"))
    assert code == 0 and any(f["kind"] == "output.layout" and "order" in f["message"] for f in doc["findings"])
    code, doc, _ = compare(a, write(tmp_path / "d.csv", "x,y,z\n1,2,3\n"))
    assert code == 1 and any("2 rows recorded, 1 found" in f["message"] for f in doc["findings"])


def test_tsv_quoted_fields_and_bom(tmp_path: Path) -> None:
    a = write(tmp_path / "a.tsv", "name\tvalue\n\"Lake, north\"\t1.5\n")
    b = tmp_path / "b.tsv"
    b.write_bytes("\ufeffname\tvalue\n\"Lake, north\"\t1.5000000000001\n".encode())
    assert compare(a, b, "--rtol", "1e-9")[0] == 0
    c = write(tmp_path / "c.csv", 'name;value\n"a;b";1\n')
    d = write(tmp_path / "d.csv", 'name;value\n"a;b";2\n')
    code, doc, _ = compare(c, d)
    assert code == 1 and output_findings(doc)[0]["worst"] == "row 1, column value"


def test_csv_parser_is_correctly_rounded() -> None:
    # Python's float() is correctly rounded (IEEE 754 round-to-nearest); the table reader must agree bit for bit.
    from holotype.compare.formats.table import _chunks
    from holotype.compare.source import Source

    rng = np.random.default_rng(11)
    x = rng.standard_normal(20_000) * 10.0 ** rng.integers(-300, 300, 20_000)
    text = "v\n" + "\n".join(f"{v:.17g}" for v in x) + "\n"
    chunk = next(_chunks(Source.from_bytes(text.encode(), "t.csv", "t.csv"), ",", '"'))
    parsed = chunk["v"].to_numpy()
    assert np.array_equal(parsed, np.array([float(f"{v:.17g}") for v in x]))


# ----------------------------------------------------------------------------- rule keys


def test_sign_free_column_flip_passes_only_as_a_whole(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    m = rng.standard_normal((50, 3))
    a = write(tmp_path / "a.csv", csv_text(m.tolist(), ["PC1", "PC2", "PC3"]))
    flipped = m.copy()
    flipped[:, 1] *= -1
    b = write(tmp_path / "b.csv", csv_text(flipped.tolist(), ["PC1", "PC2", "PC3"]))
    assert compare(a, b)[0] == 1
    code, doc, _ = compare(a, b, "--sign-free", "PC*")
    assert code == 0 and "sign flipped as a whole in PC2" in output_findings(doc)[0]["message"]
    one = m.copy()
    one[7, 2] *= -1  # a single value flipped is a real change
    c = write(tmp_path / "c.csv", csv_text(one.tolist(), ["PC1", "PC2", "PC3"]))
    code, doc, _ = compare(a, c, "--sign-free", "PC*")
    assert code == 1 and output_findings(doc)[0]["worst"] == "row 8, column PC3"


def test_keyed_rows_survive_shuffles_and_report_missing_extra_duplicates(tmp_path: Path) -> None:
    rows = [[f"lake{i}", i, i * 0.25] for i in range(20)]
    a = write(tmp_path / "a.csv", csv_text(rows, ["lake", "n", "mean"]))
    shuffled = [rows[i] for i in np.random.default_rng(1).permutation(20)]
    b = write(tmp_path / "b.csv", csv_text(shuffled, ["lake", "n", "mean"]))
    assert compare(a, b)[0] == 1  # by position the rows differ
    assert compare(a, b, "--key", "lake")[0] == 0
    changed = shuffled[:-1] + [["lake99", 1, 1.0], shuffled[0]]
    c = write(tmp_path / "c.csv", csv_text(changed, ["lake", "n", "mean"]))
    code, doc, _ = compare(a, c, "--key", "lake")
    messages = " | ".join(f["message"] for f in doc["findings"])
    assert code == 1
    assert f"1 row(s) missing: {shuffled[-1][0]}" in messages and "1 extra row(s): lake99" in messages
    assert "duplicate key(s) in the found table" in messages


def test_ignore_and_digits_and_ulps_flags(tmp_path: Path) -> None:
    a = write(tmp_path / "a.csv", "when,v\n2026-01-01,1.0\n")
    b = write(tmp_path / "b.csv", f"when,v\n2026-06-30,{math.nextafter(math.nextafter(1.0, 2), 2)!r}\n")
    assert compare(a, b)[0] == 1
    assert compare(a, b, "--ignore", "when")[0] == 0
    assert compare(a, b, "--ignore", "when", "--ulps", "2")[0] == 0
    assert compare(a, b, "--ignore", "when", "--ulps", "1")[0] == 1
    assert compare(a, b, "--ignore", "when", "--digits", "15")[0] == 0


def test_bad_flag_values_are_exit_2(tmp_path: Path) -> None:
    a = write(tmp_path / "a.csv", "v\n1\n")
    result = run_cli("compare", a, a, "--rtol", "-1")
    assert result.code == 2 and "rtol" in result.err


# ----------------------------------------------------------------------------- JSON


def test_json_paths_and_types(tmp_path: Path) -> None:
    doc = {"tests": {"welch": {"t": 2.5, "p_value": 0.0123, "df": 41.2}},
           "rows": [{"lake": "A", "mean": 1.0}, {"lake": "B", "mean": 2.0}, {"lake": "C", "mean": 3.0},
                    {"lake": "D", "mean": 4.0}],
           "flag": True, "note": None}
    a = write(tmp_path / "a.json", json.dumps(doc))
    doc2 = json.loads(json.dumps(doc))
    doc2["tests"]["welch"]["p_value"] = 0.0124
    doc2["rows"][3]["mean"] = 4.0 + 1e-13
    b = write(tmp_path / "b.json", json.dumps(doc2))
    code, out, _ = compare(a, b)
    [f] = output_findings(out)
    assert code == 1 and f["worst"] == "tests.welch.p_value" and f["mismatches"] == 1
    doc3 = json.loads(json.dumps(doc))
    doc3["flag"] = 1  # a boolean became a number
    del doc3["note"]
    code, out, _ = compare(a, write(tmp_path / "c.json", json.dumps(doc3)))
    messages = " | ".join(f["message"] for f in out["findings"])
    assert code == 1 and "value(s) missing: note" in messages and "flag" in messages


def test_json_matrix_columns_are_sign_free_units(tmp_path: Path) -> None:
    a = write(tmp_path / "a.json", json.dumps({"loadings": [[0.5, 0.7], [0.3, -0.2], [0.1, 0.9]]}))
    b = write(tmp_path / "b.json", json.dumps({"loadings": [[0.5, -0.7], [0.3, 0.2], [0.1, -0.9]]}))
    assert compare(a, b)[0] == 1
    assert compare(a, b, "--sign-free", "loadings*")[0] == 0
    c = write(tmp_path / "c.json", json.dumps({"loadings": [[0.5, -0.7], [0.3, -0.2], [0.1, -0.9]]}))
    assert compare(a, c, "--sign-free", "loadings*")[0] == 1


@pytest.mark.parametrize(("text", "words"), [
    ('{"a": 1, "a": 2}', "duplicate key 'a'"),
    ('{"a": [1, 2}', "invalid JSON"),
    ("", "invalid JSON"),
])
def test_malformed_json_is_exit_2_naming_the_file(tmp_path: Path, text: str, words: str) -> None:
    good = write(tmp_path / "good.json", '{"a": 1}')
    bad = tmp_path / "bad.json"
    bad.write_text(text)
    result = run_cli("compare", good, bad)
    assert result.code == 2 and "bad.json" in result.err and words in result.err and "Traceback" not in result.err


# ----------------------------------------------------------------------------- NumPy


def test_npy_shape_dtype_and_values(tmp_path: Path) -> None:
    np.save(tmp_path / "a.npy", np.arange(6, dtype=np.float64).reshape(2, 3))
    np.save(tmp_path / "b.npy", np.arange(6, dtype=np.float64).reshape(3, 2))
    code, doc, _ = compare(tmp_path / "a.npy", tmp_path / "b.npy")
    assert code == 1 and "shape (2, 3) recorded, (3, 2) found" in doc["findings"][0]["message"]
    np.save(tmp_path / "c.npy", np.array(["x", "y"]))
    np.save(tmp_path / "d.npy", np.array([1.0, 2.0]))
    assert "dtype" in compare(tmp_path / "c.npy", tmp_path / "d.npy")[1]["findings"][0]["message"]
    e = np.arange(6, dtype=np.float64).reshape(2, 3)
    e2 = e.copy()
    e2[1, 2] += 1e-3
    np.save(tmp_path / "e.npy", e2)
    code, doc, _ = compare(tmp_path / "a.npy", tmp_path / "e.npy")
    assert code == 1 and output_findings(doc)[0]["worst"] == "index (1, 2)"


def test_npy_sign_free_last_axis_slices(tmp_path: Path) -> None:
    m = np.random.default_rng(2).standard_normal((10, 3))
    flipped = m.copy()
    flipped[:, 0] *= -1
    np.save(tmp_path / "a.npy", m)
    np.save(tmp_path / "b.npy", flipped)
    assert compare(tmp_path / "a.npy", tmp_path / "b.npy")[0] == 1
    assert compare(tmp_path / "a.npy", tmp_path / "b.npy", "--sign-free", "*")[0] == 0
    one = m.copy()
    one[4, 1] *= -1
    np.save(tmp_path / "c.npy", one)
    assert compare(tmp_path / "a.npy", tmp_path / "c.npy", "--sign-free", "*")[0] == 1


def test_npz_members(tmp_path: Path) -> None:
    np.savez(tmp_path / "a.npz", scores=np.ones(3), loadings=np.eye(2))
    np.savez(tmp_path / "b.npz", scores=np.ones(3), loadings=np.eye(2) * 2)
    code, doc, _ = compare(tmp_path / "a.npz", tmp_path / "b.npz")
    assert code == 1 and "loadings" in output_findings(doc)[0]["worst"]


def test_truncated_and_object_npy_are_refused_without_unpickling(tmp_path: Path) -> None:
    np.save(tmp_path / "good.npy", np.arange(100.0))
    raw = (tmp_path / "good.npy").read_bytes()
    (tmp_path / "cut.npy").write_bytes(raw[: len(raw) // 2])
    result = run_cli("compare", tmp_path / "good.npy", tmp_path / "cut.npy")
    assert result.code == 2 and "cut.npy" in result.err
    buf = io.BytesIO()
    np.save(buf, np.array([{"evil": 1}], dtype=object), allow_pickle=True)
    (tmp_path / "obj.npy").write_bytes(buf.getvalue())
    result = run_cli("compare", tmp_path / "good.npy", tmp_path / "obj.npy")
    assert result.code == 2 and "never unpickles" in result.err


# ----------------------------------------------------------------------------- text, bytes, folders


def test_plain_text_numbers_compared_numerically(tmp_path: Path) -> None:
    a = write(tmp_path / "a.txt", "Welch t = 2.5001, df = 41.2, p = 0.0123\nmodel converged\n")
    b = write(tmp_path / "b.txt", "Welch t = 2.5, df = 41.2, p = 0.0123\nmodel converged\n")
    assert compare(a, b)[0] == 1
    assert compare(a, b, "--rtol", "1e-3")[0] == 0
    c = write(tmp_path / "c.txt", "Welch t = 2.5, df = 41.2, p = 0.0123\nmodel diverged\n")
    code, doc, _ = compare(a, c, "--rtol", "1e-3")
    assert code == 1 and output_findings(doc)[0]["worst"] == "line 2"


def test_unknown_format_is_compared_by_bytes(tmp_path: Path) -> None:
    # (PNG was the unknown format here until images got a reader; a binary file of an unknown suffix now)
    (tmp_path / "a.sav").write_bytes(b"\x89SAV\x001")
    (tmp_path / "b.sav").write_bytes(b"\x89SAV\x002")
    code, doc, _ = compare(tmp_path / "a.sav", tmp_path / "b.sav")
    assert code == 1 and "SHA-256" in doc["findings"][0]["message"]


def test_folders_pair_by_relative_path(tmp_path: Path) -> None:
    write(tmp_path / "old" / "t" / "x.csv", "v\n1\n")
    write(tmp_path / "old" / "gone.csv", "v\n1\n")
    write(tmp_path / "new" / "t" / "x.csv", "v\n1\n")
    write(tmp_path / "new" / "added.csv", "v\n1\n")
    code, doc, _ = compare(tmp_path / "old", tmp_path / "new")
    kinds = {f["subject"]: f["kind"] for f in doc["findings"]}
    assert code == 1 and kinds == {"t/x.csv": "output.match", "gone.csv": "output.missing",
                                   "added.csv": "output.extra"}


def test_missing_argument_file_is_exit_2(tmp_path: Path) -> None:
    result = run_cli("compare", tmp_path / "nope.csv", tmp_path / "nope2.csv")
    assert result.code == 2 and "nope.csv" in result.err


def test_ragged_csv_is_exit_2(tmp_path: Path) -> None:
    a = write(tmp_path / "a.csv", "x,y\n1,2\n3,4\n")
    b = write(tmp_path / "b.csv", "x,y\n1,2\n3,4,5\n")
    result = run_cli("compare", a, b)
    assert result.code == 2 and "b.csv" in result.err and "Traceback" not in result.err


def test_parquet_tables(tmp_path: Path) -> None:
    pa = pytest.importorskip("pyarrow")  # the optional extra holotype[parquet]; the test extra installs it
    import pyarrow.parquet as pq

    table = pa.table({"lake": ["A", "B", "C"], "depth": [1.5, 2.5, 4.0]})
    pq.write_table(table, tmp_path / "a.parquet")
    pq.write_table(pa.table({"lake": ["A", "B", "C"], "depth": [1.5, 2.5 * (1 + 1e-12), 4.1]}), tmp_path / "b.parquet")
    code, doc, _ = compare(tmp_path / "a.parquet", tmp_path / "b.parquet")
    [f] = output_findings(doc)
    assert code == 1 and f["worst"] == "row 3, column depth" and f["mismatches"] == 1
    (tmp_path / "bad.parquet").write_bytes(b"PAR1 not really")
    result = run_cli("compare", tmp_path / "a.parquet", tmp_path / "bad.parquet")
    assert result.code == 2 and "bad.parquet" in result.err


def test_terminal_breakdown_names_the_columns_that_moved(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("COLUMNS", "200")
    a = write(tmp_path / "a.csv", "site,mean,sd\nA,1.5,0.25\nB,2.5,0.5\n")
    b = write(tmp_path / "b.csv", "site,mean,sd\nA,1.5,0.30\nB,2.5,0.5\n")
    result = run_cli("compare", a, b)
    assert result.code == 1
    assert "b.csv: where the values moved" in result.out
    [row] = [line for line in result.out.splitlines() if line.startswith("sd ")]
    assert "1/2" in row and "row 1, column sd" in row and "0.2" in row  # relative error 0.05/0.25


def test_chunks_parsed_ahead_arrive_in_order_and_a_parse_error_reaches_the_judging() -> None:
    import threading

    from holotype.compare.formats.table import AHEAD, _Ahead
    from holotype.errors import UnreadableOutput

    with _Ahead(iter(range(10))) as ahead:
        got = [ahead.next() for _ in range(10)]
        assert got == list(range(10)) and ahead.next() is None and ahead.next() is None  # the end stays the end

    def broken() -> object:
        yield 1
        raise UnreadableOutput("not a readable table: ragged row", "x.csv")

    with _Ahead(broken()) as ahead:  # type: ignore[arg-type]
        assert ahead.next() == 1
        with pytest.raises(UnreadableOutput):
            ahead.next()

    # the judging stops early (a problem in the other file): the parse thread stops too, however far ahead
    before = threading.active_count()
    with pytest.raises(RuntimeError):
        with _Ahead(iter(range(10 ** 9))) as ahead:
            ahead.next()
            assert ahead.queue.qsize() <= AHEAD
            raise RuntimeError("stop")
    assert not ahead.thread.is_alive() and threading.active_count() == before


def test_a_ragged_row_deep_in_a_big_table_is_exit_2(tmp_path: Path) -> None:
    from holotype.compare.formats.table import CHUNK_ROWS

    rows = "".join(f"{i},{i * 0.5}\n" for i in range(3 * CHUNK_ROWS))
    write(tmp_path / "e.csv", "a,b\n" + rows)
    write(tmp_path / "a.csv", "a,b\n" + rows + "1,2,3,4\n" + rows)
    result = run_cli("compare", tmp_path / "e.csv", tmp_path / "a.csv")
    assert result.code == 2 and "a.csv" in result.err and "Traceback" not in result.err, result.err


def _mixed_wide_table(seed: int, shift: bool) -> bytes:
    """A table of 90 columns of every kind a CSV holds; `shift` moves some values as a re-run would."""
    rng = np.random.default_rng(seed)
    rows = 23
    cols: dict[str, list[str]] = {}
    for j in range(30):  # floats: exact, last-bit noise, real changes, zeros, NaN and inf
        base = rng.normal(size=rows) * 10.0 ** (j % 7 - 3)
        if j % 5 == 0:
            base[::4] = 0.0
        if j % 6 == 1:
            base[3] = math.nan
        if j % 6 == 2:
            base[5] = math.inf
        if shift and j % 3 == 1:
            base = np.array([math.nextafter(v, math.inf) if math.isfinite(v) else v for v in base])  # one ULP
        if shift and j % 4 == 2:
            base[7 + j % 5] *= 1.001
        cols[f"f{j}"] = [repr(float(v)) for v in base]
    for j in range(10):  # integers, one changed
        vals = rng.integers(-50, 50, size=rows)
        if shift and j == 3:
            vals[2] += 1
        cols[f"i{j}"] = [str(int(v)) for v in vals]
    for j in range(10):  # sign-free loadings: flipped as a whole on some, flipped value by value on one
        vals = rng.normal(size=rows)
        if shift and j % 2:
            vals = -vals
        if shift and j == 4:
            vals[1] = -vals[1]
        cols[f"pc{j}"] = [repr(float(v)) for v in vals]
    for j in range(10):  # text, missing cells and numbers inside text
        vals = [f"lake {k}" if k % 3 else "" for k in range(rows)]
        if shift and j == 2:
            vals[4] = "lake changed"
        cols[f"t{j}"] = vals
        cols[f"n{j}"] = [f"{k * 0.5:.3f} ({k / 7:.4f})" if not (shift and j == 1 and k == 6) else "9.000 (1.0000)"
                         for k in range(rows)]
    for j in range(5):  # booleans, and a column numeric on one side only
        cols[f"b{j}"] = ["True" if (k + j) % 2 else "False" for k in range(rows)]
        cols[f"m{j}"] = [str(k) if not (shift and k == 9) else "n/a" for k in range(rows)]
    for j in range(5):  # columns whose names look like pandas' renamed duplicates
        cols[f"d.{j}"] = [str(k * j) for k in range(rows)]
    names = list(cols)
    lines = [",".join(names)] + [",".join(cols[c][k] for c in names) for k in range(rows)]
    return ("\n".join(lines) + "\n").encode()


def _tally_state(outcome: object) -> list[dict[str, object]]:
    return [dict(vars(t)) for t in outcome.tallies]  # type: ignore[attr-defined]


def test_wide_tables_judged_in_blocks_give_the_same_figures_as_column_by_column(
        monkeypatch: pytest.MonkeyPatch) -> None:
    from holotype.compare.formats import table
    from holotype.compare.source import Source
    from holotype.tolerance import Rule, RuleBook, Tolerance

    rules = RuleBook(default=Tolerance(rtol=1e-9, atol=1e-12),
                     rules=(Rule("t.csv:pc*", {"sign_free": True}), Rule("t.csv:f1*", {"ulps": 2}),
                            Rule("t.csv:i*", {"atol": 0.5})))
    expected = Source.from_bytes(_mixed_wide_table(7, False), "t.csv", "recorded")
    actual = Source.from_bytes(_mixed_wide_table(7, True), "t.csv", "found")

    def outcome(wide: int, cells: int) -> object:
        monkeypatch.setattr(table, "WIDE", wide)
        monkeypatch.setattr(table, "CHUNK_CELLS", cells)
        return table.compare_tables("t.csv", expected, actual, rules)

    narrow = outcome(10 ** 9, 10 ** 9)  # column by column, one chunk
    state = _tally_state(narrow)
    assert sum(t["mismatches"] for t in state) > 0 and any(t["sign_flipped"] for t in state)  # type: ignore[misc]
    for wide, cells in ((1, 10 ** 9), (1, 90 * 4), (10 ** 9, 90 * 5)):  # blocks, blocks in chunks, chunks
        other = outcome(wide, cells)
        assert _tally_state(other) == state, (wide, cells)
        assert other.problems == narrow.problems and other.notes == narrow.notes  # type: ignore[attr-defined]


def test_a_wide_table_is_read_in_chunks_of_bounded_cells(monkeypatch: pytest.MonkeyPatch) -> None:
    # before, a chunk was always 50,000 rows: 100,000 columns made one chunk of 5e9 cells (40 GB of floats)
    from holotype.compare.formats import table
    from holotype.compare.source import Source

    assert table.chunk_rows(1) == table.CHUNK_ROWS and table.chunk_rows(10 ** 9) == 1
    assert table.chunk_rows(100_000) * 100_000 <= table.CHUNK_CELLS
    monkeypatch.setattr(table, "CHUNK_CELLS", 1_000)
    header = ",".join(f'"c,{i}"' for i in range(200))  # quoted delimiters count once per column
    body = "".join(",".join(str(r + i) for i in range(200)) + "\n" for r in range(23))
    src = Source.from_bytes(f"{header}\n{body}".encode(), "w.csv", "w.csv")
    assert table.column_count(src, ",", '"') == 200
    sizes = [len(chunk) for chunk in table._chunks(src, ",", '"')]
    assert sizes == [5, 5, 5, 5, 3]


def test_block_folding_matches_folding_each_column() -> None:
    from holotype.compare.numbers import judge
    from holotype.compare.tally import Tally, fold_numeric
    from holotype.tolerance import Tolerance

    rng = np.random.default_rng(3)
    tol = Tolerance(rtol=1e-6, atol=1e-6)
    e = rng.normal(size=(40, 12)) * 10.0 ** rng.integers(-5, 5, size=12)
    a = e * (1 + rng.normal(size=e.shape) * 10.0 ** rng.integers(-12, -2, size=12))
    e[:, 0] = a[:, 0] = 0.0  # zeros on both sides: every value exact
    a[5, 1], e[6, 2], a[7, 3], e[8, 3] = math.nan, math.inf, -math.inf, -math.inf
    e[:, 4], a[:, 4] = math.nan, math.nan  # no finite value at all
    a[:, 5] = e[:, 5]
    e[:, 6] = a[:, 6] = 1.0
    e[0, 6], a[0, 6], a[1, 6] = 1e-9, 2e-9, 1.1  # row 0 passes on atol with relative error 1; row 1 fails at 0.1
    wheres = [lambda i, j=j: f"row {i} col {j}" for j in range(12)]
    block = [Tally(f"c{j}", tol) for j in range(12)]
    fold_numeric(block, e, a, judge(e, a, tol), wheres)
    for j in range(12):
        alone = Tally(f"c{j}", tol)
        ej, aj = np.ascontiguousarray(e[:, j]), np.ascontiguousarray(a[:, j])
        alone.add_numeric(ej, aj, judge(ej, aj, tol), wheres[j])
        assert vars(block[j]) == vars(alone) or _same_with_nan(vars(block[j]), vars(alone)), j
    assert block[0].decades == {"exact": 40} and block[4].decades == {"exact": 40}  # NaN meets NaN
    assert block[1].mismatches >= 1 and block[1].worst_where == "row 5 col 1" and block[1].min_lre < 15
    assert block[6].worst_where == "row 1 col 6" and block[6].worst_failed  # failures first, then the largest
    assert all(sum(t.decades.values()) == t.compared == 40 for t in block)


def _same_with_nan(x: dict[str, object], y: dict[str, object]) -> bool:
    def norm(v: object) -> object:
        return "nan" if isinstance(v, float) and math.isnan(v) else v
    return {k: norm(v) for k, v in x.items()} == {k: norm(v) for k, v in y.items()}


# IEEE 754 binary64 has a 53-bit significand: 2**53 + 1 is the first integer it cannot hold, and neighbours
# beyond it round to one double (checked here with Python's own float(), itself correctly rounded)
BIG = 1234567890123456789
assert float(2 ** 53 + 1) == float(2 ** 53) and float(BIG) == float(BIG - 1)


def _big_integer_files(tmp_path: Path, kind: str, shift: int, sign: int = 1) -> tuple[Path, Path]:
    e_val, a_val = BIG, sign * (BIG - shift)
    if kind == "csv":
        body = lambda v: f"id,n\n{v},3\n4,5\n"  # noqa: E731
    elif kind == "wide.csv":  # wide enough for the block judging
        names = ",".join(["id"] + [f"c{i}" for i in range(80)])
        body = lambda v: f"{names}\n{v}," + ",".join(str(i * 0.5) for i in range(80)) + "\n"  # noqa: E731
    elif kind == "json":
        body = lambda v: json.dumps({"sample": {"id": v, "n": 3}})  # noqa: E731
    elif kind == "txt":
        body = lambda v: f"first reading at {v} ns\n"  # noqa: E731
    else:
        e, a = tmp_path / "e.npy", tmp_path / "a.npy"
        np.save(e, np.array([e_val, 7], dtype=np.int64))
        np.save(a, np.array([a_val, 7], dtype=np.int64))
        return e, a
    e, a = tmp_path / f"e.{kind}", tmp_path / f"a.{kind}"
    write(e, body(e_val))
    write(a, body(a_val))
    return e, a


@pytest.mark.parametrize("kind", ["csv", "wide.csv", "json", "txt", "npy"])
def test_integers_beyond_2_53_that_share_a_double_are_still_told_apart(tmp_path: Path, kind: str) -> None:
    # before, both sides became the same double: an identifier or nanosecond time changed by one passed an
    # exact rule as 'max rel err 0'
    e, a = _big_integer_files(tmp_path, kind, shift=1)
    exact = run_cli("compare", e, a, "--rtol", "0", "--atol", "0", "--format", "json")
    assert exact.code == 1, exact.out
    assert f"{BIG} recorded, {BIG - 1} found" in exact.out and "max abs err 1" in exact.out
    assert run_cli("compare", e, a, "--ulps", "0", "--quiet").code == 1
    # within the tolerances that hold it: one step of binary64 (ulps 1), relative 1e-9 (8.1e-19 here)
    assert run_cli("compare", e, a, "--ulps", "1", "--quiet").code == 0
    assert run_cli("compare", e, a, "--rtol", "1e-9", "--quiet").code == 0
    (tmp_path / "same").mkdir()
    same = _big_integer_files(tmp_path / "same", kind, shift=0)
    assert run_cli("compare", *same, "--rtol", "0", "--atol", "0", "--quiet").code == 0


def test_big_integers_in_a_column_with_missing_cells_are_judged_exactly(tmp_path: Path) -> None:
    # an identifier column with a missing cell is read as text, and its numbers parsed cell by cell
    write(tmp_path / "e.csv", f"id,n\n{BIG},3\nNA,5\n{BIG + 2},7\n")
    write(tmp_path / "a.csv", f"id,n\n{BIG - 1},3\nNA,5\n{BIG + 2}.0,7\n")  # one moved; one rewritten as a float
    result = run_cli("compare", tmp_path / "e.csv", tmp_path / "a.csv", "--rtol", "0", "--atol", "0")
    assert result.code == 1 and "1 of 6 values outside tolerance" in result.out, result.out
    assert f"{BIG} recorded, {BIG - 1} found" in result.out


def test_big_integers_in_parquet_columns_are_judged_exactly(tmp_path: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    pq.write_table(pa.table({"id": pa.array([BIG, 4], pa.int64())}), tmp_path / "e.parquet")
    pq.write_table(pa.table({"id": pa.array([BIG - 1, 4], pa.int64())}), tmp_path / "a.parquet")
    result = run_cli("compare", tmp_path / "e.parquet", tmp_path / "a.parquet", "--rtol", "0", "--atol", "0")
    assert result.code == 1 and f"{BIG} recorded, {BIG - 1} found" in result.out, result.out


def test_a_sign_free_big_integer_flipped_and_moved_is_not_passed_as_a_flip(tmp_path: Path) -> None:
    write(tmp_path / "e.csv", f"id,n\n{BIG},3\n{BIG + 10},5\n")
    write(tmp_path / "flipped.csv", f"id,n\n{-BIG},3\n{-BIG - 10},5\n")
    write(tmp_path / "moved.csv", f"id,n\n{-BIG + 1},3\n{-BIG - 10},5\n")  # flipped, and one moved by 1
    exact = ("--rtol", "0", "--atol", "0", "--sign-free", "id", "--quiet")
    assert run_cli("compare", tmp_path / "e.csv", tmp_path / "flipped.csv", *exact).code == 0
    assert run_cli("compare", tmp_path / "e.csv", tmp_path / "moved.csv", *exact).code == 1


def test_number_tokens_keep_integers_binary64_would_round() -> None:
    from holotype.compare.tokens import exact_number

    # 2**53 = 9007199254740992 is still exact in binary64; 2**53 + 1 is not (float() rounds it down)
    assert exact_number("9007199254740992") == 2 ** 53 and isinstance(exact_number("9007199254740992"), float)
    assert exact_number("-9007199254740993") == -(2 ** 53) - 1
    assert exact_number(f"{BIG}.000") == BIG and isinstance(exact_number(f"{BIG}.000"), int)
    for token in ("0.12345678901234567890", "1.234567890123456789e18", f"{BIG}.5"):
        assert exact_number(token) == float(token) and isinstance(exact_number(token), float)


def test_leading_zeros_place_digits_so_1_05_is_not_1_5(tmp_path: Path) -> None:
    # before, '1,05' and '1,5' split into the same numbers (1 and 5): a change from 1.5 to 1.05 passed
    from holotype.compare.tokens import split_numbers

    assert split_numbers("1,05")[0] != split_numbers("1,5")[0]
    assert split_numbers("0.05") == ("\x00", ["0.05"]) and split_numbers("-007")[1] == ["-7"]
    write(tmp_path / "e.txt", "mean depth 1,5 m at 12:05\n")
    write(tmp_path / "a.txt", "mean depth 1,05 m at 12:05\n")
    assert run_cli("compare", tmp_path / "e.txt", tmp_path / "a.txt", "--quiet").code == 1
    write(tmp_path / "b.txt", "mean depth 1,5 m at 12:05\n")
    assert run_cli("compare", tmp_path / "e.txt", tmp_path / "b.txt", "--quiet").code == 0


def test_a_semicolon_table_with_decimal_commas_is_read_as_numbers(tmp_path: Path) -> None:
    # the export many spreadsheet locales write: ';' between cells, ',' as the decimal mark
    write(tmp_path / "e.csv", "lake;depth;note\nA;1,5;x\nB;0,1;y\n")
    write(tmp_path / "moved.csv", "lake;depth;note\nA;1,05;x\nB;0,1;y\n")
    write(tmp_path / "noise.csv", "lake;depth;note\nA;1,5;x\nB;0,10000000000000002;y\n")  # one ULP of 0.1
    moved = run_cli("compare", tmp_path / "e.csv", tmp_path / "moved.csv")
    assert moved.code == 1 and "1.5 recorded, 1.05 found" in moved.out, moved.out
    assert run_cli("compare", tmp_path / "e.csv", tmp_path / "noise.csv", "--quiet").code == 0
    # a point-decimal table with semicolons keeps its points; a comma inside a cell of such a table is text
    write(tmp_path / "p.csv", "lake;depth;pair\nA;1.5;1,2\n")
    write(tmp_path / "q.csv", "lake;depth;pair\nA;1.5;1,3\n")
    assert run_cli("compare", tmp_path / "p.csv", tmp_path / "q.csv", "--quiet").code == 1


def test_the_decimal_comma_reader_is_correctly_rounded() -> None:
    # Python's float() is correctly rounded (IEEE 754 round-to-nearest); so must the comma reader be
    from holotype.compare.formats.table import _chunks, sniff_table
    from holotype.compare.source import Source

    rng = np.random.default_rng(12)
    x = rng.standard_normal(5_000) * 10.0 ** rng.integers(-300, 300, 5_000)
    text = "i;v\n" + "\n".join(f"{i};{v:.17g}".replace(".", ",") for i, v in enumerate(x)) + "\n"
    src = Source.from_bytes(text.encode(), "t.csv", "t.csv")
    assert sniff_table(src) == (";", '"', ",")
    parsed = next(_chunks(src, ";", '"', ","))["v"].to_numpy()
    assert np.array_equal(parsed, np.array([float(f"{v:.17g}") for v in x]))


def test_json_numbers_beyond_binary64_are_compared_as_written(tmp_path: Path) -> None:
    # float('1e400') and float('1e401') are both infinity (IEEE 754 overflow): before, they compared equal
    assert float("1e400") == float("1e401") == math.inf
    write(tmp_path / "e.json", '{"x": 1e400, "y": 2.5}')
    write(tmp_path / "a.json", '{"x": 1e401, "y": 2.5}')
    write(tmp_path / "b.json", '{"x": 1e400, "y": 2.5}\n')
    result = run_cli("compare", tmp_path / "e.json", tmp_path / "a.json")
    assert result.code == 1 and "1E+400 recorded, 1E+401 found" in result.out, result.out
    assert run_cli("compare", tmp_path / "e.json", tmp_path / "b.json", "--quiet").code == 0
    write(tmp_path / "huge.json", '{"x": 1e999999999, "y": 2.5}')  # no giant integer is ever built
    assert run_cli("compare", tmp_path / "e.json", tmp_path / "huge.json", "--quiet").code == 1


def test_numbers_in_text_beyond_binary64_are_told_apart(tmp_path: Path) -> None:
    write(tmp_path / "e.txt", "upper bound 1e400, mean 2.5\n")
    write(tmp_path / "a.txt", "upper bound 1e401, mean 2.5\n")
    write(tmp_path / "b.txt", "upper bound 1e999999999, mean 2.5\n")  # too big to build: infinity, as before
    assert run_cli("compare", tmp_path / "e.txt", tmp_path / "a.txt", "--quiet").code == 1
    assert run_cli("compare", tmp_path / "e.txt", tmp_path / "e.txt", "--quiet").code == 0
    assert run_cli("compare", tmp_path / "b.txt", tmp_path / "b.txt", "--quiet").code == 0


def test_json_integers_beyond_binary64_range_compare_without_an_internal_error(tmp_path: Path) -> None:
    # before, converting 10**400 for the comparison raised OverflowError: an internal error, exit 2
    write(tmp_path / "e.json", json.dumps({"n": 10 ** 400, "m": -(10 ** 400)}))
    write(tmp_path / "a.json", json.dumps({"n": 10 ** 400 + 1, "m": -(10 ** 400)}))
    result = run_cli("compare", tmp_path / "e.json", tmp_path / "a.json", "--rtol", "0", "--atol", "0")
    assert result.code == 1 and "Traceback" not in result.err and "internal error" not in result.err, result.err
    assert run_cli("compare", tmp_path / "e.json", tmp_path / "a.json", "--quiet").code == 0  # within rtol


def test_the_format_registry_loads_every_format_even_after_one_was_imported_directly() -> None:
    # before, importing one format module first left the others unregistered (the lazy load saw a
    # non-empty registry): a JSON file was then compared by bytes
    import subprocess
    import sys

    code = ("import holotype.compare.formats.table\n"
            "from holotype.compare import formats\n"
            "assert {'csv', 'json', 'numpy', 'text', 'parquet', 'image'} <= set(formats.names()), formats.names()\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


@pytest.mark.parametrize("suffix", ["csv", "txt"])
def test_an_integer_of_thousands_of_digits_is_no_internal_error(tmp_path: Path, suffix: str) -> None:
    # Python refuses int() of more than 4,300 digits (CVE-2020-10735): such a token stays a float (infinity)
    big = "9" * 5000
    body = (lambda v: f"id,v\n{v},1\nNA,2\n") if suffix == "csv" else (lambda v: f"n = {v}\n")
    write(tmp_path / f"e.{suffix}", body(big))
    write(tmp_path / f"a.{suffix}", body(big[:-1] + "8"))
    result = run_cli("compare", tmp_path / f"e.{suffix}", tmp_path / f"a.{suffix}")
    assert result.code in (0, 1) and "internal error" not in result.err, result.err


@pytest.mark.parametrize("width", [1, 80])
def test_a_big_integer_column_read_as_numbers_on_one_side_and_text_on_the_other_is_exact(
        tmp_path: Path, width: int) -> None:
    # the recorded column is all integers; the new one holds an 'NA', so it is text: before, the recorded
    # side went in as doubles and an identifier moved by one passed (narrow and wide paths alike)
    names = ",".join(["id"] + [f"c{i}" for i in range(width)])
    rest = ",".join(str(i * 0.5) for i in range(width))
    write(tmp_path / "e.csv", f"{names}\n{BIG},{rest}\n{BIG + 10},{rest}\n")
    write(tmp_path / "a.csv", f"{names}\n{BIG - 1},{rest}\nNA,{rest}\n")
    result = run_cli("compare", tmp_path / "e.csv", tmp_path / "a.csv", "--rtol", "0", "--atol", "0")
    assert result.code == 1 and f"2 of {2 + 2 * width} values outside tolerance" in result.out, result.out
    assert f"{BIG} recorded, {BIG - 1} found" in result.out
    # a numeric cell against a text cell is shown as written, not as NumPy's repr of a double
    write(tmp_path / "n.csv", f"{names}\n5,{rest}\n6,{rest}\n")
    write(tmp_path / "t.csv", f"{names}\nfive,{rest}\n6,{rest}\n")
    shown = run_cli("compare", tmp_path / "n.csv", tmp_path / "t.csv")
    assert shown.code == 1 and "5 recorded, 'five' found" in shown.out and "np." not in shown.out, shown.out
