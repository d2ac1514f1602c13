"""voxtopo's own exact persistence engine (Z/2 coefficients, no periodic boundaries).

The engine runs two union-find sweeps with the elder rule over the voxels
(:mod:`voxtopo.engine._union_find`): one gives dimension 0, the other, by the duality of
image constructions, dimension d-1 (loops of a 2D image, cavities of a 3D volume). Each
sweep first links, in one pass in memory order, every voxel that cannot merge two
components, then sorts only the remaining voxels and visits them in value order. A 3D
volume's dimension 1 comes from the reduction over the implicit cubical complex in
:mod:`voxtopo.engine._reduction`. The diagram equals gudhi's pair for pair in value; where
several voxels share a value, the reported locations follow the tie rule documented in
:mod:`voxtopo.engine._union_find`.

Every reported location is a voxel whose value is exactly the pair's birth or death: the
values are read back from the input array at those locations, never recomputed, so a
superlevel diagram carries the scan's own numbers bit for bit.
"""

from __future__ import annotations

import os
import threading

import numpy as np

from ..errors import Cancelled, InputError
from ..memory import BUDGET_FRACTION, available_bytes
from . import _levels, _union_find
from ._pairs import RawPairs

__all__ = ["compute", "bytes_needed", "BYTES_PER_VOXEL", "default_threads"]

#: Environment variable that sets the engine's threads (batch workers set it to 1).
THREADS_VARIABLE = "VOXTOPO_THREADS"

#: Sweep steps between two progress reports (and cancellation checks).
_STEPS_PER_REPORT = 1 << 21

#: Pairs per voxel left for the sweep proper, for sizing its first output buffers (they
#: double when needed).
_FIRST_BUFFER_FRACTION = 1 / 16

#: Memory planning, from peaks measured on the benchmark cases (benchmarks/bench_engine.py,
#: benchmarks/bench_memory.py): the share of voxels left for the sweep proper (0.6 % to 7 %
#: measured), the pairs per voxel (0.3 % on smooth noise, 3 % on noisy uint8 beads, 3.7 %
#: on noisy uint16 beads; white noise has more), and the bytes a pair holds while the
#: dimension-1 reduction runs (two locations, int64 at worst).
_PLANNED_SWEPT_FRACTION = 0.05
PLANNED_PAIRS_PER_VOXEL = 0.04
_BYTES_PER_PAIR_HELD = 16


