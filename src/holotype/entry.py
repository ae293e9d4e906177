"""Console-script entry: answers --version before loading the command framework, then hands over to cli."""

from __future__ import annotations

import os
import sys


def main() -> None:
    try:
        if sys.argv[1:] == ["--version"]:
            from holotype import __version__

            print(f"holotype {__version__}")
            return
        if sys.argv[1:2] == ["check"]:  # its stamp workers start while the rest of holotype loads
            from holotype.capture.head_start import begin_early

            begin_early(sys.argv[2:])
        from holotype.cli import main as cli_main

        cli_main()
    except SystemExit as exc:
        if sys.flags.inspect or os.environ.get("PYTHONINSPECT"):
            # in inspect mode Python would print the SystemExit as a traceback and stay: leave with the code
            for stream in (sys.stdout, sys.stderr):
                if stream is not None:
                    stream.flush()
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 2)
            os._exit(code)
        raise
