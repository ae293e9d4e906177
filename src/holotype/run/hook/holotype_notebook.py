"""Execute a notebook headless: `python -m holotype_notebook NOTEBOOK EXECUTED` (what a notebook analysis runs).

Runs INSIDE the analysis interpreter (holotype's start-up hook folder is on its PYTHONPATH), so the
notebook-execution library must be installed there: nbclient with nbformat, and ipykernel for the kernel.
The kernel is always this interpreter (a kernel spec of holotype's own, first on JUPYTER_PATH), started
with this process' environment: the analysis' seed, `seed_globals` (seeded again by a first cell of
holotype's own, taken out afterwards), thread settings and SOURCE_DATE_EPOCH apply inside it. Cell
timing is not recorded. Standard library only apart from those; Python 3.8 and newer.
"""

import json
import os
import shutil
import sys
import tempfile


def _fail(text):
    sys.stderr.write("holotype: " + text + "\n")
    sys.exit(3)


def main():
    if len(sys.argv) != 3:
        _fail("usage: python -m holotype_notebook NOTEBOOK EXECUTED")
    source, executed = sys.argv[1], sys.argv[2]
    try:
        import nbformat
        from nbclient import NotebookClient
    except ImportError as exc:
        _fail(f"a notebook analysis needs nbclient, nbformat and ipykernel in the analysis interpreter "
              f"{sys.executable}; '{exc.name}' is missing there (install them into that environment)")
    try:
        import ipykernel  # noqa: F401
    except ImportError:
        _fail(f"a notebook analysis needs ipykernel in the analysis interpreter {sys.executable} to run its "
              "kernel; it is missing there (install it into that environment)")
    notebook = nbformat.read(source, as_version=4)
    specs = tempfile.mkdtemp(prefix="holotype-kernel-")
    try:
        folder = os.path.join(specs, "kernels", "holotype-python")
        os.makedirs(folder)
        with open(os.path.join(folder, "kernel.json"), "w", encoding="utf-8") as fh:
            json.dump({"argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
                       "display_name": "holotype analysis interpreter", "language": "python"}, fh)
        os.environ["JUPYTER_PATH"] = specs + os.pathsep + os.environ.get("JUPYTER_PATH", "")
        # a first cell of holotype's own seeds the generators again right before the notebook's cells run (the
        # kernel's start-up draws from `random` after the start-up hook seeded it); it is taken out afterwards
        notebook.cells.insert(0, nbformat.v4.new_code_cell("__import__('holotype_reseed').reseed()"))
        client = NotebookClient(notebook, kernel_name="holotype-python", record_timing=False,
                                resources={"metadata": {"path": os.path.dirname(os.path.abspath(source))}})
        try:
            client.execute()
        finally:
            del notebook.cells[0]
            for cell in notebook.cells:  # numbered as if holotype's cell had not run
                if cell.get("execution_count"):
                    cell["execution_count"] -= 1
                for output in cell.get("outputs", []):
                    if output.get("execution_count"):
                        output["execution_count"] -= 1
            notebook.metadata.pop("kernelspec", None)  # holotype's temporary spec is not the user's
            folder_out = os.path.dirname(executed)
            if folder_out:
                os.makedirs(folder_out, exist_ok=True)
            nbformat.write(notebook, executed)
    except Exception as exc:  # a cell that raised: the executed notebook (with the error) is written above
        last = (str(exc).strip().splitlines() or [""])[-1][:300]
        _fail(f"the notebook {source} failed: {type(exc).__name__}: {last}")
    finally:
        shutil.rmtree(specs, ignore_errors=True)


if __name__ == "__main__":
    main()
