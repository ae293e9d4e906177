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
