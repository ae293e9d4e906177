"""Real outputs compare meaningfully: numbers inside cells and text, aligned text, timestamps, text formats,
images, figures, notebooks, and rules that record without comparing or set an output's severity."""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from conftest import one_analysis_project, run_cli, write
from holotype.lockfile import read_lock


def _json(result_out: str) -> dict:  # type: ignore[type-arg]
    return json.loads(result_out)


def _output_findings(out: str) -> list[dict]:  # type: ignore[type-arg]
    return [f for f in _json(out)["findings"] if f["area"] == "output"]


# ----------------------------------------------------------------------------- numbers inside cells


def test_bootstrap_intervals_inside_csv_cells_compare_numerically(tmp_path: Path) -> None:
    e = write(tmp_path / "e.csv", "site,ci\nA,144.086957:350.1092\n")
    a = write(tmp_path / "a.csv", "site,ci\nA,143.738587:350.4783\n")
    assert run_cli("compare", e, a, "--rtol", "0.1").code == 0
    result = run_cli("compare", e, a, "--rtol", "1e-6", "--format", "json")
    assert result.code == 1
    [finding] = [f for f in _output_findings(result.out) if f["severity"] == "fail"]
    # relative error |a - e| / |e| of the worst number, computed independently (math.isclose: Python's stdlib)
    expected_rel = abs(143.738587 - 144.086957) / 144.086957
    assert math.isclose(finding["max_rel_err"], expected_rel, rel_tol=1e-9)
    assert "number 1 in the cell" in finding["worst"] and math.isfinite(finding["max_abs_err"])


@pytest.mark.parametrize(("recorded", "found"), [
    ("12.3 (0.4)", "12.31 (0.41)"), ("0.41 ± 0.02", "0.411 ± 0.0201"), ("[1.2, 3.4]", "[1.21, 3.41]"),
    ("45%", "45.5%"), ("p < 0.001", "p < 0.00101"),
])
def test_numbers_with_text_around_them_in_cells_and_json_strings(tmp_path: Path, recorded: str, found: str) -> None:
    e = write(tmp_path / "e.csv", f'lake,value\nA,"{recorded}"\n')
    a = write(tmp_path / "a.csv", f'lake,value\nA,"{found}"\n')
    assert run_cli("compare", e, a, "--rtol", "0.1").code == 0
    assert run_cli("compare", e, a, "--rtol", "1e-6").code == 1
    je = write(tmp_path / "e.json", json.dumps({"result": recorded}))
    ja = write(tmp_path / "a.json", json.dumps({"result": found}))
    assert run_cli("compare", je, ja, "--rtol", "0.1").code == 0
    assert run_cli("compare", je, ja, "--rtol", "1e-6").code == 1


def test_text_around_the_numbers_must_still_match(tmp_path: Path) -> None:
    e = write(tmp_path / "e.csv", "lake,value\nA,12.3 (0.4)\n")
    a = write(tmp_path / "a.csv", "lake,value\nA,12.3 [0.4]\n")
    assert run_cli("compare", e, a, "--rtol", "0.5").code == 1


# ----------------------------------------------------------------------------- aligned text


def test_shifted_column_padding_passes_and_a_real_change_reports_its_real_size(tmp_path: Path) -> None:
    import pandas as pd

    before = pd.DataFrame({"coef": [1.2e-17, 2.5]}, index=["x", "y"]).to_string()
    after = pd.DataFrame({"coef": [-3.4e-17, 2.5]}, index=["x", "y"]).to_string()
    assert before != after and before.replace(" ", "") != after.replace(" ", "")  # padding really moved
    e = write(tmp_path / "e.txt", before + "\nOmnibus: 0.084\n")
    a = write(tmp_path / "a.txt", after + "\nOmnibus: 0.084\n")
    assert run_cli("compare", e, a).code == 0  # the coefficient moved inside atol; spacing is not a change
    write(tmp_path / "a.txt", after + "\nOmnibus: 17.787\n")
    result = run_cli("compare", e, a, "--format", "json")
    [finding] = [f for f in _output_findings(result.out) if f["severity"] == "fail"]
    assert math.isclose(finding["max_abs_err"], 17.787 - 0.084, rel_tol=1e-12)


