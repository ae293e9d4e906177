"""Console-script entry: answers --version before loading the command framework, then hands over to cli."""

from __future__ import annotations

import sys


def main() -> None:
    if sys.argv[1:] == ["--version"]:
        from holotype import __version__

        print(f"holotype {__version__}")
        return
    from holotype.cli import main as cli_main

    cli_main()
