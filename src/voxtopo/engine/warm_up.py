"""Compile and cache the engine's numba kernels once, so a user's first run starts at once.

``python -m voxtopo.engine.warm_up`` (run by ``make install``) computes tiny diagrams in
every construction and sweep direction for the value types scans come in, in memory and
chunk by chunk, and a tiny pore analysis in memory and out of core; numba keeps the
compiled kernels in the package's ``__pycache__`` folders for every later process (dask
workers included).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np

#: Where numba keeps the compiled kernels of the engine (``cache=True``).
_CACHE = Path(__file__).resolve().parent / "__pycache__"


def kernels_cached() -> bool:
    """True when compiled kernels of the engine are on disk (numba's index files)."""
    return _CACHE.is_dir() and any(_CACHE.glob("*.nbi"))


def _every_sweep(values) -> None:
    from . import persistence

    for neighbourhood in ((8, 4) if values.ndim == 2 else (26, 6)):
        for superlevel in (False, True):
            persistence(values, superlevel=superlevel, neighbourhood=neighbourhood)


def _every_chunked_sweep(values) -> None:
    from .chunked import chunked_persistence_and_border_merges

    chunks = (4,) * values.ndim
    for neighbourhood in ((8, 4) if values.ndim == 2 else (26, 6)):
        for superlevel in (False, True):
            chunked_persistence_and_border_merges(values, superlevel=superlevel,
                                                  neighbourhood=neighbourhood, chunks=chunks,
                                                  scheduler="sync")


def _out_of_core_pores(mask) -> None:
    from ..porosity._out_of_core import analyse_chunked

    with tempfile.TemporaryDirectory(prefix="voxtopo-warm-up-") as scratch:
        analyse_chunked(mask, scratch=Path(scratch), chunks=(4,) * mask.ndim,
                        scheduler="sync")


def warm_up() -> None:
    """Run the engine's kernels once on tiny inputs of every kind."""
    from ..porosity import analyse
    from . import _levels

    rng = np.random.default_rng(0)
    for shape in ((9, 9), (6, 6, 6)):
        # integer scans (CT numbers are signed 16-bit) and floats over few levels, which
        # run on uint16 level numbers
        for dtype in (np.uint8, np.uint16, np.int16, np.float32, np.float64):
            _every_sweep((rng.random(shape) * 200).astype(dtype))
            _every_chunked_sweep((rng.random(shape) * 200).astype(dtype))
        analyse(rng.random(shape) < 0.5)
        _out_of_core_pores((rng.random(shape) < 0.5).astype(np.uint8))
    # floats over more than 2^16 levels run on uint32 level numbers; over more than
    # _levels.MOST_LEVELS, on their sorted order (made to happen here on a tiny volume)
    _every_sweep(rng.random((42, 42, 42)).astype(np.float32))
    most = _levels.MOST_LEVELS
    _levels.MOST_LEVELS = 0
    try:
        for shape in ((9, 9), (6, 6, 6)):
            for dtype in (np.float32, np.float64):
                _every_sweep(rng.random(shape).astype(dtype))
    finally:
        _levels.MOST_LEVELS = most


if __name__ == "__main__":
    warm_up()