def test_whitespace_exact_keeps_spacing_significant(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    root = one_analysis_project(tmp_path / "p", "import os, sys\nos.makedirs('out', exist_ok=True)\n"
                                "open('out/t.txt', 'w').write('a  b' if os.environ.get('WIDE') else 'a b')\n",
                                ("out/t.txt",), settings='[[rules]]\nmatch = "out/t.txt"\nwhitespace = "exact"\n')
    assert run_cli("record", "-C", root).code == 0
    monkeypatch.setenv("WIDE", "1")
    assert run_cli("replay", "-C", root).code == 1


# ----------------------------------------------------------------------------- timestamps

SUMMARY = ("                 OLS Regression Results\n"
           "Dep. Variable:      depth   R-squared:    0.912\n"
           "Date:    {date}   Prob (F-statistic): 1.2e-05\n"
           "Time:    {time}   Log-Likelihood:  -12.5\n"
           "No. Observations:   20\n")


def test_a_summary_with_date_and_time_lines_fails_with_the_hint_and_passes_with_skip_lines(tmp_path: Path) -> None:
    e = write(tmp_path / "e.txt", SUMMARY.format(date="Wed, 02 Dec 2026", time="10:31:25"))
    a = write(tmp_path / "a.txt", SUMMARY.format(date="Thu, 03 Dec 2026", time="11:02:57"))
    result = run_cli("compare", e, a)
    assert result.code == 1 and "skip_lines" in result.out and "dates, times" in result.out
    assert run_cli("compare", e, a, "--skip-lines", "^Date:", "--skip-lines", "^Time:").code == 0
    assert run_cli("compare", e, a, "--mask", r"\d{2}:\d{2}:\d{2}", "--mask", r"\w{3}, \d{2} \w{3} \d{4}").code == 0
    write(tmp_path / "b.txt", SUMMARY.format(date="Thu, 03 Dec 2026", time="11:02:57").replace("0.912", "0.700"))
    real = run_cli("compare", e, tmp_path / "b.txt", "--skip-lines", "^Date:", "--skip-lines", "^Time:")
    assert real.code == 1 and "0.912" in real.out  # skipping the clock does not hide a real change


def test_skip_lines_in_a_project_rule_and_loosening_it_is_a_judgement_change(tmp_path: Path) -> None:
    script = ("import os\nos.makedirs('out', exist_ok=True)\nm, s = divmod(os.getpid() % 3600, 60)\n"
              "open('out/summary.txt', 'w').write('R2 0.912\\nTime: 10:%02d:%02d\\n' % (m, s))\n")
    root = one_analysis_project(tmp_path / "p", script, ("out/summary.txt",))
    assert run_cli("record", "-C", root).code == 0
    assert run_cli("replay", "-C", root).code == 1  # another process id, another clock
    config = root / "holotype.toml"
    config.write_text(config.read_text() + '\n[[rules]]\nmatch = "out/summary.txt"\nskip_lines = ["^Time:"]\n')
    assert run_cli("replay", "-C", root).code == 0
    result = run_cli("check", "-C", root)
    assert result.code == 1 and "skip_lines adds ^Time:" in result.out  # recorded without it: loosened


def test_a_rule_key_a_format_cannot_honour_is_refused(tmp_path: Path) -> None:
    e = write(tmp_path / "e.txt", "Time: 1\n")
    a = write(tmp_path / "a.txt", "Time: 2\n")
    result = run_cli("compare", e, a, "--ignore", "Time*")
    assert result.code == 1 and "cannot apply to text outputs" in result.out


# ----------------------------------------------------------------------------- text formats


@pytest.mark.parametrize("suffix", [".tex", ".md", ".html", ".xml", ".rst", ".yaml", ".log", ".svg", ".dat"])
def test_text_formats_and_unknown_suffixes_compare_as_text(tmp_path: Path, suffix: str) -> None:
    body = "depth & 12.5 \\\\\nmean & 3.25 \\\\\n"
    e = write(tmp_path / f"e{suffix}", body)
    a = write(tmp_path / f"a{suffix}", body.replace("12.5", "12.500000000000002"))
    result = run_cli("compare", e, a, "--format", "json")
    assert result.code == 0, result.out
    messages = " ".join(f["message"] for f in _output_findings(result.out))
    assert "bytes differ" not in messages and "within tolerance" in messages
    assert ("sniffed" in messages or "compared as text" in messages) == (suffix in (".dat", ".svg"))


def test_binary_content_with_an_unknown_suffix_is_compared_by_bytes(tmp_path: Path) -> None:
    e = tmp_path / "e.bin"
    a = tmp_path / "a.bin"
    e.write_bytes(b"\x00\x01\x02")
    a.write_bytes(b"\x00\x01\x03")
    result = run_cli("compare", e, a)
    assert result.code == 1 and "bytes differ" in result.out


def test_a_declared_format_wins_over_the_suffix(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    script = ("import os\nos.makedirs('out', exist_ok=True)\n"
              "open('out/r.dat', 'w').write('1.0\\n' if not os.environ.get('NUDGE') else '1.0000000000001\\n')\n")
    root = one_analysis_project(tmp_path / "p", script, ("out/r.dat",),
                                settings='[[rules]]\nmatch = "out/r.dat"\nformat = "bytes"\n')
    assert run_cli("record", "-C", root).code == 0
    monkeypatch.setenv("NUDGE", "1")
    result = run_cli("replay", "-C", root)
    assert result.code == 1 and 'declared format = "bytes"' in result.out
    bad = write(tmp_path / "q" / "holotype.toml", '[[rules]]\nmatch = "x"\nformat = "spreadsheet"\n')
    refused = run_cli("check", "-C", bad.parent)
    assert refused.code == 2 and "format" in refused.err and "spreadsheet" in refused.err


# ----------------------------------------------------------------------------- images


def _figure(path: Path, *, shift: int = 0, width: int = 400, height: int = 300, noise: bool = False,
            palette: bool = False) -> Path:
    from PIL import Image, ImageDraw

    image = Image.new("RGB", (width, height), "white")
    draw = ImageDraw.Draw(image)
    draw.line([(20, 150 + shift), (380, 60 + shift)], fill="blue", width=3)
    draw.rectangle([50, 200, 120, 260], fill="orange")
    if noise:  # anti-aliasing-like: a few edge pixels change a lot, many change a little
        pixels = np.array(image)
        pixels[150:152, 100:110] = [200, 200, 255]
        pixels[::7, ::5] = np.clip(pixels[::7, ::5].astype(int) - 9, 0, 255)
        image = Image.fromarray(pixels.astype(np.uint8))
    if palette:
        image = image.convert("P", palette=Image.Palette.ADAPTIVE, colors=16)
    image.save(path)
    return path


def _changed_share_by_numpy(e: Path, a: Path, delta: int = 16) -> float:
    """The share of pixels whose largest channel difference exceeds `delta`, from Pillow-decoded arrays with
    NumPy (the independent reference the issue names)."""
    from PIL import Image

    x = np.asarray(Image.open(e).convert("RGB"), dtype=np.int16)
    y = np.asarray(Image.open(a).convert("RGB"), dtype=np.int16)
    return float((np.abs(x - y).max(axis=2) > delta).mean())


def _reported_share(out: str) -> float:
    match = re.search(r"([\d,]+) of ([\d,]+) pixels", out)
    assert match, out
    return int(match.group(1).replace(",", "")) / int(match.group(2).replace(",", ""))


def test_images_identical_noisy_moved_resized_and_paletted(tmp_path: Path) -> None:
    e = _figure(tmp_path / "e.png")
    same = _figure(tmp_path / "same.png")
    assert run_cli("compare", e, same).code == 0
    noisy = _figure(tmp_path / "noisy.png", noise=True)
    result = run_cli("compare", e, noisy)
    assert result.code == 0 and "within tolerance" in result.out
    assert math.isclose(_reported_share(result.out), _changed_share_by_numpy(e, noisy), rel_tol=1e-12)
    moved = _figure(tmp_path / "moved.png", shift=20)
    result = run_cli("compare", e, moved)
    assert result.code == 1 and "image differs" in result.out
    assert math.isclose(_reported_share(result.out), _changed_share_by_numpy(e, moved), rel_tol=1e-12)
    assert _changed_share_by_numpy(e, moved) > 0.005
    wide = _figure(tmp_path / "wide.png", width=401)
    result = run_cli("compare", e, wide)
    assert result.code == 1 and "400 × 300 recorded, 401 × 300 found" in result.out
    paletted = _figure(tmp_path / "pal.png", palette=True)
    assert run_cli("compare", paletted, _figure(tmp_path / "rgb.png", palette=True).with_suffix(".png")).code == 0
    from PIL import Image

    Image.open(paletted).convert("RGB").save(tmp_path / "as_rgb.png")  # the same picture, stored as RGB
    assert run_cli("compare", paletted, tmp_path / "as_rgb.png").code == 0


def test_pixel_keys_loosen_and_tighten_the_image_criterion(tmp_path: Path) -> None:
    e = _figure(tmp_path / "e.png")
    moved = _figure(tmp_path / "moved.png", shift=20)
    share = _changed_share_by_numpy(e, moved)
    root = tmp_path / "p"
    for value, code in ((share * 1.01, 0), (share * 0.99, 1)):
        write(root / "holotype.toml", f'[[rules]]\nmatch = "*.png"\npixel_share = {value}\n')
        from holotype.compare.formats.image import compare_images
        from holotype.compare.source import Source
        from holotype.config import load_config

        outcome = compare_images("x.png", Source.from_path(e), Source.from_path(moved), load_config(root).rulebook)
        assert [p.kind for p in outcome.problems] == ["output.match" if code == 0 else "output.mismatch"]


def test_a_truncated_png_is_one_line(tmp_path: Path) -> None:
    e = _figure(tmp_path / "e.png")
    cut = tmp_path / "cut.png"
    cut.write_bytes(e.read_bytes()[:300])
    result = run_cli("compare", e, cut)
    assert result.code == 2 and result.err.count("\n") == 1 and "cut.png" in result.err


def test_a_failing_image_in_a_replay_leaves_a_difference_picture(tmp_path: Path,
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    script = ("import os\nfrom PIL import Image, ImageDraw\nos.makedirs('out', exist_ok=True)\n"
              "im = Image.new('RGB', (200, 100), 'white')\nd = ImageDraw.Draw(im)\n"
              "y = 80 if os.environ.get('MOVE') else 20\nd.rectangle([10, y - 10, 190, y + 10], fill='black')\n"
              "im.save('out/fig.png')\n")
    root = one_analysis_project(tmp_path / "p", script, ("out/fig.png",))
    assert run_cli("record", "-C", root).code == 0
    monkeypatch.setenv("MOVE", "1")
    result = run_cli("replay", "-C", root, "--format", "json")
    [finding] = [f for f in _output_findings(result.out) if f["severity"] == "fail"]
    picture = Path(finding["message"].split("difference picture: ")[1])
    assert picture.parent == root / ".holotype" / "logs" and picture.exists()
    from PIL import Image

    marked = np.asarray(Image.open(picture).convert("RGB"))
    assert (marked == [255, 0, 0]).all(axis=2).sum() > 0  # the differing pixels are in red
    html = run_cli("report", "--format", "html", "-C", root).out
    assert "data:image/png;base64," in html and "changed pixels in red" in html


def test_a_large_image_compares_in_bounded_memory(tmp_path: Path) -> None:
    from PIL import Image, ImageDraw

    width, height = 8000, 3000
    for name, shift in (("e", 0), ("a", 1)):
        image = Image.new("RGB", (width, height), "white")
        ImageDraw.Draw(image).line([(0, 100 + shift), (width, height - 100)], fill="black", width=5)
        image.save(tmp_path / f"{name}.png", compress_level=1)
    _figure(tmp_path / "small_e.png")
    _figure(tmp_path / "small_a.png", noise=True)

    def peak_mib(e: Path, a: Path) -> float:
        code = ("import resource, subprocess, sys\n"
                "subprocess.run([sys.executable, '-m', 'holotype', 'compare', sys.argv[1], sys.argv[2]],"
                " stdout=subprocess.DEVNULL)\n"
                "print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024)")
        out = subprocess.run([sys.executable, "-c", code, str(e), str(a)], capture_output=True, text=True, check=True)
        return float(out.stdout)

    baseline = peak_mib(tmp_path / "small_e.png", tmp_path / "small_a.png")
    peak = peak_mib(tmp_path / "e.png", tmp_path / "a.png")
    decoded = width * height * 3 / 2**20  # one decoded RGB image, 69 MiB
    # decoding both and holding them as arrays (what a hand-written check does) needs about 4x decoded
    assert peak - baseline < 2.0 * decoded, (peak, baseline, decoded)


# ----------------------------------------------------------------------------- figures from matplotlib

FIGURES = ("import os\nimport matplotlib\nmatplotlib.use('Agg')\nimport matplotlib.pyplot as plt\n"
           "os.makedirs('out', exist_ok=True)\nfig, ax = plt.subplots()\n"
           "ax.plot([1, 2, 3], [2.0, 1.5, 3.2]); ax.set_title('Depth by station')\n"
           "for ext in ('pdf', 'svg', 'png'):\n    fig.savefig('out/fig.' + ext)\n"
           "open('out/epoch.txt', 'w').write(os.environ.get('SOURCE_DATE_EPOCH', 'unset'))\n")


def test_matplotlib_figures_are_byte_identical_run_to_run(tmp_path: Path) -> None:
    root = one_analysis_project(tmp_path / "p", FIGURES, ("out/fig.pdf", "out/fig.svg", "out/fig.png",
                                                          "out/epoch.txt"))
    assert run_cli("record", "-C", root).code == 0
    epoch = read_lock(root / "holotype.lock").source_date_epoch
    assert epoch is not None and (root / "out" / "epoch.txt").read_text() == str(epoch)
    result = run_cli("replay", "--twice", "-C", root, "--format", "json")
    assert result.code == 0, result.out
    findings = _json(result.out)["findings"]
    assert not [f for f in findings if f["kind"] == "analysis.nondeterministic"]
    assert {f["subject"] for f in findings if f["message"] == "identical bytes"} >= {
        "out/fig.pdf", "out/fig.svg", "out/fig.png"}


def test_without_the_salt_and_the_epoch_an_svg_changes_and_the_svg_reader_sets_that_aside(tmp_path: Path) -> None:
    # the same figure drawn by two plain processes (no holotype hook): ids are random, dates are the clock's
    code = ("import sys, matplotlib\nmatplotlib.use('Agg')\nimport matplotlib.pyplot as plt\n"
            "fig, ax = plt.subplots()\nax.plot([1, 2, 3], [2.0, 1.5, 3.2])\nfig.savefig(sys.argv[1])\n")
    env = {k: v for k, v in __import__("os").environ.items() if k not in ("SOURCE_DATE_EPOCH", "PYTHONPATH")}
    for name in ("one.svg", "two.svg"):
        subprocess.run([sys.executable, "-c", code, str(tmp_path / name)], check=True, env=env)
    one, two = (tmp_path / "one.svg").read_bytes(), (tmp_path / "two.svg").read_bytes()
    assert one != two  # matplotlib's random clip-path ids differ without svg.hashsalt
    result = run_cli("compare", tmp_path / "one.svg", tmp_path / "two.svg")
    assert result.code == 0 and "SVG compared as text" in result.out


def test_a_pdf_that_differs_only_in_its_dates_passes_and_one_that_differs_says_so(tmp_path: Path) -> None:
    body = b"%PDF-1.4\n1 0 obj << /CreationDate (D:20261202103125Z) /ModDate (D:20261202103125Z) >>\n"
    e = tmp_path / "e.pdf"
    e.write_bytes(body + b"stream xyz endstream\n/ID [<00aa><00bb>]\n")
    a = tmp_path / "a.pdf"
    a.write_bytes(body.replace(b"103125", b"110257") + b"stream xyz endstream\n/ID [<11aa><11bb>]\n")
    assert run_cli("compare", e, a).code == 0
    a.write_bytes(body + b"stream xyw endstream\n/ID [<00aa><00bb>]\n")
    result = run_cli("compare", e, a)
    assert result.code == 1 and 'severity = "warn"' in result.out


# ----------------------------------------------------------------------------- notebooks


def _notebook(path: Path, cells: list[str]) -> None:
    import nbformat

    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_markdown_cell("# Lake survey")] + [nbformat.v4.new_code_cell(c) for c in cells]
    path.parent.mkdir(parents=True, exist_ok=True)
    nbformat.write(nb, str(path))


def test_a_notebook_analysis_runs_seeded_twice_and_a_changed_cell_is_named(tmp_path: Path) -> None:
    root = tmp_path / "p"
    write(root / "data" / "depths.csv", "depth\n1.5\n2.5\n4.0\n")
    _notebook(root / "notebooks" / "survey.ipynb", [
        "import csv, random\nrows = [float(r['depth']) for r in csv.DictReader(open('../data/depths.csv'))]\n"
        "print(sum(rows) / len(rows))",
        "random.random()",
    ])
    write(root / "holotype.toml", f'python = "{sys.executable}"\nseed = 4\nseed_globals = true\ndata = ["data"]\n'
                                  '[analyses.survey]\nnotebook = "notebooks/survey.ipynb"\n'
                                  'outputs = ["out/survey.ipynb"]\n')
    result = run_cli("record", "-C", root)
    assert result.code == 0, result.out + result.err
    assert run_cli("replay", "--twice", "-C", root).code == 0  # seeded in the kernel: the same both times
    write(root / "data" / "depths.csv", "depth\n1.5\n2.5\n4.5\n")
    result = run_cli("replay", "-C", root)
    assert result.code == 1 and "cell 2 (import csv, random)" in result.out


def test_notebook_outputs_compare_cell_by_cell_ignoring_counts_and_metadata(tmp_path: Path) -> None:
    def executed(text: str, count: int) -> dict:  # type: ignore[type-arg]
        return {"nbformat": 4, "nbformat_minor": 5, "metadata": {}, "cells": [
            {"cell_type": "code", "source": "fit.summary()", "execution_count": count,
             "metadata": {"execution": {"iopub.status.idle": f"2026-12-0{count}T10:00:00Z"}},
             "outputs": [{"output_type": "execute_result", "execution_count": count, "metadata": {},
                          "data": {"text/plain": text}}]}]}

    e = write(tmp_path / "e.ipynb", json.dumps(executed("slope 0.50000000000001", 1)))
    a = write(tmp_path / "a.ipynb", json.dumps(executed("slope 0.5", 7)))
    assert run_cli("compare", e, a).code == 0
    write(tmp_path / "a.ipynb", json.dumps(executed("slope 0.75", 7)))
    result = run_cli("compare", e, a)
    assert result.code == 1 and "cell 1 (fit.summary())" in result.out


def test_a_notebook_analysis_without_nbclient_is_one_line(tmp_path: Path, wheelhouse: Path) -> None:
    from conftest import make_venv

    venv = make_venv(tmp_path / "venv", wheelhouse)
    root = tmp_path / "p"
    write(root / "data" / "a.csv", "x\n1\n")
    _notebook(root / "nb.ipynb", ["print(1)"])
    write(root / "holotype.toml", f'python = "{venv.python}"\nseed = 1\ndata = ["data"]\n'
                                  '[analyses.nb]\nnotebook = "nb.ipynb"\noutputs = ["out/nb.ipynb"]\n')
    result = run_cli("record", "-C", root)
    assert result.code == 1 and "needs nbclient" in result.out and "missing" in result.out


# ----------------------------------------------------------------------------- record only, severity


def test_record_only_and_per_output_severity(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    script = ("import os\nos.makedirs('out', exist_ok=True)\nv = os.environ.get('V', '1')\n"
              "open('out/r.csv', 'w').write('x\\n1\\n')\nopen('out/session.log', 'w').write('run ' + v)\n"
              "from PIL import Image\nImage.new('L', (20, 20), 0 if v == '1' else 255).save('out/fig.png')\n")
    rules = ('[[rules]]\nmatch = "out/session.log"\nrecord_only = true\n'
             '[[rules]]\nmatch = "out/*.png"\nseverity = "warn"\n')
    root = one_analysis_project(tmp_path / "p", script, ("out/r.csv", "out/session.log", "out/fig.png"),
                                settings=rules)
    assert run_cli("record", "-C", root).code == 0
    monkeypatch.setenv("V", "2")
    result = run_cli("replay", "-C", root, "--format", "json")
    assert result.code == 0, result.out
    by_subject = {f["subject"]: f for f in _output_findings(result.out)}
    assert by_subject["out/session.log"]["kind"] == "output.recorded_only"
    assert by_subject["out/session.log"]["severity"] == "info"
    assert by_subject["out/fig.png"]["severity"] == "warn" and "counts a failure" in by_subject["out/fig.png"]["message"]


# ----------------------------------------------------------------------------- start


def test_start_suggests_notebooks_anywhere_scripts_with_a_body_and_the_outputs_they_write(tmp_path: Path) -> None:
    write(tmp_path / "data" / "lakes.csv", "x\n1\n")
    _notebook(tmp_path / "notebooks" / "explore.ipynb", ["1 + 1"])
    _notebook(tmp_path / "reports" / "season" / "summary.ipynb", ["2 + 2"])
    write(tmp_path / "analysis" / "helpers.py", '"""Shared helpers."""\nimport math\nLIMIT = 3\n\n'
                                                 "def scale(x):\n    return math.sqrt(x)\n")
    write(tmp_path / "analysis" / "fit.py", "import pandas as pd\nfrom pathlib import Path\n"
                                            "df = pd.read_csv('data/lakes.csv')\ndf.to_csv('results/fit.csv')\n"
                                            "Path('results/notes.txt').write_text('done')\n"
                                            "with open('results/log.txt', 'w') as fh:\n    fh.write('x')\n")
    write(tmp_path / "analysis" / "main_only.py", "def main():\n    pass\n\nif __name__ == '__main__':\n    main()\n")
    assert run_cli("start", "-C", tmp_path).code == 0
    text = (tmp_path / "holotype.toml").read_text()
    assert '# notebook = "notebooks/explore.ipynb"' in text and '# notebook = "reports/season/summary.ipynb"' in text
    assert "helpers" not in text  # a module of definitions is not an analysis
    assert '# command = "python analysis/main_only.py"' in text
    assert '# outputs = ["results/fit.csv", "results/notes.txt", "results/log.txt"]' in text
    import tomllib

    tomllib.loads(text)  # still valid TOML (the suggestions are comments)


def test_twice_leaves_out_what_the_rules_set_aside(tmp_path: Path) -> None:
    script = ("import os, time\nos.makedirs('out', exist_ok=True)\n"
              "open('out/session.log', 'w').write('started %r\\n' % time.time())\n"
              "open('out/summary.txt', 'w').write('R2 0.912\\nTime: %r\\n' % time.time())\n")
    rules = ('[[rules]]\nmatch = "out/session.log"\nrecord_only = true\n'
             '[[rules]]\nmatch = "out/summary.txt"\nskip_lines = ["^Time:"]\n')
    root = one_analysis_project(tmp_path / "p", script, ("out/session.log", "out/summary.txt"), settings=rules)
    assert run_cli("record", "-C", root).code == 0
    result = run_cli("replay", "--twice", "-C", root, "--format", "json")
    assert result.code == 0, result.out
    assert not [f for f in _json(result.out)["findings"] if f["kind"] == "analysis.nondeterministic"]


def _png_declaring(width: int, height: int) -> bytes:
    """A PNG (ISO/IEC 15948 chunk layout) whose header declares a huge size over a few bytes of pixel data."""
    import struct
    import zlib

    def chunk(kind: bytes, body: bytes) -> bytes:
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))

    header = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(b"\0" * 64))
            + chunk(b"IEND", b""))


def test_an_image_declaring_a_huge_size_is_refused_before_decoding(tmp_path: Path) -> None:
    e = _figure(tmp_path / "e.png")
    bomb = tmp_path / "bomb.png"
    bomb.write_bytes(_png_declaring(30_000, 30_000))  # 900 million pixels, 2.7 GB if decoded
    code = ("import resource, sys\nresource.setrlimit(resource.RLIMIT_AS, (2 << 30, 2 << 30))\n"
            "from holotype.entry import main\nsys.argv = ['holotype', 'compare', sys.argv[1], sys.argv[2]]\nmain()\n")
    result = subprocess.run([sys.executable, "-c", code, str(e), str(bomb)], capture_output=True, text=True,
                            timeout=120)
    assert result.returncode == 2, result.stderr
    [line] = result.stderr.splitlines()
    assert "bomb.png" in line and "30,000 × 30,000 pixels" in line  # the declared size, read from the header
