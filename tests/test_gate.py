"""A green check must mean nothing that matters moved (the gate-integrity work, in progress)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

from conftest import run_cli, write
from holotype.lockfile import read_lock


def test_an_output_inside_a_data_folder_is_not_data(tmp_path: Path) -> None:
    write(tmp_path / "data" / "raw.csv", "x\n1\n")
    write(tmp_path / "clean.py", "import os\nos.makedirs('data/processed', exist_ok=True)\n"
                                 "open('data/processed/clean.csv', 'w').write('x\\n1\\n')\n")
    write(tmp_path / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\n'
                                      '[analyses.clean]\ncommand = "python clean.py"\n'
                                      'outputs = ["data/processed/clean.csv"]\n')
    assert run_cli("record", "-C", tmp_path).code == 0
    lock = read_lock(tmp_path / "holotype.lock")
    assert "data/raw.csv" in lock.data and "data/processed/clean.csv" not in lock.data
    result = run_cli("check", "--strict", "-C", tmp_path, "--format", "json")
    assert result.code == 0, result.out
    assert not [f for f in json.loads(result.out)["findings"] if f["area"] == "data"]


def test_an_executed_notebook_written_under_a_code_folder_is_not_code(tmp_path: Path) -> None:
    write(tmp_path / "data" / "raw.csv", "x\n1\n")
    write(tmp_path / "analysis" / "make.py", "import os, json\nos.makedirs('analysis/executed', exist_ok=True)\n"
                                              "json.dump({'cells': [], 'metadata': {}, 'nbformat': 4, "
                                              "'nbformat_minor': 5}, open('analysis/executed/run.ipynb', 'w'))\n")
    write(tmp_path / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\n'
                                      '[analyses.nb]\ncommand = "python analysis/make.py"\n'
                                      'outputs = ["analysis/executed/run.ipynb"]\n')
    assert run_cli("record", "-C", tmp_path).code == 0
    assert "analysis/executed/run.ipynb" not in read_lock(tmp_path / "holotype.lock").code
    assert run_cli("check", "--strict", "-C", tmp_path).code == 0  # not "modified" right after the record


def test_a_data_pattern_naming_an_output_is_a_config_error(tmp_path: Path) -> None:
    write(tmp_path / "data" / "raw.csv", "x\n1\n")
    write(tmp_path / "holotype.toml", 'data = ["data", "results/*.csv"]\nseed = 1\n'
                                      '[analyses.s]\ncommand = "python s.py"\noutputs = ["results/summary.csv"]\n')
    result = run_cli("record", "--no-run", "-C", tmp_path)
    assert result.code == 2
    assert "'results/*.csv'" in result.err and "'results/summary.csv'" in result.err and "analysis 's'" in result.err
