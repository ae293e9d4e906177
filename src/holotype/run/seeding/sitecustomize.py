"""Put on PYTHONPATH by holotype when seed_globals = true: seed the global generators at start-up.

`random` is seeded at once (cheap). NumPy's legacy global generator is seeded right after
`numpy.random` is first imported, by a meta-path hook, so a process that never imports NumPy
pays nothing. Any sitecustomize the environment already had is imported afterwards.
Standard library only; valid on Python 3.8 and newer.
"""

import os
import sys


def _seed_value():
    try:
        return int(os.environ["HOLOTYPE_SEED"])
    except (KeyError, ValueError):
        return None


class _SeedNumpyAfterImport:
    """Finds nothing itself; wraps the real loader of numpy.random to seed it once loaded."""

    def __init__(self, seed):
        self.seed = seed

    def find_spec(self, name, path=None, target=None):
        if name != "numpy.random":
            return None

        for finder in sys.meta_path:
            if finder is self or not hasattr(finder, "find_spec"):
                continue
            spec = finder.find_spec(name, path, target)
            if spec is not None and spec.loader is not None:
                spec.loader = _SeedingLoader(spec.loader, self.seed)
                return spec
        return None


class _SeedingLoader:
    def __init__(self, inner, seed):
        self.inner = inner
        self.seed = seed

    def create_module(self, spec):
        return self.inner.create_module(spec)

    def exec_module(self, module):
        self.inner.exec_module(module)
        try:
            module.seed(self.seed)
        except Exception:
            pass

    def __getattr__(self, name):
        return getattr(self.inner, name)


def _install():
    seed = _seed_value()
    if seed is None:
        return
    import random

    random.seed(seed)
    if "numpy.random" in sys.modules:
        sys.modules["numpy.random"].seed(seed)
    else:
        sys.meta_path.insert(0, _SeedNumpyAfterImport(seed))


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
