"""Put first on PYTHONPATH of every analysis holotype runs. Standard library only; Python 3.8 and newer.

1. With seed_globals (HOLOTYPE_SEED set and HOLOTYPE_SEED_GLOBALS not "0"): seed the global generators at
   start-up. `random` is seeded at once (cheap). NumPy's legacy global generator is seeded right after
   `numpy.random` is first imported, by a meta-path hook, so a process that never imports NumPy pays nothing.
2. When matplotlib is imported, its SVG id salt is set from HOLOTYPE_SVG_SALT (unless the analysis set
   one), so SVG figures are byte-identical run to run (SOURCE_DATE_EPOCH, set by holotype, fixes the dates).
3. With HOLOTYPE_RUN_REPORT set: at exit, write which top-level modules the process imported and, if it
   loaded numeric libraries, which BLAS/LAPACK/OpenMP libraries (threadpoolctl; holotype's own copy is
   appended to sys.path from HOLOTYPE_THREADPOOLCTL, so an installed one wins). That is how holotype
   knows what each analysis used at run time, lazily imported dependencies included.
4. In a `pinpoint` candidate, HOLOTYPE_HIDE_MODULES and HOLOTYPE_HIDE_DISTS (comma-separated) take
   packages away that were added since the record: their top-level modules cannot be imported, and
   importlib.metadata does not list their distributions (the environment as it was recorded).

Any sitecustomize the environment already had is imported afterwards.
"""

import os
import sys


def _seed_value():
    try:
        return int(os.environ["HOLOTYPE_SEED"])
    except (KeyError, ValueError):
        return None


class _AfterImport:
    """Finds nothing itself; wraps the real loader of module `name` to call `then(module)` once it is loaded."""

    def __init__(self, name, then):
        self.name = name
        self.then = then

    def find_spec(self, name, path=None, target=None):
        if name != self.name:
            return None
        for finder in sys.meta_path:
            if finder is self or not hasattr(finder, "find_spec"):
                continue
            spec = finder.find_spec(name, path, target)
            if spec is not None and spec.loader is not None:
                spec.loader = _ThenLoader(spec.loader, self.then)
                return spec
        return None


class _ThenLoader:
    def __init__(self, inner, then):
        self.inner = inner
        self.then = then

    def create_module(self, spec):
        return self.inner.create_module(spec)

    def exec_module(self, module):
        self.inner.exec_module(module)
        try:
            self.then(module)
        except Exception:
            pass  # a help, never a reason for the analysis to fail

    def __getattr__(self, name):
        return getattr(self.inner, name)


def _fix_svg_salt(matplotlib):
    """matplotlib names SVG clip paths and glyphs with random ids unless svg.hashsalt is set: set it (to
    HOLOTYPE_SVG_SALT) when the analysis has not, so an SVG comes out the same at every run."""
    salt = os.environ.get("HOLOTYPE_SVG_SALT")
    if salt and matplotlib.rcParams.get("svg.hashsalt") is None:
        matplotlib.rcParams["svg.hashsalt"] = salt


NUMERIC = ("numpy", "scipy", "numexpr", "sklearn", "torch")


class _SeedsFallback:
    """Last on sys.meta_path: when the analysis interpreter has no holotype of its own, `import holotype.seeds`
    still works, from holotype's standard-library-only seeds module (HOLOTYPE_SEEDS_FILE). An installed
    holotype is always found first; nothing else of holotype is offered."""

    def find_spec(self, name, path=None, target=None):
        import importlib.util

        source = os.environ.get("HOLOTYPE_SEEDS_FILE")
        if not source or not os.path.isfile(source):
            return None
        if name == "holotype":
            spec = importlib.util.spec_from_loader("holotype", _EmptyPackage(), is_package=True)
            return spec
        if name == "holotype.seeds":
            return importlib.util.spec_from_file_location("holotype.seeds", source)
        return None


class _EmptyPackage:
    def create_module(self, spec):
        return None

    def exec_module(self, module):
        module.__path__ = []
        module.__doc__ = "holotype's seeds only (holotype itself is installed in another environment)"


class _Hidden:
    """First on sys.meta_path: the top-level modules of packages a candidate environment takes away."""

    def __init__(self, modules):
        self.modules = modules

    def find_spec(self, name, path=None, target=None):
        if name.partition(".")[0] in self.modules:
            raise ModuleNotFoundError(f"No module named {name!r} (taken away by holotype pinpoint)", name=name)
        return None


def _normalise(name):
    import re

    return re.sub(r"[-_.]+", "-", name or "").lower()


def _hide_distributions(metadata, hidden):
    """importlib.metadata finds distributions through resolvers, one per meta-path finder (Python 3.8 to
    3.13): wrap each so that the hidden ones are never offered."""
    found = metadata.Distribution._discover_resolvers

    def keep(resolver):
        def resolve(*args, **kwargs):
            return (d for d in resolver(*args, **kwargs) if _normalise(d.metadata["Name"]) not in hidden)
        return resolve

    metadata.Distribution._discover_resolvers = staticmethod(lambda: [keep(r) for r in found()])


def _hide():
    modules = {m for m in os.environ.get("HOLOTYPE_HIDE_MODULES", "").split(",") if m}
    dists = {_normalise(d) for d in os.environ.get("HOLOTYPE_HIDE_DISTS", "").split(",") if d}
    if modules:
        sys.meta_path.insert(0, _Hidden(modules))
    if dists:
        if "importlib.metadata" in sys.modules:
            _hide_distributions(sys.modules["importlib.metadata"], dists)
        else:
            sys.meta_path.insert(0, _AfterImport("importlib.metadata", lambda m: _hide_distributions(m, dists)))


def _report():
    path = os.environ.get("HOLOTYPE_RUN_REPORT")
    if not path:
        return
    modules = sorted({name.partition(".")[0] for name in list(sys.modules) if name and not name.startswith("_")})
    libraries = None
    if any(name in sys.modules for name in NUMERIC):
        try:
            try:
                from threadpoolctl import threadpool_info
            except ImportError:
                folder = os.environ.get("HOLOTYPE_THREADPOOLCTL")
                if not folder:
                    raise
                sys.path.append(folder)
                from threadpoolctl import threadpool_info
            libraries = [dict(info) for info in threadpool_info()]
        except Exception:
            libraries = None
    try:
        import json

        with open(path, "w", encoding="utf-8") as fh:
            json.dump({"modules": modules, "libraries": libraries}, fh)
    except Exception:
        pass  # the report is a help, never a reason for the analysis to fail


def _install():
    import atexit

    atexit.register(_report)
    sys.meta_path.append(_SeedsFallback())
    _hide()
    if "matplotlib" in sys.modules:
        _fix_svg_salt(sys.modules["matplotlib"])
    else:
        sys.meta_path.insert(0, _AfterImport("matplotlib", _fix_svg_salt))
    seed = _seed_value()
    if seed is None or os.environ.get("HOLOTYPE_SEED_GLOBALS") == "0":
        return
    import random

    random.seed(seed)
    if "numpy.random" in sys.modules:
        sys.modules["numpy.random"].seed(seed)
    else:
        sys.meta_path.insert(0, _AfterImport("numpy.random", lambda module: module.seed(seed)))


def _chain_previous():
    # import the sitecustomize that would have run without holotype's folder on sys.path
    here = os.path.dirname(os.path.abspath(__file__))
    import importlib.machinery
    import importlib.util

    others = [p for p in sys.path if os.path.abspath(p or ".") != here]
    spec = importlib.machinery.PathFinder.find_spec("sitecustomize", others)
    if spec is None or spec.loader is None:
        return
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)


_install()
_chain_previous()