def compute(values: np.ndarray, *, superlevel: bool, construction: str,
            periodic: tuple[bool, ...] | None = None, field: int = 2,
            progress=None, threads: int | None = None) -> RawPairs:
    """Persistence pairs of a 2D image or 3D volume with voxtopo's own engine.

    Parameters
    ----------
    values : ndarray, 2D (y, x) or 3D (z, y, x)
        Integer or float gray values (or distances), all finite.
    superlevel : bool
        Sweep from high to low values; births are then the higher values.
    construction : {"voxel", "vertex"}
        "voxel": voxels are the top cells and touch through faces, edges and corners
        (8/26-neighbourhood); "vertex": voxels are the vertices, joined to their 4/6
        face neighbours.
    periodic : None
        Periodic boundaries are not handled by this engine (use the gudhi backend).
    field : int
        Must be 2: the engine computes with Z/2 coefficients.
    progress : callable(phase: str, fraction: float), optional
        Called at coarse checkpoints in the phases "dimension 0" and "dimension 1" (2D)
        or "dimension 0", "dimension 2" and the reduction's "dimension 1" (3D); the
        linking pass is the first half of a sweep's fraction. Raising
        :class:`voxtopo.Cancelled` inside it stops the run; nothing is kept. It is
        always called from the calling thread.
    threads : int, optional
        Threads for a 3D volume: with 2 or more, dimension 1 runs in a second thread
        beside the two sweeps when both fit in the memory available together (else after
        them, its memory-order pass shared by two threads); the result is the same.
        Default :func:`default_threads`.

    Returns
    -------
    RawPairs
        Pairs of non-zero persistence with C-order flat birth and death locations and
        one essential class in dimension 0 (death +inf, superlevel -inf).

    Notes
    -----
    Dimension 0 is a union-find sweep with the elder rule; dimension d-1 is the same
    sweep run the other way in the other construction, with the outside of the image as
    the eldest node (Garin, Heiss, Maggs, Bleile & Robins 2020, "Duality in persistent
    homology of images"). The voxels a sweep must visit in order (those whose earlier
    neighbours are not already connected inside their 3x3x3 cube) are sorted by a
    counting sort for 8- and 16-bit data, by a stable comparison sort otherwise. Floats
    over at most :data:`voxtopo.engine._levels.MOST_LEVELS` distinct values (distance
    transforms, integer data stored as floats) run on their level numbers, which order
    the voxels the same way; the values are read back from ``values``.

    Examples
    --------
    >>> import numpy as np
    >>> ring = np.ones((5, 5)); ring[1:4, 1:4] = 0; ring[2, 2] = 1
    >>> pairs = compute(ring, superlevel=False, construction="voxel")
    >>> sorted(zip(pairs.dim.tolist(), pairs.birth.tolist(), pairs.death.tolist()))
    [(0, 0.0, inf), (1, 0.0, 1.0)]
    """
    _check_request(values, construction, periodic, field)
    # the pairs' values are read back from ``flat``; the sweeps and the reduction run on
    # ``work``: the values, or their level numbers when they are floats over few levels
    # (the same order, the integers' lighter path; engine/_levels.py)
    flat = np.ascontiguousarray(values).reshape(-1)
    levels = _levels.float_levels(values)
    work = values if levels is None else levels[0]
    del levels
    work_flat = np.ascontiguousarray(work).reshape(-1)
    ndim = values.ndim
    shape = np.array((1,) * (3 - ndim) + tuple(values.shape), dtype=np.int64)
    ascending = not superlevel

    threads = threads or default_threads()
    vertex = construction == "vertex"
    loops = None
    links = None
    if ndim == 3 and threads >= 2 and _side_by_side_fits(work.shape, work.dtype, vertex):
        # dimension 1 runs beside the two sweeps: all three kernels release the GIL
        loops = _Background(_dimension_one, work, flat, superlevel, construction, 2)
    elif ndim == 3:
        # one after the other, the reduction taking over the sweeps' union-find buffer
        # (given away in a list, so that it is freed as soon as the reduction is done with it)
        entries = _links_size(values.shape, vertex)
        links = [np.empty(entries, dtype=_union_find.index_dtype(entries))]
    try:
        roots_0, voxels_0, roots_top, voxels_top = _sweeps(work_flat, shape, ndim, ascending,
                                                           construction, progress,
                                                           links[0] if links else None)
        if ndim == 3:
            dim1 = (loops.result(progress) if loops is not None else
                    _dimension_one(work, flat, superlevel, construction, threads,
                                   progress, links))
    finally:
        if loops is not None:
            loops.stop()
    del links, work, work_flat
    # The eldest voxel of all: first in (value, flat index) order, or last for superlevel.
    eldest = int(np.argmin(flat)) if ascending else flat.size - 1 - int(np.argmax(flat[::-1]))

    top = ndim - 1
    forever = -np.inf if superlevel else np.inf
    dims = [np.zeros(len(roots_0) + 1, np.int8), np.full(len(voxels_top), top, np.int8)]
    births = [flat[roots_0], flat[[eldest]], flat[voxels_top]]
    deaths = [flat[voxels_0], np.array([forever]), flat[roots_top]]
    birth_index = [roots_0, np.array([eldest]), voxels_top]
    death_index = [voxels_0, np.array([-1]), roots_top]
    if ndim == 3:
        dims.append(np.ones(len(dim1[0]), np.int8))
        for column, part in zip((births, deaths, birth_index, death_index), dim1):
            column.append(part)
    return RawPairs(
        dim=np.concatenate(dims),
        birth=np.concatenate([b.astype(np.float64) for b in births]),
        death=np.concatenate([d.astype(np.float64) for d in deaths]),
        birth_index=np.concatenate([i.astype(np.int64) for i in birth_index]),
        death_index=np.concatenate([i.astype(np.int64) for i in death_index]),
        engine="voxtopo",
    )


def default_threads() -> int:
    """Threads the engine uses: ``$VOXTOPO_THREADS`` if set, else 2 when this process may
    run on two cores or more (the engine has at most two independent parts), else 1."""
    setting = os.environ.get(THREADS_VARIABLE, "").strip()
    if setting:
        try:
            return max(1, int(setting))
        except ValueError:
            raise InputError(f"{THREADS_VARIABLE} should be a whole number of threads, got "
                             f"{setting!r}.") from None
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cores = os.cpu_count() or 1
    return min(2, cores)


