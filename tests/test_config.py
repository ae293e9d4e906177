"""The config loader: good files load, bad ones stop with exit 2 and one line naming the file."""

from __future__ import annotations

from pathlib import Path

import pytest

from conftest import run_cli, write
from holotype.config import load_config
from holotype.errors import ConfigError


def test_full_example_from_the_interface_loads(tmp_path: Path) -> None:
    write(tmp_path / "holotype.toml", """\
        python = ".venv/bin/python"
        data = ["data"]
        code = ["analysis"]
        exclude = ["**/*.tmp"]
        seed = 20261201
        threads = 1
        seed_globals = true

        [tolerance]
        rtol = 1e-9
        atol = 1e-12

        [[rules]]
        match = "results/pca_*.csv:PC*"
        sign_free = true
        rtol = 1e-6

        [analyses.summary]
        command = "python analysis/summary.py"
        outputs = ["results/summary.csv", "results/tests.json"]
        inputs = ["data/survey.csv"]
        timeout = 600
        """)
    config = load_config(tmp_path)
    assert config.seed == 20261201 and config.threads == 1 and config.seed_globals
    assert config.analyses[0].outputs == ("results/summary.csv", "results/tests.json")
    tol = config.rulebook.for_column("results/pca_scores.csv", "PC2")
    assert tol.sign_free and tol.rtol == 1e-6 and tol.atol == 1e-12
    assert not config.rulebook.for_column("results/summary.csv", "PC2").sign_free


def test_tool_table_in_pyproject_and_precedence_warning(tmp_path: Path) -> None:
    write(tmp_path / "pyproject.toml", "[tool.holotype]\nseed = 5\n")
    assert load_config(tmp_path).seed == 5
    write(tmp_path / "holotype.toml", "seed = 6\n")
    config = load_config(tmp_path)
    assert config.seed == 6 and any("using holotype.toml" in w for w in config.warnings)


def test_unknown_key_warns_with_a_suggestion(tmp_path: Path) -> None:
    write(tmp_path / "holotype.toml", 'dat = ["data"]\n')
    assert any("did you mean 'data'" in w for w in load_config(tmp_path).warnings)


@pytest.mark.parametrize(("text", "words"), [
    ("seed = \n", "line 1, column"),
    ('seed = "abc"\n', "'seed' should be a whole number"),
    ("seed = -1\n", "between 0"),
    ("threads = 0\n", "'threads'"),
    ("[tolerance]\nrtol = nan\n", "finite number"),
    ("[tolerance]\nrtol = -1\n", "finite number"),
    ("[tolerance]\nulps = 1.5\n", "whole number"),
    ('data = ["../outside"]\n', "leaves the project"),
    ('data = ["/etc/passwd"]\n', "leaves the project"),
    ('data = ["data\\\\x.csv"]\n', "backslashes"),
    ("[analyses.a]\ncommand = \"python a.py\"\noutputs = [\"o.csv\"]\ntimeout = 0\n", "timeout"),
    ("[analyses.a]\ncommand = \"python a.py\"\noutputs = []\n", "at least one output"),
    ("[analyses.a]\noutputs = [\"o.csv\"]\n", ".command' should be"),
    ('[policy]\n"package.unrelatd" = "fail"\n', "did you mean 'package.unrelated'"),
    ('[[rules]]\nrtol = 1e-3\n', "match"),
])
def test_bad_config_is_one_clear_line(tmp_path: Path, text: str, words: str) -> None:
    (tmp_path / "holotype.toml").write_text(text)
    with pytest.raises(ConfigError) as err:
        load_config(tmp_path)
    message = str(err.value)
    assert "holotype.toml" in message and words in message and "\n" not in message
    result = run_cli("check", "-C", tmp_path)
    assert result.code == 2 and result.err.count("\n") == 1 and "Traceback" not in result.err


def test_start_refuses_to_overwrite(tmp_path: Path) -> None:
    (tmp_path / "data").mkdir()
    assert run_cli("start", "-C", tmp_path).code == 0
    text = (tmp_path / "holotype.toml").read_text()
    assert 'data = ["data"]' in text and "seed = " in text
    again = run_cli("start", "-C", tmp_path)
    assert again.code == 2 and "never overwrites" in again.err
    assert (tmp_path / "holotype.toml").read_text() == text


def test_record_draws_and_writes_back_a_seed(tmp_path: Path) -> None:
    write(tmp_path / "holotype.toml", "# my project\ndata = []\n\n[tolerance]\nrtol = 1e-6\n")
    assert run_cli("record", "--no-run", "-C", tmp_path).code == 0
    config = load_config(tmp_path)
    assert config.seed is not None and config.rulebook.default.rtol == 1e-6
    assert (tmp_path / "holotype.toml").read_text().startswith("# my project\n")


def test_version_and_module_entry_point() -> None:
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", "holotype", "--version"], capture_output=True, text=True)
    assert out.returncode == 0 and out.stdout.startswith("holotype ")
