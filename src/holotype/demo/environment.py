"""The demo's analysis environment: a virtual environment in the demo folder that sees holotype's own
packages (NumPy and the rest) and holds three invented lake-survey libraries, installed from wheels the
demo writes itself (offline), so that the tour can upgrade them and let `pinpoint` find which one moved
a number. Nothing is installed into holotype's own environment."""

from __future__ import annotations

import importlib.util
import site
import subprocess
import sys
from pathlib import Path

from holotype.demo.wheels import write_wheel
from holotype.errors import HolotypeError

# Invented libraries. lake-optics 2.0 recalibrates its turbidity coefficient (an invented change); the
# other two change nothing a result depends on.
LIBRARIES: dict[str, dict[str, dict[str, str]]] = {
    "lake-optics": {
        "1.0": {"lake_optics/__init__.py": '"""Light attenuation from turbidity (invented coefficients)."""\n'
                                           "BASE, PER_NTU = 0.30, 0.120\n\n\ndef attenuation(turbidity_ntu):\n"
                                           "    return BASE + PER_NTU * turbidity_ntu\n"},
        "2.0": {"lake_optics/__init__.py": '"""Light attenuation from turbidity (invented coefficients)."""\n'
                                           "BASE, PER_NTU = 0.30, 0.125  # recalibrated in 2.0\n\n\n"
                                           "def attenuation(turbidity_ntu):\n"
                                           "    return BASE + PER_NTU * turbidity_ntu\n"},
    },
    "lake-units": {
        "1.0": {"lake_units/__init__.py": "PERCENT_LIGHT_LEFT = 1.0\n"},
        "2.0": {"lake_units/__init__.py": "PERCENT_LIGHT_LEFT = 1.0\nFEET_PER_METRE = 3.28084  # new in 2.0\n"},
    },
    "lake-tables": {
        "1.0": {"lake_tables/__init__.py": "def cell(x):\n    return repr(float(x))\n"},
        "2.0": {"lake_tables/__init__.py": "def cell(x):\n    return repr(float(x))\n\n\n"
                                           "def header(names):  # new in 2.0\n    return ','.join(names)\n"},
    },
}


def can_build() -> bool:
    """The demo environment needs an installer importable from holotype's own environment."""
    return importlib.util.find_spec("pip") is not None


def wheel_folder(folder: Path) -> Path:
    return folder / ".venv" / "demo-wheels"


def build_demo_environment(folder: Path) -> str:
    """Create folder/.venv seeing holotype's packages, with the invented libraries at 1.0; its interpreter."""
    venv = folder / ".venv"
    made = subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(venv)], capture_output=True,
                          text=True)
    if made.returncode != 0:
        raise HolotypeError(f"cannot create the demo environment: {made.stderr.strip()[-300:]}", venv)
    python = venv / "bin" / "python"
    found = subprocess.run([str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                           capture_output=True, text=True, check=True).stdout.strip()
    own = [p for p in (*site.getsitepackages(), site.getusersitepackages()) if Path(p).is_dir()]
    # an `import` line in a .pth runs at start-up: addsitedir also reads the .pth files of those folders
    Path(found, "holotype-demo-base.pth").write_text(
        "".join(f"import site; site.addsitedir({p!r})\n" for p in own if Path(p).resolve() != Path(found).resolve()))
    wheels = wheel_folder(folder)
    for name, versions in LIBRARIES.items():
        for version, sources in versions.items():
            write_wheel(wheels, name, version, sources)
    install_libraries(folder, str(python), "1.0")
    return str(python)


def install_libraries(folder: Path, python: str, version: str) -> None:
    """Every invented library at `version`, from the demo's own wheels."""
    done = subprocess.run([python, "-m", "pip", "install", "--quiet", "--disable-pip-version-check", "--no-index",
                           "--no-deps", "--find-links", str(wheel_folder(folder)),
                           *(f"{name}=={version}" for name in LIBRARIES)], capture_output=True, text=True)
    if done.returncode != 0:
        raise HolotypeError(f"cannot install the demo's invented libraries: {done.stderr.strip()[-300:]}",
                            folder / ".venv")