class _Background:
    """``work(*args, progress=...)`` in a second thread.

    The user's progress callback is only ever called from the calling thread: the worker
    records its latest (phase, fraction), which :meth:`result` passes on while it waits,
    and stops with :class:`Cancelled` at its next checkpoint once :meth:`stop` is called.
    """

    def __init__(self, work, *args):
        self._latest = None
        self._stopping = threading.Event()
        self._outcome = None
        self._thread = threading.Thread(target=self._run, args=(work, args), daemon=True,
                                        name="voxtopo-dimension-1")
        self._thread.start()

    def _checkpoint(self, phase, fraction):
        if self._stopping.is_set():
            raise Cancelled("The run was stopped.")
        self._latest = (phase, fraction)

    def _run(self, work, args):
        try:
            self._outcome = (True, work(*args, self._checkpoint))
        except BaseException as error:  # handed to the caller by result()
            self._outcome = (False, error)

    def result(self, progress=None):
        reported = None
        while self._thread.is_alive():
            self._thread.join(0.1)
            latest = self._latest
            if progress is not None and latest is not None and latest != reported:
                progress(*latest)
                reported = latest
        finished, value = self._outcome
        if not finished:
            raise value
        if progress is not None and self._latest is not None and self._latest != reported:
            progress(*self._latest)
        return value

    def stop(self):
        """Ask the worker to stop and wait for it (it stops at its next checkpoint)."""
        self._stopping.set()
        self._thread.join()


def _sweeps(flat, shape, ndim, ascending, construction, progress, links=None):
    """(roots, voxels) of the dimension-0 sweep and of the dual dimension d-1 sweep.

    ``links``: a buffer of at least one entry per voxel and one more to hold the
    union-find (else a new one is made).
    """
    parent = (links[:flat.size + 1] if links is not None else
              np.empty(flat.size + 1, dtype=_union_find.index_dtype(flat.size)))
    roots_0, voxels_0 = _sweep(flat, shape, ndim, ascending=ascending,
                               corners=construction == "voxel", with_outside=0,
                               parent=parent, progress=progress, phase="dimension 0")
    top = ndim - 1
    roots_top, voxels_top = _sweep(flat, shape, ndim, ascending=not ascending,
                                   corners=construction == "vertex", with_outside=ndim,
                                   parent=parent, progress=progress,
                                   phase=f"dimension {top}")
    del parent
    return roots_0, voxels_0, roots_top, voxels_top


def sorted_order(flat: np.ndarray) -> np.ndarray:
    """Flat indices of ``flat`` sorted by value, ties by index (a stable sort).

    8- and 16-bit data (and bool) take a counting sort; other dtypes numpy's stable sort.
    The result is int32 while the indices fit, to halve the sweeps' memory.

    Examples
    --------
    >>> sorted_order(np.array([3, 1, 2, 1], dtype=np.uint8)).tolist()
    [1, 3, 2, 0]
    """
    dtype = _union_find.index_dtype(flat.size)
    if flat.dtype.kind in "uib" and flat.dtype.itemsize <= 2:
        if flat.dtype.kind == "i":
            lowest = np.iinfo(flat.dtype).min
            keys = (flat.astype(np.int32) - lowest).astype(np.uint16 if flat.itemsize == 2
                                                           else np.uint8)
        else:
            keys = flat.view(np.uint8) if flat.dtype == bool else flat
        order = np.empty(flat.size, dtype=dtype)
        _union_find.counting_order(keys, 1 << (8 * flat.itemsize), order)
        return order
    return np.argsort(flat, kind="stable").astype(dtype, copy=False)


def bytes_needed(shape, dtype, neighbourhood=None) -> int:
    """Bytes a run on an array of ``shape`` and ``dtype`` needs beyond the array itself.

    The sweeps hold one union-find index per voxel, a byte per voxel while the voxels
    left for the sweep proper are collected, and those voxels' order. A 3D volume's
    dimension-1 reduction (:func:`voxtopo.engine._reduction.bytes_needed`; for the vertex
    construction, 6-neighbourhood, on a padded copy of the values in a type up to twice
    as wide) runs beside them when both fit in the memory available together and the
    engine has two threads; otherwise it runs after them and takes over their union-find
    buffer, which it frees after its clearing (8- to 32-bit integer values, whose ranks
    it composes) or keeps for the sorted order (other values). The pairs are planned at one per 25 voxels (the table they become is planned
    by :func:`voxtopo.engine.estimate`).

    Examples
    --------
    >>> 25e6 < bytes_needed((2048, 2048), np.float32) < 40e6
    True
    """
    side_by_side, one_after_other = _needs(tuple(shape), np.dtype(dtype), neighbourhood == 6)
    if (side_by_side is not None and default_threads() >= 2
            and side_by_side <= _budget()):
        return side_by_side
    return one_after_other


