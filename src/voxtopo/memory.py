"""How much memory a run may use, and refusing runs that would not fit."""

from __future__ import annotations

import math
import mmap
import os
from contextlib import contextmanager

from .errors import InputError, TooBigError

#: Fraction of the currently available memory a single run may plan to use.
BUDGET_FRACTION = 0.8


def available_bytes() -> int:
    """Memory available to new allocations, from /proc/meminfo (or os.sysconf)."""
    override = os.environ.get("VOXTOPO_MEMORY_LIMIT")
    if override:
        return _limit_from_environment(override)
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_AVPHYS_PAGES")


def _limit_from_environment(text: str) -> int:
    try:
        limit = float(text)
    except ValueError:
        limit = float("nan")
    if not (math.isfinite(limit) and limit > 0):
        raise InputError(f"The environment variable VOXTOPO_MEMORY_LIMIT should be a positive "
                         f"number of bytes such as 8e9, got {text!r}; correct or unset it.")
    return int(limit)


def human(nbytes: float) -> str:
    """1234567 -> '1.2 MB'."""
    for unit in ("B", "kB", "MB", "GB", "TB"):
        if abs(nbytes) < 1000 or unit == "TB":
            return f"{nbytes:.1f} {unit}" if unit != "B" else f"{int(nbytes)} B"
        nbytes /= 1000
    return f"{nbytes:.1f} TB"


def ensure_fits(needed: int, what: str, remedy: str) -> None:
    """Raise TooBigError when ``needed`` bytes exceed the memory budget.

    The environment variable VOXTOPO_MEMORY_LIMIT (bytes) replaces the measured
    available memory; tests use it to exercise the refusal without huge arrays.
    """
    budget = int(available_bytes() * BUDGET_FRACTION)
    if needed > budget:
        raise TooBigError(
            f"{what} would need about {human(needed)} of memory but only {human(budget)} "
            f"is available; {remedy}."
        )


@contextmanager
def reported_as_too_big(what: str, planned: int, remedy: str):
    """Turn an allocation that fails inside the block into one sentence with the plan.

    The plan was checked with :func:`ensure_fits` before the work started, so a failure
    here (numpy's "Unable to allocate ...", numba's "Allocation failed ...") means memory
    was taken meanwhile or an estimate fell short; the user gets what was planned and a
    remedy instead of the library's text. A TooBigError from a check inside passes as is.
    """
    try:
        yield
    except TooBigError:
        raise
    except MemoryError:
        raise TooBigError(f"{what} ran out of memory although about {human(planned)} was "
                          f"planned and fitted when it started; close other programs, or "
                          f"{remedy}.") from None


def worker_memory_limits(scheduler) -> list[int]:
    """The memory limits, in bytes, of the workers of a distributed dask scheduler (a
    ``Client``); empty for another scheduler or workers without a limit."""
    info = getattr(scheduler, "scheduler_info", None)
    if info is None:
        return []
    limits = [w.get("memory_limit") or 0 for w in info().get("workers", {}).values()]
    return [limit for limit in limits if limit > 0]


def _mapping(array):
    """The memory map ``array`` reads from, or None."""
    base = array
    while base is not None and not isinstance(base, mmap.mmap):
        base = getattr(base, "base", None)
    return base


def is_mapped(array) -> bool:
    """True when ``array`` is a view of a memory-mapped file (``load(..., mapped=True)``)."""
    return _mapping(array) is not None


def release_pages(array) -> bool:
    """Give back the memory of the file pages a memory-mapped ``array`` has read.

    The pages are read from the file again if the array is used afterwards, so this is
    safe at any time; it is worth doing once an array will hardly be read any more (a gray
    scan once it is segmented). Nothing happens to an array in memory or on a system
    without ``madvise``.

    Returns
    -------
    bool
        True when pages were given back.

    Examples
    --------
    >>> import numpy as np
    >>> release_pages(np.zeros(3))
    False
    """
    mapping = _mapping(array)
    if mapping is None or not hasattr(mmap, "MADV_DONTNEED"):
        return False
    mapping.madvise(mmap.MADV_DONTNEED)
    return True
