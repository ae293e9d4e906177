"""`holotype start`: look at the folder and write a starter holotype.toml."""

from __future__ import annotations

from pathlib import Path

from holotype.atomic import write_atomic
from holotype.capture.environment import VENV_INTERPRETERS
from holotype.config import CONFIG_NAME
from holotype.errors import HolotypeError
from holotype.seeds import draw_seed

DATA_FOLDER_NAMES = ("data", "raw", "raw_data", "input", "inputs", "dataset", "datasets")
ANALYSIS_FOLDER_NAMES = ("analysis", "analyses", "scripts", "notebooks", "src")


def _toml_str(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def starter_config(root: Path, seed: int) -> str:
    """The text of a starter holotype.toml for the folder at `root`."""
    lines = ["# holotype configuration: what to record and how closely re-runs must match.",
             "# Reference: docs/configuration.md in holotype's documentation.", ""]
    for rel in VENV_INTERPRETERS:
        if (root / rel).exists():
            lines.append(f"python = {_toml_str(rel)}  # the analysis environment")
            break
    else:
        lines.append('# python = ".venv/bin/python"   # the analysis environment (default: the running Python)')
    data = [name for name in DATA_FOLDER_NAMES if (root / name).is_dir()]
    if data:
        lines.append("data = [" + ", ".join(_toml_str(d) for d in data) + "]")
    else:
        lines.append('data = []  # add your data files or folders, e.g. ["data"]')
    lines += [
        '# code = ["analysis"]  # default: every .py and .ipynb outside data and virtual environments',
        'exclude = ["**/*.tmp"]',
        f"seed = {seed}",
        "threads = 1  # pin BLAS/OpenMP threads in analyses for bit-stable sums",
        "",
        "[tolerance]",
        "rtol = 1e-9",
        "atol = 1e-12",
        "",
        "# [[rules]]",
        '# match = "results/pca_*.csv:PC*"',
        "# sign_free = true",
        "# rtol = 1e-6",
    ]
    scripts: list[Path] = []
    for folder in ANALYSIS_FOLDER_NAMES:
        if (root / folder).is_dir():
            scripts.extend(sorted((root / folder).glob("*.py")))
    for script in scripts[:20]:
        rel = script.relative_to(root).as_posix()
        name = script.stem.replace(" ", "_")
        lines += ["", f"# [analyses.{name}]", f'# command = "python {rel}"',
                  '# outputs = ["results/..."]   # the files this script writes']
    if not scripts:
        lines += ["", "# [analyses.summary]", '# command = "python analysis/summary.py"',
                  '# outputs = ["results/summary.csv"]']
    return "\n".join(lines) + "\n"


def start_project(root: Path) -> Path:
    """Write holotype.toml in `root`; refuse if one exists."""
    target = Path(root) / CONFIG_NAME
    if not Path(root).is_dir():
        raise HolotypeError("project folder does not exist", root)
    if target.exists():
        raise HolotypeError("already exists; holotype start never overwrites it", target)
    write_atomic(target, starter_config(Path(root), draw_seed()))
    return target