def _needs(shape, dtype, vertex) -> tuple[int | None, int]:
    """(bytes with the reduction beside the sweeps, or None for a 2D image; bytes with
    the reduction after them)."""
    from . import _reduction

    voxels = int(np.prod(shape, dtype=np.int64))
    index = _union_find.index_dtype(voxels).itemsize
    swept = _PLANNED_SWEPT_FRACTION * voxels * (8 + 2 * index + dtype.itemsize)
    collecting = voxels + swept
    pairs = _BYTES_PER_PAIR_HELD * PLANNED_PAIRS_PER_VOXEL * voxels
    if len(shape) == 2:
        return None, int(voxels * index + collecting + pairs)
    copies = 0
    reduced_shape = shape
    if vertex:
        # a reversed copy of the values, then the padded one (in a type up to twice as
        # wide, over as few levels), which the reduction sweeps in the voxel construction
        reduced_shape = tuple(n + 2 for n in shape)
        copies = (voxels * dtype.itemsize + int(np.prod(reduced_shape, dtype=np.int64))
                  * min(2 * dtype.itemsize, 8))
    alone = _reduction.bytes_needed(reduced_shape, dtype, superlevel=True)
    clearing, reducing, holds = _reduction.phase_bytes(reduced_shape, dtype, superlevel=True)
    entries = _links_size(shape, vertex)
    links = entries * _union_find.index_dtype(entries).itemsize
    side_by_side = (voxels + 1) * index + collecting + copies + alone + pairs
    # the buffer is given away to the reduction, which frees it after the clearing unless
    # it holds the sorted order there
    one_after_other = max(links + collecting, links + copies + clearing,
                          (links if holds else 0) + copies + reducing) + pairs
    return int(side_by_side), int(one_after_other)


def _links_size(shape, vertex) -> int:
    """Entries of the union-find buffer the sweeps and then the reduction share."""
    from . import _reduction

    reduced = tuple(n + 2 for n in shape) if vertex else tuple(shape)
    return max(int(np.prod(shape, dtype=np.int64)) + 1,
               _reduction.scratch_size(reduced, "voxel"))


def _budget() -> int:
    return int(available_bytes() * BUDGET_FRACTION)


def _side_by_side_fits(shape, dtype, vertex) -> bool:
    side_by_side, _ = _needs(tuple(shape), np.dtype(dtype), vertex)
    return side_by_side is not None and side_by_side <= _budget()


BYTES_PER_VOXEL = bytes_needed


def _check_request(values, construction, periodic, field) -> None:
    if values.ndim not in (2, 3):
        raise InputError(f"The voxtopo engine takes a 2D image or 3D volume, got an array "
                         f"of shape {values.shape}.")
    if values.size == 0:
        raise InputError(f"Cannot compute persistence of an empty array of shape "
                         f"{values.shape}; give at least one voxel.")
    if construction not in ("voxel", "vertex"):
        raise InputError(f"Construction should be 'voxel' or 'vertex', got {construction!r}.")
    if periodic is not None and any(periodic):
        raise InputError(f"The voxtopo engine has no periodic boundaries (asked for "
                         f"{tuple(periodic)}); use engine='gudhi' or engine='auto'.")
    if field != 2:
        raise InputError(f"The voxtopo engine computes with Z/2 coefficients, not Z/{field}; "
                         f"use engine='gudhi' or engine='auto' for other fields.")
    if values.dtype.kind not in "uibf":
        raise InputError(f"The voxtopo engine takes integer or float values, got "
                         f"{values.dtype}.")


def _report(progress, phase: str, fraction: float) -> None:
    if progress is not None:
        progress(phase, fraction)


