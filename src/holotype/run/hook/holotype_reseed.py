"""Seed the global generators again, now: run by a notebook's kernel in a first cell of holotype's own.

The kernel's own start-up (sockets, session ids) draws from `random` after holotype's start-up hook
seeded it, so the cells would otherwise see a state that differs from run to run. Standard library only.
"""

import os
import random
import sys


def reseed():
    try:
        seed = int(os.environ["HOLOTYPE_SEED"])
    except (KeyError, ValueError):
        return
    if os.environ.get("HOLOTYPE_SEED_GLOBALS") == "0":
        return
    random.seed(seed)
    if "numpy.random" in sys.modules:
        sys.modules["numpy.random"].seed(seed)

