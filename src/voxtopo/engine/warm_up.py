"""Compile and cache the engine's numba kernels once, so a user's first run starts at once.

``python -m voxtopo.engine.warm_up`` (run by ``make install``) computes tiny diagrams in
every construction and sweep direction, and a tiny pore analysis; numba keeps the compiled
kernels in the package's ``__pycache__`` folders for every later process.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

#: Where numba keeps the compiled kernels of the engine (``cache=True``).
_CACHE = Path(__file__).resolve().parent / "__pycache__"


def kernels_cached() -> bool:
    """True when compiled kernels of the engine are on disk (numba's index files)."""
    return _CACHE.is_dir() and any(_CACHE.glob("*.nbi"))


def warm_up() -> None:
    """Run the engine's kernels once on tiny inputs of every kind."""
    from . import persistence
    from ..porosity import analyse

    rng = np.random.default_rng(0)
    for shape in ((9, 9), (6, 6, 6)):
        for dtype in (np.uint8, np.uint16, np.float32, np.float64):
            values = (rng.random(shape) * 200).astype(dtype)
            for neighbourhood in ((8, 4) if len(shape) == 2 else (26, 6)):
                for superlevel in (False, True):
                    persistence(values, superlevel=superlevel, neighbourhood=neighbourhood)
        analyse(rng.random(shape) < 0.5)


if __name__ == "__main__":
    warm_up()