def _sweep(flat, shape, ndim, *, ascending, corners, with_outside, parent, progress,
           phase) -> tuple[np.ndarray, np.ndarray]:
    """(dying roots, voxels they died at) of one union-find sweep, reported in chunks.

    First a streaming pass in memory order links every voxel that cannot merge anything
    (the first half of the phase's progress); then the sweep proper visits the remaining
    voxels in (value, flat index) order.
    """
    voxels = flat.size
    cube = _union_find.neighbour_offsets(ndim, True)
    offsets = _union_find.neighbour_offsets(ndim, corners)
    parent[voxels] = voxels  # the outside node, used when with_outside
    _report(progress, phase, 0.0)
    rows = int(shape[0] * shape[1])
    rows_per_report = max(1, _STEPS_PER_REPORT // int(shape[2]))
    for start in range(0, rows, rows_per_report):
        stop = min(rows, start + rows_per_report)
        _union_find.link_regular_voxels(flat, start, stop, ascending, shape, cube, corners,
                                        with_outside, parent)
        _report(progress, phase, 0.5 * stop / rows)
    marked = np.flatnonzero(parent[:voxels] == -1).astype(parent.dtype)
    order = marked[sorted_order(flat[marked])]
    del marked
    capacity = max(4096, int(len(order) * _FIRST_BUFFER_FRACTION))
    roots = np.empty(capacity, dtype=parent.dtype)
    dying_at = np.empty(capacity, dtype=parent.dtype)
    count = 0
    step = 0
    while step < len(order):
        stop = min(len(order), step + _STEPS_PER_REPORT)
        step, count = _union_find.sweep(flat, order, step, stop, ascending, shape, offsets,
                                        with_outside, parent, roots, dying_at, count)
        if step < stop:
            capacity *= 2
            roots = np.concatenate([roots[:count], np.empty(capacity - count, parent.dtype)])
            dying_at = np.concatenate([dying_at[:count],
                                       np.empty(capacity - count, parent.dtype)])
        _report(progress, phase, 0.5 + 0.5 * step / len(order))
    _report(progress, phase, 1.0)
    return roots[:count].copy(), dying_at[:count].copy()


def _dimension_one(values, flat, superlevel, construction, threads, progress,
                   links=None):
    """(births, deaths, birth index, death index) of dimension 1 of a 3D volume
    ``values`` (or their levels), the values of the pairs read from ``flat``.

    ``links``: a list holding the sweeps' union-find buffer, given away to the reduction
    when it runs after them (it frees the buffer once done with it).
    """
    from . import _reduction

    # By the duality of image constructions (Garin, Heiss, Maggs, Bleile & Robins 2020),
    # the loops of the vertex construction of f are those of the voxel construction of -f
    # with the outside of the volume present from the start, births and deaths swapped;
    # the voxel construction's reduction is the faster one.
    dual = (_padded_below(values if superlevel else _reduction.reversed_order_values(values))
            if construction == "vertex" else None)
    if dual is not None:
        pairs = _reduction.pairs_dim1(dual, "voxel", progress=progress, threads=threads,
                                      scratch=links)
        birth_index = _unpad(np.asarray(pairs[3], dtype=np.int64), dual.shape)
        death_index = _unpad(np.asarray(pairs[2], dtype=np.int64), dual.shape)
        del dual, pairs
    else:
        pairs = _reduction.pairs_dim1(values, construction, progress=progress,
                                      superlevel=superlevel, threads=threads, scratch=links)
        birth_index = np.asarray(pairs[2], dtype=np.int64)
        death_index = np.asarray(pairs[3], dtype=np.int64)
        del pairs
    forever = -np.inf if superlevel else np.inf
    births = flat[birth_index].astype(np.float64)
    deaths = np.where(death_index >= 0, flat[np.maximum(death_index, 0)], forever)
    keep = births != deaths
    return births[keep], deaths[keep], birth_index[keep], death_index[keep]


def _padded_below(values: np.ndarray) -> np.ndarray | None:
    """``values`` with a one-voxel shell around them that comes before every voxel (the
    outside of the volume, present from the start of the sweep), in the same dtype when
    it has room below the smallest value, else in a wider one; None when no dtype holds
    the values and a smaller one exactly (64-bit integers at the bottom of their range,
    floats at the most negative finite value)."""
    low = values.min()
    if values.dtype.kind == "f":
        below = np.nextafter(low, -np.inf).astype(values.dtype)
        if not np.isfinite(below):
            return None
    elif values.dtype.kind in "ui":
        if low > np.iinfo(values.dtype).min:
            below = values.dtype.type(low - 1)
        elif values.dtype.itemsize == 8:
            return None
        else:
            wider = {1: np.int16, 2: np.int32}.get(values.dtype.itemsize, np.int64)
            values, below = values.astype(wider), wider(int(low) - 1)
    else:
        values = values.astype(np.int16)
        below = np.int16(int(values.min()) - 1)
    return np.pad(values, 1, mode="constant", constant_values=below)


def _unpad(index: np.ndarray, padded_shape) -> np.ndarray:
    """Flat indices into the padded volume -> flat indices into the volume itself."""
    coordinates = np.unravel_index(index, padded_shape)
    inner = tuple(n - 2 for n in padded_shape)
    inside = [c - 1 for c in coordinates]
    if any(((c < 0) | (c >= n)).any() for c, n in zip(inside, inner)):
        raise RuntimeError("a loop of the dual volume sits in its outside shell, which "
                           "cannot happen; this is a bug in voxtopo's engine.")
    return np.ravel_multi_index(tuple(inside), inner).astype(np.int64)
