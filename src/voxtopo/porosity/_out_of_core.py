"""Pore analysis of a scan larger than memory: chunk by chunk, on a dask scheduler.

:func:`analyse_chunked` gives the numbers of :func:`voxtopo.porosity.analyse` for a scan
held in a chunked store, reading one block per task, and keeps its intermediate stores in a
scratch folder. The stages, each a set of dask tasks over the store's chunks::

    scan chunks --segment--> phase store (pore / solid / outside the sample, 1 byte)
      --separable EDT, 3 passes--> signed distance store (float32)
      --chunked union-find--> dimension-0 and (d-1) diagrams of the pore and solid sweeps,
                              percolation per axis, border flags of pores and grains
      --local counts--> Euler curves, Euler characteristics, Minkowski functionals

Everything is exact and equal to the in-memory result where both fit:

* Otsu's threshold (``threshold="otsu"``) from the histogram scikit-image makes of the whole
  scan (or of the region of interest's voxels), counted chunk by chunk in two passes: the
  range of the values, then the counts, summed in a tree;
* the signed distance by the exact separable transform
  (:mod:`voxtopo.porosity._chunked_edt`);
* pores and grains from the chunked dimension-0 diagrams
  (:func:`voxtopo.engine.chunked.chunked_persistence`), voids from the dual sweep;
* percolation along an axis as the level at which one component of the pores' sublevel
  sweep first holds voxels of both the inlet and the outlet face: each component follows
  the faces it touches (two bits per axis) through the chunks and merges of that same
  sweep, as the in-memory percolation sweep does;
* a pore's basin reaches the border of the scan (or the rim of the sample) before its
  level exactly when, in the sweep with the border voxels joined to an eldest node
  (:func:`voxtopo.engine.chunked.chunked_merges`), the pore dies below that level; without
  a region of interest that sweep is the grains' dual sweep, run once for both
  (:func:`voxtopo.engine.chunked.chunked_persistence_and_border_merges`), and back;
* Euler characteristics and Minkowski functionals as sums of local terms
  (:mod:`voxtopo.porosity._local_counts`);
* Betti curves of all dimensions: b0 and b(d-1) from the chunked sweeps, the Euler
  characteristic from local counts, and b1 = b0 + b2 - chi at each level by the
  Euler-Poincare formula (Hatcher 2002) -- exact, not an estimate.

* connected porosity and isolated pores from the connected pieces of each phase, labelled
  chunk by chunk and joined across chunk faces (:mod:`voxtopo.porosity._chunked_pieces`).

Not computed out of core (the summary says so): the dimension-1 pairs of a volume (loops)
and each pore's and grain's basin volume; they need the whole volume in memory.
"""

from __future__ import annotations

import time
from contextlib import contextmanager
from dataclasses import dataclass
from itertools import groupby, product
from pathlib import Path

import numpy as np
import pandas as pd

from .. import significance as sig
from ..diagram import AXES_3D
from ..engine import construction_of
from ..engine.chunked import (
    BYTES_PER_CHUNK_VOXEL,
    chunked_merges,
    chunked_persistence_and_crossings,
    ensure_workers_fit,
    planned_merge_bytes,
    WORKER_BASELINE_BYTES,
)
from ..errors import InputError, TooBigError, VoxtopoError
from ..memory import BUDGET_FRACTION, ensure_fits
from ..scan import Scan
from . import _chunked_edt, _chunked_pieces, _local_counts
from ._analysis import (
    COMPLEMENT,
    SURFACE_SMOOTHING_VOXELS,
    PoreAnalysis,
    _axes,
    _check_extent,
    _coordinates,
    _flat,
    _phase_notes,
    _rows_of_dimension,
    ball_outside,
    finished_tables,
    largest_first,
    pore_summary,
)

#: phase codes of the phase store: bit 0 is the segmented pore mask, bit 1 the sample
OUTSIDE, OUTSIDE_PORE, SOLID, PORE = 0, 1, 2, 3

#: Bytes per voxel of a local-count task for the interface mesh of its block, the faces'
#: centres and the edge lists of the curvature kernel (``_minkowski.owned_terms``). They
#: follow the interface's area: measured on a 138^3 block (by tracemalloc, and by the
#: growth of the peak resident memory, which also sees the kernel's own arrays), 107 per
#: meshed voxel on smoothed noise with features about 5 voxels wide, 36 on a packing of
#: beads 14 to 22 voxels wide.
COUNT_MESH_BYTES_PER_VOXEL = 120

#: Bytes per voxel of a local-count task: the block with its halo as read (float32 field,
#: phase: 5), the smoothed mask with its padded copy (8), marching cubes' float32 copy
#: (4), the mesh and curvature terms, and the Euler counts' windows still held (24).
BYTES_PER_COUNT_VOXEL = 5 + 8 + 4 + COUNT_MESH_BYTES_PER_VOXEL + 24

#: Number of levels of the Betti curves.
BETTI_LEVELS = 256

#: What the out-of-core path does not compute, in the summary's words.
NOT_COMPUTED = ("the dimension-1 pairs of a volume (loops) and the pores' and grains' basin "
                "volumes need the whole volume in memory and are not computed out of core")


class WorkerLost(TooBigError):
    """A worker of the out-of-core run died (killed, or out of memory) and dask gave up."""


# ------------------------------------------------------------------------ lazy arrays
class _Box:
    """Shape, chunks and box reading shared by the lazy views below."""

    def __init__(self, shape, chunks, dtype):
        self.shape = tuple(int(n) for n in shape)
        self.chunks = tuple(int(c) for c in chunks)
        self.dtype = np.dtype(dtype)

    @property
    def ndim(self) -> int:
        return len(self.shape)


class SweepField(_Box):
    """The field a sweep runs on: the signed distance in the sample and ``outside`` beyond
    it (read lazily from the distance and phase stores; picklable)."""

    def __init__(self, distance, phase, outside: float | None):
        super().__init__(distance.shape, distance.chunks, np.float32)
        self.distance, self.phase, self.outside = distance, phase, outside

    def __getitem__(self, index):
        values = np.asarray(self.distance[index], dtype=np.float32)
        if self.outside is None:
            return values
        phase = np.asarray(self.phase[index])
        return np.where(phase & 2, values, np.float32(self.outside))


class Edge(_Box):
    """True on the scan's outer layer and, with a region of interest, on its rim (sample
    voxels with a face neighbour outside it): where a basin is cut by the field of view."""

    def __init__(self, phase, with_sample: bool):
        super().__init__(phase.shape, phase.chunks, bool)
        self.phase, self.with_sample = phase, with_sample

    def __getitem__(self, index):
        from scipy import ndimage

        lo = [s.start for s in index]
        hi = [s.stop for s in index]
        edge = np.zeros([b - a for a, b in zip(lo, hi)], bool)
        for a in range(self.ndim):
            take = [slice(None)] * self.ndim
            if lo[a] == 0:
                take[a] = 0
                edge[tuple(take)] = True
            if hi[a] == self.shape[a]:
                take[a] = -1
                edge[tuple(take)] = True
        if self.with_sample:
            first = [max(a - 1, 0) for a in lo]
            last = [min(b + 1, n) for b, n in zip(hi, self.shape)]
            sample = np.asarray(self.phase[tuple(slice(a, b) for a, b in zip(first, last))]) & 2
            # beyond the scan's faces the erosion sees sample (border_value=1), as in memory
            pad = [(int(a == 0), int(b == n)) for a, b, n in zip(lo, hi, self.shape)]
            sample = np.pad(sample.astype(bool), pad, constant_values=True)
            rim = sample & ~ndimage.binary_erosion(sample, border_value=1)
            inner = tuple(slice(a - f + p[0], b - f + p[0])
                          for a, b, f, p in zip(lo, hi, first, pad))
            edge |= rim[inner]
        return edge


# -------------------------------------------------------------------------- the plan
def blocks(shape, chunks):
    """(lo, hi) of every chunk of the grid."""
    for lo in product(*[range(0, n, c) for n, c in zip(shape, chunks)]):
        yield lo, tuple(min(a + c, n) for a, c, n in zip(lo, chunks, shape))


def _box(lo, hi):
    return tuple(slice(int(a), int(b)) for a, b in zip(lo, hi))



@dataclass(frozen=True)
class TaskPlan:
    """The memory each kind of task of an out-of-core pore run may hold at a time."""

    distance_pass: int   # a line block whole along the longest axis, every transform
    union_find: int      # one chunk swept
    merge: int           # the largest merge of border data (near the top of the tree)
    local_counts: int    # one chunk with its halo

    def tasks(self) -> list[tuple[int, str]]:
        """(bytes, what the task does in the refusal's words) of each kind of task."""
        return [(self.distance_pass, "a pass of the distance transform"),
                (self.union_find, "the union-find sweep of one chunk"),
                (self.merge, "the largest merge of the chunks' border data"),
                (self.local_counts, "the local counts of one chunk")]

    @property
    def largest(self) -> int:
        return max(size for size, _ in self.tasks())

    @property
    def largest_task(self) -> str:
        """What the largest task does."""
        return max(self.tasks(), key=lambda task: task[0])[1]

    @property
    def per_worker(self) -> int:
        """The largest task and the worker's own baseline."""
        return WORKER_BASELINE_BYTES + self.largest


def plan_tasks(shape, chunks, transforms: int = 2) -> TaskPlan:
    """Memory of each kind of task of the out-of-core pore run of a scan of ``shape`` in
    ``chunks`` (``transforms`` distance transforms: 3 with a region of interest)."""
    chunk = int(np.prod(chunks))
    line = max(int(np.prod(chunks)) // c * n for c, n in zip(chunks, shape))
    halo = int(np.prod([c + 2 * _local_counts.HALO for c in chunks]))
    merge = planned_merge_bytes(shape, chunks)
    return TaskPlan(distance_pass=line * _chunked_edt.BYTES_PER_PASS_VOXEL * transforms,
                    union_find=chunk * BYTES_PER_CHUNK_VOXEL, merge=merge,
                    local_counts=halo * BYTES_PER_COUNT_VOXEL)


def planned_bytes_per_task(shape, chunks, transforms: int = 2) -> int:
    """Memory one task of the out-of-core pore run may hold at a time: the largest of a
    distance-transform pass, a union-find chunk, a merge of border data and a
    local-count chunk with its halo (see :func:`plan_tasks`)."""
    return plan_tasks(shape, chunks, transforms).largest


def planned_bytes_per_worker(shape, chunks, transforms: int = 2) -> int:
    """Memory a dask worker of the out-of-core pore run needs: its own baseline
    (:data:`WORKER_BASELINE_BYTES`) and the largest task."""
    return plan_tasks(shape, chunks, transforms).per_worker


@dataclass
class Segmentation:
    """How the pores are chosen from the scan's values, for the summary and the tasks."""

    method: str
    pore_value: object = None      # "mask" or "label": pores equal this
    threshold: float | None = None
    pores_bright: bool = False

    def pores(self, block: np.ndarray) -> np.ndarray:
        if self.threshold is not None:
            return block > self.threshold if self.pores_bright else block <= self.threshold
        return block == self.pore_value

    def as_summary(self) -> dict:
        if self.method == "label":
            return {"method": "label", "label": int(self.pore_value), "threshold": None}
        if self.threshold is not None:
            return {"method": self.method, "threshold": float(self.threshold),
                    "pores": "above the threshold" if self.pores_bright
                    else "at or below the threshold"}
        return {"method": "mask", "threshold": None}


def _value_facts(array, lo, hi):
    """What the segmentation needs to know of one chunk's values."""
    block = np.asarray(array[_box(lo, hi)])
    facts = {"finite": True, "only_0_1": True, "only_0_255": True, "has_1": False,
             "values": np.zeros(0)}
    if np.issubdtype(block.dtype, np.floating):
        facts["finite"] = bool(np.isfinite(block).all())
    if block.dtype != bool:
        zero = block == 0
        facts["only_0_1"] = bool(np.all(zero | (block == 1)))
        facts["only_0_255"] = bool(np.all(zero | (block == 255)))
        facts["has_1"] = bool((block == 1).any())
        facts["values"] = np.unique(block[~zero & (block != 1)])[:3]
    return facts


def _phase_chunk(array, roi, segmentation, phase, lo, hi):
    """Write one chunk of the phase store; return its voxel counts and which faces of the
    scan its sample touches."""
    box = _box(lo, hi)
    pores = segmentation.pores(np.asarray(array[box]))
    sample = (np.ones(pores.shape, bool) if roi is None
              else np.asarray(roi[box]) == roi.foreground)
    codes = (pores.astype(np.uint8) | (sample.astype(np.uint8) << 1))
    phase[box] = codes
    shape = phase.shape
    faces = []
    for a in range(len(shape)):
        first = bool(lo[a] == 0 and np.take(sample, 0, axis=a).any())
        last = bool(hi[a] == shape[a] and np.take(sample, -1, axis=a).any())
        faces.append((first, last))
    return (int(np.count_nonzero(codes == PORE)), int(np.count_nonzero(codes == SOLID)),
            int(np.count_nonzero(sample)), faces)


def _count_chunk(field, mask_and_sample, lo, hi, shape, spacing, levels, n_pore, n_solid,
                 with_sample):
    """Local counts of one chunk: the pore sweep's Euler histogram over ``levels``, the
    Euler characteristics of the pore and solid phases, and the interface terms."""
    halo = _local_counts.HALO
    first = [max(a - halo, 0) for a in lo]
    last = [min(b + halo, n) for b, n in zip(hi, shape)]
    box = _box(first, last)
    values = np.asarray(field[box])
    codes = np.asarray(mask_and_sample[box])
    pore_construction = construction_of(len(shape), n_pore)[1]
    solid_construction = construction_of(len(shape), n_solid)[1]
    curve = _local_counts.euler_histogram(values, first, lo, hi, shape, pore_construction,
                                          levels)
    zero = np.zeros(1)
    chi_pore = int(_local_counts.euler_histogram(
        np.where(codes == PORE, 0.0, 1.0), first, lo, hi, shape, pore_construction, zero)[0])
    chi_solid = int(_local_counts.euler_histogram(
        np.where(codes == SOLID, 0.0, 1.0), first, lo, hi, shape, solid_construction,
        zero)[0])
    soft = _local_counts.smoothed(codes & 1, first, shape, SURFACE_SMOOTHING_VOXELS)
    area, curvature = _local_counts.interface_terms(
        soft, first, lo, hi, shape, spacing, (codes & 2).astype(bool) if with_sample else None)
    return curve, chi_pore, chi_solid, area, curvature


# ------------------------------------------------------------------------ scheduling
#: what dask.distributed raises when a task's worker died more often than it retries
_WORKER_LOST = ("KilledWorker", "CommClosedError", "FutureCancelledError")


@contextmanager
def worker_losses_told(what: str):
    """Turn a worker lost for good (dask first retries the tasks of a dead worker) into
    one sentence."""
    try:
        yield
    except VoxtopoError:
        raise
    except Exception as error:
        name = type(error).__name__
        if name not in _WORKER_LOST:
            raise
        raise WorkerLost(f"A worker of the out-of-core run died during {what} and dask gave "
                         f"up after retrying ({name}); it may have run out of memory: give "
                         f"each worker more memory or choose smaller chunks "
                         f"(--chunks).") from None


def compute_on(scheduler, what: str):
    """A function running a list of dask delayed objects on ``scheduler``."""

    def compute(tasks):
        import dask

        options = {} if scheduler is None else {"scheduler": scheduler}
        with worker_losses_told(what):
            return dask.compute(*tasks, **options)
    return compute


#: The smallest chunk edge the refusal of a plan suggests.
SMALLEST_SUGGESTED_CHUNK = 16


def _smaller_chunks_that_fit(shape, chunks, transforms, room):
    """The first of the chunk shapes halved again and again whose worker plan fits in
    ``room`` bytes, or None when halving down to SMALLEST_SUGGESTED_CHUNK does not help
    (the merges grow with the scan's cross-section, not with the chunks)."""
    while max(chunks) > SMALLEST_SUGGESTED_CHUNK:
        chunks = tuple(max(-(-c // 2), min(SMALLEST_SUGGESTED_CHUNK, c)) for c in chunks)
        if plan_tasks(shape, chunks, transforms).per_worker <= room:
            return chunks
    return None


def _check_worker_memory(scheduler, plan: TaskPlan, shape, chunks, transforms) -> None:
    """Refuse a plan that would not fit the smallest worker of a distributed scheduler:
    the worker's baseline and its largest task, within the same share of its memory
    limit as a run on this machine plans for."""

    def more_remedy(smallest):
        smaller = _smaller_chunks_that_fit(shape, chunks, transforms,
                                           BUDGET_FRACTION * smallest)
        if smaller is not None:
            return f", or choose smaller chunks (--chunks {','.join(map(str, smaller))})"
        if plan.largest == plan.merge:
            return (" (smaller chunks would not help: that merge holds whole cross-sections "
                    "of the scan)")
        return ""

    ensure_workers_fit(scheduler, plan.largest, plan.largest_task,
                       f"The out-of-core pore analysis of the {'x'.join(map(str, shape))} "
                       f"scan in {'x'.join(map(str, chunks))} chunks", more_remedy)


# --------------------------------------------------------------------------- analyse
def analyse_chunked(array, *, scratch: Path, threshold=None, pores_bright: bool = False,
                    label=None, roi=None, spacing=None, unit=None, axis=None,
                    neighbourhood: int | None = None, min_persistence: float | None = None,
                    boundary_tolerance: float | None = None, chunks=None, scheduler=None,
                    progress=None) -> PoreAnalysis:
    """Pore bodies, throats, grains, percolation and integral geometry, out of core.

    The numbers of :func:`voxtopo.porosity.analyse` for a scan read one chunk at a time;
    the options mean the same. See the module's docstring for how, and for what is not
    computed out of core.

    Parameters
    ----------
    array : array-like
        Binary mask, label image or gray scan with ``shape``, ``dtype``, ``chunks`` and
        slicing (:func:`voxtopo.io.open_chunked` opens a zarr / OME-Zarr store as one);
        every worker reads it, so it must be picklable for a distributed scheduler.
    scratch : Path
        An empty folder for the intermediate stores; the caller removes it.
    threshold : float or "otsu", optional
        A value, or "otsu": Otsu's threshold of the histogram counted chunk by chunk (of the
        region of interest's voxels only, with ``roi``), equal to the in-memory one.
    roi : array-like, optional
        The region of interest on the same grid (True or 1 marks the sample).
    chunks : tuple of int, optional
        Block shape of the tasks and of the intermediate stores (default the array's).
    scheduler : optional
        A dask.distributed Client, or a local scheduler name ("threads", "sync").
    progress : callable(phase, fraction), optional

    Returns
    -------
    PoreAnalysis
        With ``betti_curves`` (columns ``level, betti_0, betti_1, (betti_2),
        euler_characteristic``); ``mask`` is a lazy view of the segmented pores and
        ``distance`` None.
    """
    import zarr

    timings = {}
    clock = time.perf_counter()
    where = getattr(array, "source", "") or "array"
    shape = tuple(int(n) for n in array.shape)
    ndim = len(shape)
    if ndim not in (2, 3):
        raise InputError(f"The pore analysis takes a 2D image or 3D volume, got shape {shape} "
                         f"from {where}.")
    _check_extent(shape, where)
    chunks = tuple(int(c) for c in (chunks or getattr(array, "chunks", None) or shape))
    if len(chunks) != ndim or min(chunks) < 1:
        raise InputError(f"Chunks should be one positive size per axis ({ndim}), got {chunks}.")
    spacing = tuple(float(s) for s in (spacing or getattr(array, "spacing", None)
                                        or (1.0,) * ndim))
    unit = unit or getattr(array, "unit", "px")
    n_pore, _ = construction_of(ndim, neighbourhood)
    n_solid = COMPLEMENT[n_pore]
    axes = _axes(axis, ndim)
    if min_persistence is None:
        min_persistence = 0.5 * min(spacing)
    elif not (np.isfinite(min_persistence) and min_persistence >= 0):
        raise InputError(f"min_persistence must be a length >= 0 in {unit}, got "
                         f"{min_persistence}.")
    placeholder = Scan(np.broadcast_to(np.zeros((), np.float32), shape), spacing=spacing,
                       unit=unit, source=where)
    delta = sig.boundary_tolerance_of(placeholder, boundary_tolerance)
    robust_above = sig.robust_threshold(placeholder, delta)
    transforms = 3 if roi is not None else 2
    plan = plan_tasks(shape, chunks, transforms)
    planned = plan.largest
    ensure_fits(planned, f"One task of the out-of-core pore analysis of the "
                         f"{'x'.join(map(str, shape))} scan in {'x'.join(map(str, chunks))} "
                         f"chunks", "choose smaller chunks (--chunks)")
    _check_worker_memory(scheduler, plan, shape, chunks, transforms)
    compute = compute_on(scheduler, "the pore analysis")

    def step(name, fraction):
        if progress is not None:
            progress(name, fraction)

    # ---- segmentation
    step("segmentation", 0.0)
    if roi is not None:
        roi = _roi_view(roi, shape, chunks, compute)
    segmentation = _segmentation(array, where, chunks, shape, threshold, pores_bright,
                                 label, roi, compute)
    scratch = Path(scratch)
    scratch.mkdir(parents=True, exist_ok=True)
    phase = zarr.create_array(str(scratch / "phase.zarr"), shape=shape, chunks=chunks,
                              dtype=np.uint8, fill_value=0)
    import dask

    phase_task = dask.delayed(_phase_chunk, pure=False)
    counted = compute([phase_task(array, roi, segmentation, phase, lo, hi)
                       for lo, hi in blocks(shape, chunks)])
    pore_voxels = sum(c[0] for c in counted)
    if roi is not None and sum(c[2] for c in counted) == 0:
        raise InputError(f"The region of interest {roi.source} holds no voxel of the sample "
                         f"(it is all 0); True or 1 marks the sample.")
    solid_voxels = sum(c[1] for c in counted)
    sample_voxels = sum(c[2] for c in counted)
    faces_in_sample = [(any(c[3][a][0] for c in counted), any(c[3][a][1] for c in counted))
                       for a in range(ndim)]
    total = int(np.prod(shape))
    notes = list(getattr(array, "notes", ())) + _phase_notes(
        pore_voxels, solid_voxels, sample_voxels, total, where, segmentation.as_summary())
    timings["segmentation"] = time.perf_counter() - clock

    # ---- signed distance
    clock = time.perf_counter()
    distance = zarr.create_array(str(scratch / "distance.zarr"), shape=shape, chunks=chunks,
                                 dtype=np.float32, fill_value=0)
    room = None
    if roi is None:
        # pores and solid fill the scan: both transforms in one store
        largest = _chunked_edt.signed_distance(phase, (PORE,), spacing, scratch / "edt",
                                               distance, chunks=chunks, compute=compute,
                                               progress=step)
    else:
        features = {"to_solid": _chunked_edt.Feature((SOLID,)),
                    "to_pore": _chunked_edt.Feature((PORE,)),
                    "to_outside": _chunked_edt.Feature((OUTSIDE, OUTSIDE_PORE))}
        squared = _chunked_edt.squared_distances(phase, features, spacing, scratch / "edt",
                                                 chunks=chunks, compute=compute,
                                                 progress=step)
        signed_task = dask.delayed(_signed_chunk, pure=False)
        largest = max(compute([signed_task(phase, squared["to_solid"], squared["to_pore"],
                                           distance, lo, hi)
                               for lo, hi in blocks(shape, chunks)]))
        room = squared["to_outside"]
    timings["distance_transform"] = time.perf_counter() - clock

    # ---- sweeps
    clock = time.perf_counter()
    step("pores and grains", 0.0)
    outside_level = None if roi is None else float(largest) + 2 * max(spacing)
    pore_field = SweepField(distance, phase, outside_level)
    solid_field = SweepField(distance, phase, None if roi is None else -outside_level)
    common = {"chunks": chunks, "spacing": spacing, "unit": unit, "scheduler": scheduler}
    edge = Edge(phase, roi is not None)
    # percolation rides on the pores' sweep: an axis whose two faces hold sample voxels
    crossed = [a for a in axes if all(faces_in_sample[a])]
    with worker_losses_told("the union-find sweeps"):
        # without a region of interest one field serves both phases and the edge is the
        # scan's outer layer: the border sweep of the pores is the dual sweep of the
        # grains, and back
        diagram, solid_edge, crossings = chunked_persistence_and_crossings(
            pore_field, crossing_axes=crossed, neighbourhood=n_pore, **common)
        step("pores and grains", 0.5 if roi is None else 0.25)
        solid_diagram, pore_edge, _ = chunked_persistence_and_crossings(
            solid_field, crossing_axes=(), superlevel=True, neighbourhood=n_solid, **common)
        if roi is not None:
            step("pores and grains", 0.5)
            pore_edge = chunked_merges(pore_field, neighbourhood=n_pore, chunks=chunks,
                                       edge=edge, scheduler=scheduler)
            step("pores and grains", 0.75)
            solid_edge = chunked_merges(solid_field, superlevel=True, neighbourhood=n_solid,
                                        chunks=chunks, edge=edge, scheduler=scheduler)
    if roi is not None:
        diagram = diagram.without_outside(outside_level)
        solid_diagram = solid_diagram.without_outside(-outside_level)
    diagram = sig.robust_flags(diagram, delta)
    solid_diagram = sig.robust_flags(solid_diagram, delta)
    pores = _feature_table(_rows_of_dimension(diagram, 0), pore_edge, False, min_persistence,
                           ("body", "throat"), shape, spacing, room)
    grains = _feature_table(_rows_of_dimension(solid_diagram, 0), solid_edge, True,
                            min_persistence, ("body", "neck"), shape, spacing, room)
    step("pores and grains", 0.9)
    pore_pieces = _pieces(phase, edge, (PORE,), n_pore, pores, "body", shape, chunks, compute)
    solid_pieces = _pieces(phase, edge, (SOLID,), n_solid, grains, "body", shape, chunks,
                           compute)
    pores, grains, loops, voids, pore_rows = finished_tables(
        pores, grains, diagram, solid_diagram, spacing, min_persistence, robust_above)
    timings["features"] = time.perf_counter() - clock

    # ---- percolation
    clock = time.perf_counter()
    names = AXES_3D[3 - ndim:]
    radius, critical, connected = {}, {}, {}
    for a in axes:
        if a in crossed:
            radius[names[a]], critical[names[a]] = _percolation(*crossings[a], spacing)
            through = pore_pieces.faces[:, a, 0] & pore_pieces.faces[:, a, 1]
            connected[names[a]] = float(pore_pieces.sizes[through].sum() / sample_voxels)
        else:
            radius[names[a]], critical[names[a]], connected[names[a]] = None, None, None
    step("percolation", 1.0)
    timings["percolation"] = time.perf_counter() - clock

    # ---- local counts
    clock = time.perf_counter()
    step("integral geometry", 0.0)
    levels = np.unique(np.append(diagram.level_grid(BETTI_LEVELS), 0.0))
    count_task = dask.delayed(_count_chunk, pure=False)
    parts = compute([count_task(pore_field, phase, lo, hi, shape, spacing, levels, n_pore,
                                n_solid, roi is not None) for lo, hi in blocks(shape, chunks)])
    chi_curve = np.cumsum(sum(p[0] for p in parts))
    chi_pore = int(sum(p[1] for p in parts))
    chi_solid = int(sum(p[2] for p in parts))
    area = float(sum(p[3] for p in parts))
    curvature = None if ndim == 2 else float(sum(p[4] for p in parts))
    volume = sample_voxels * float(np.prod(spacing))
    functionals = {"phase": "pore", "volume_fraction": float(pore_voxels / sample_voxels),
                   "surface_area_density": area / volume,
                   "mean_curvature_density": None if curvature is None else curvature / volume,
                   "euler_density": chi_pore / volume}
    betti_curves = betti_from_euler(diagram, levels, chi_curve)
    timings["integral_geometry"] = time.perf_counter() - clock
    step("integral geometry", 1.0)

    summary = pore_summary(
        notes=notes, radius=radius, critical=critical, connected=connected,
        chi=(chi_pore, chi_solid), neighbourhoods=(n_pore, n_solid),
        solid_pieces=len(solid_pieces.sizes), volume=volume, functionals=functionals,
        tables=(pores, grains, loops, voids), loops_known=ndim == 2,
        robustness=(delta, robust_above), segmentation=segmentation.as_summary(),
        roi_used=roi is not None, voxels=(pore_voxels, sample_voxels, total), unit=unit,
        spacing=spacing, shape=shape, min_persistence=min_persistence, timings=timings)
    notes.append(f"Computed out of core in {'x'.join(map(str, chunks))} chunks: "
                 f"{NOT_COMPUTED}.")
    summary.update({
        "out_of_core": {"chunks": list(chunks), "planned_bytes_per_task": planned,
                        "planned_bytes_per_worker": plan.per_worker,
                        "not_computed": NOT_COMPUTED,
                        "betti_curves": "b0 and b(d-1) from the chunked sweeps, the Euler "
                                        "characteristic from local counts, b1 = b0 + b2 - "
                                        "chi (Euler-Poincare): exact at every level"},
    })
    return PoreAnalysis(pores=pores, grains=grains, loops=loops, voids=voids, summary=summary,
                        diagram=diagram, solid_diagram=solid_diagram,
                        mask=MaskView(phase), distance=None, critical_throats=critical,
                        sample=None, pore_rows=pore_rows, betti_curves=betti_curves)


class MaskView(_Box):
    """The segmented pore mask, read lazily from the phase store (for slice plots)."""

    def __init__(self, phase):
        super().__init__(phase.shape, phase.chunks, bool)
        self.phase = phase

    def __getitem__(self, index):
        return (np.asarray(self.phase[index]) & 1).astype(bool)

    def __array__(self, dtype=None, copy=None):
        whole = self[tuple(slice(None) for _ in self.shape)]
        return whole if dtype is None else whole.astype(dtype)


def _signed_chunk(phase, to_solid, to_pore, distance, lo, hi):
    """-d in the pores, +d elsewhere (d to the nearest voxel of the other phase); returns
    the largest |d| of the chunk."""
    box = _box(lo, hi)
    codes = np.asarray(phase[box])
    inside = np.sqrt(np.asarray(to_solid[box]))
    outside = np.sqrt(np.asarray(to_pore[box]))
    signed = np.where(codes == PORE, -inside, outside).astype(np.float32)
    distance[box] = signed
    finite = np.abs(signed[np.isfinite(signed)])
    return float(finite.max()) if finite.size else 0.0


def _percolation(voxel, level, spacing):
    """(radius, critical voxel position) of an axis whose faces first join in the pores'
    sweep at ``voxel``, at ``level``; (0.0, None) when they join only outside the pores
    (at a level of 0 or more)."""
    if level >= 0:
        return 0.0, None
    return -level, np.asarray(voxel, np.float64) * np.asarray(spacing)


def _feature_table(pairs: pd.DataFrame, edge_merges, flip: bool, min_persistence: float,
                   names, shape, spacing, room) -> pd.DataFrame:
    """The pore (or, with ``flip``, grain) table of :func:`voxtopo.porosity.analyse` from a
    chunked dimension-0 diagram, without the basin volume (and, until
    :func:`_pieces` adds it, the isolated flag)."""
    ndim = len(shape)
    axes = AXES_3D[3 - ndim:]
    body, neck = names
    births = pairs["birth"].to_numpy(dtype=np.float64)
    deaths = pairs["death"].to_numpy(dtype=np.float64)
    if flip:
        births, deaths = -births, -deaths
    keep = (births < 0) & (np.minimum(deaths, 0.0) - births > min_persistence)
    pairs, births, deaths = pairs[keep], births[keep], deaths[keep]
    birth_voxel = _flat(pairs, "birth", shape)
    death_voxel = _flat(pairs, "death", shape)
    level = np.minimum(deaths, 0.0)
    # the sweep with the border as eldest node: the feature meets the border below its level
    order = np.argsort(edge_merges.young_id)
    known = edge_merges.young_id[order]
    met = edge_merges.voxel_value[order] * (-1.0 if flip else 1.0)
    # not listed: it met the border as it was born (its first voxel is on the border)
    met_level = np.full(len(birth_voxel), -np.inf)
    if len(known):
        at = np.minimum(np.searchsorted(known, birth_voxel), len(known) - 1)
        listed = known[at] == birth_voxel
        met_level[listed] = met[at[listed]]
    touches = met_level < level
    body_radius = -births
    centre = _coordinates(birth_voxel, shape, spacing)
    room_at = None
    if room is not None and len(birth_voxel):
        index = tuple(np.unravel_index(birth_voxel, shape))
        room_at = np.sqrt(np.asarray(room.get_coordinate_selection(index), dtype=np.float64))
    border = touches | ball_outside(centre, body_radius, shape, spacing, room_at)
    joined = deaths < 0
    neck_at = _coordinates(np.where(joined, death_voxel, -1), shape, spacing)
    table = {"id": np.arange(1, len(births) + 1), f"{body}_radius": body_radius}
    for k, a in enumerate(axes):
        table[f"{body}_{a}"] = centre[:, k]
    table[f"{neck}_radius"] = np.where(joined, -deaths, np.nan)
    for k, a in enumerate(axes):
        table[f"{neck}_{a}"] = neck_at[:, k]
    table["border"] = border.astype(bool)
    table["lifetime"] = deaths - births
    birth_index = np.unravel_index(np.maximum(birth_voxel, 0), shape)
    for k, a in enumerate(axes):
        table[f"{body}_voxel_{a}"] = birth_index[k].astype(np.int64)
    table["pair_row"] = pairs.index.to_numpy(dtype=np.int64)
    return largest_first(pd.DataFrame(table), body, axes)


def _pieces(phase, edge, codes, neighbourhood, table, body, shape, chunks, compute):
    """The connected pieces of a phase, chunk by chunk; adds the column ``isolated`` to
    ``table`` (after ``lifetime``): the feature's piece holds no other feature of the table
    and reaches no edge, as in memory."""
    import dask

    ndim = len(shape)
    axes = AXES_3D[3 - ndim:]
    voxel = table[[f"{body}_voxel_{a}" for a in axes]].to_numpy(dtype=np.int64)
    block = voxel // np.asarray(chunks)
    starts = block * np.asarray(chunks)
    queries = {}
    for row, (start, index) in enumerate(zip(map(tuple, starts), voxel)):
        hi = tuple(min(s + c, n) for s, c, n in zip(start, chunks, shape))
        local = int(np.ravel_multi_index(tuple(index - np.asarray(start)),
                                         tuple(h - s for s, h in zip(start, hi))))
        queries.setdefault(start, ([], []))
        queries[start][0].append(row)
        queries[start][1].append(local)
    full = neighbourhood in (26, 8)
    task = dask.delayed(_chunked_pieces.label_chunk, pure=False)
    boxes = list(blocks(shape, chunks))

    def slabs():
        # one slab of chunks along the first axis at a time: the join then holds the
        # label planes of two slabs, not of the whole scan
        for _, slab in groupby(boxes, key=lambda box: box[0][0]):
            yield list(compute([task(phase, edge, codes, full, lo, hi,
                                     queries.get(lo, ([], []))[1]) for lo, hi in slab]))

    pieces = _chunked_pieces.join(slabs(), shape, full)
    piece = np.full(len(table), -1, np.int64)
    for (lo, _), found in zip(boxes, pieces.piece_of_query):
        if lo in queries:
            piece[queries[lo][0]] = found
    features_in_piece = np.bincount(piece[piece >= 0], minlength=len(pieces.sizes))
    isolated = np.zeros(len(table), bool)
    inside = piece >= 0
    isolated[inside] = ((features_in_piece[piece[inside]] == 1)
                        & ~pieces.at_edge[piece[inside]])
    table.insert(table.columns.get_loc("lifetime") + 1, "isolated", isolated)
    return pieces


def betti_from_euler(diagram, levels, chi_curve) -> pd.DataFrame:
    """Betti curves of the pore sweep: b0 and b(d-1) from the diagram, the Euler
    characteristic from local counts, and b1 = b0 + b2 - chi (3D) or b0 - chi (2D) by the
    Euler-Poincare formula chi = b0 - b1 + b2 (Hatcher 2002), exact at every level."""
    ndim = diagram.ndim
    known = diagram.betti_curve(levels)
    b0 = known["betti_0"].to_numpy()
    top = known[f"betti_{ndim - 1}"].to_numpy() if ndim == 3 else np.zeros_like(b0)
    chi = np.asarray(chi_curve, dtype=np.int64)
    curves = {"level": np.asarray(levels, dtype=np.float64), "betti_0": b0,
              "betti_1": b0 + top - chi}
    if ndim == 3:
        curves["betti_2"] = top
    curves["euler_characteristic"] = chi
    return pd.DataFrame(curves)


# ------------------------------------------------------------------- segmentation
def _segmentation(array, where, chunks, shape, threshold, pores_bright, label, roi,
                  compute):
    """Decide how pores are chosen, checking the values chunk by chunk as
    :func:`voxtopo.porosity._analysis.pore_mask` checks them in memory."""
    import dask

    dtype = np.dtype(array.dtype)
    if threshold is not None and label is not None:
        raise InputError(f"Give either a threshold or a pore label for {where}, not both "
                         f"(got threshold={threshold!r}, label={label!r}).")
    if pores_bright and threshold is None:
        raise InputError(f"pores_bright (CLI --pores-bright) only says which side of a "
                         f"threshold the pores are on, and no threshold was given for "
                         f"{where}; add a threshold or leave it out.")
    if isinstance(threshold, str) and threshold != "otsu":
        raise InputError(f"The threshold should be a number or 'otsu', got {threshold!r}.")
    if label is not None and not (np.issubdtype(dtype, np.integer) or dtype == bool):
        raise InputError(f"A pore label picks voxels of a label image, but the input "
                         f"{where} holds {dtype} values; give an integer label image or a "
                         f"threshold.")
    task = dask.delayed(_value_facts, pure=False)
    facts = compute([task(array, lo, hi) for lo, hi in blocks(shape, chunks)])
    if not all(f["finite"] for f in facts):
        raise InputError(f"{where} has NaN or infinite voxels; fill them "
                         f"(voxtopo.filtration.fill_invalid or --fill-invalid) or crop them "
                         f"away.")
    foreground = _foreground(dtype, facts)
    if label is not None:
        return Segmentation("label", pore_value=label)
    if threshold is not None:
        if foreground is not None:
            raise InputError(f"The input {where} is already a binary mask (two values only), "
                             f"where a threshold could only swap or keep its phases; leave "
                             f"out the threshold: its True (1) voxels are the pores.")
        if threshold == "otsu":
            within = "" if roi is None else " within the region of interest"
            return Segmentation("otsu" + within, pores_bright=pores_bright,
                                threshold=_otsu_chunked(array, roi, where, shape, chunks,
                                                        compute))
        return Segmentation("given", threshold=float(threshold), pores_bright=pores_bright)
    if foreground is None:
        examples = sorted({v for f in facts for v in np.asarray(f["values"]).tolist()})[:3]
        raise InputError(
            f"The input {where} is not a binary mask (it holds values such as {examples}); "
            f"give a threshold (a value, CLI --threshold) or the pore label of a label image "
            f"(CLI --label).")
    return Segmentation("mask", pore_value=foreground)


#: Bins of scikit-image's Otsu histogram of float data (``threshold_otsu``'s ``nbins``).
OTSU_FLOAT_BINS = 256

#: How many partial histograms one task adds up when they are summed in a tree.
HISTOGRAMS_PER_SUM = 8


def _sample_values(array, roi, lo, hi) -> np.ndarray:
    """The chunk's gray values, only those of the sample with a region of interest."""
    box = _box(lo, hi)
    values = np.asarray(array[box])
    return values.ravel() if roi is None else values[np.asarray(roi[box]) == roi.foreground]


def _value_range(array, roi, lo, hi):
    """(smallest, largest) gray value of the chunk's sample, or None when it has none."""
    values = _sample_values(array, roi, lo, hi)
    return (values.min(), values.max()) if values.size else None


def _otsu_counts(array, roi, lo, hi, low, high) -> np.ndarray:
    """The chunk's share of the histogram scikit-image's ``threshold_otsu`` makes of the
    whole scan: one bin per integer from ``low`` to ``high``, or OTSU_FLOAT_BINS equal bins
    over [low, high] for floats (numpy assigns each value to its bin alone, so the chunks'
    counts add up to the whole scan's)."""
    values = _sample_values(array, roi, lo, hi)
    if values.dtype.kind in "ui":
        return np.bincount(values.astype(np.int64) - int(low),
                           minlength=int(high) - int(low) + 1)
    return np.histogram(values, bins=OTSU_FLOAT_BINS, range=(low, high))[0]


def _sum_counts(*counts) -> np.ndarray:
    return np.sum(counts, axis=0)


def _otsu_chunked(array, roi, where, shape, chunks, compute) -> float:
    """Otsu's threshold of the scan's (or the sample's) gray values, equal to
    :func:`voxtopo.filtration.threshold` in memory: the range in one pass over the chunks,
    the histogram in a second, then scikit-image's ``threshold_otsu`` on it."""
    import dask
    from skimage.filters import threshold_otsu

    range_task = dask.delayed(_value_range, pure=False)
    ranges = [r for r in compute([range_task(array, roi, lo, hi)
                                  for lo, hi in blocks(shape, chunks)]) if r is not None]
    if not ranges:
        raise InputError(f"The region of interest {roi.source} holds no voxel of the sample "
                         f"(it is all 0); True or 1 marks the sample.")
    low, high = min(r[0] for r in ranges), max(r[1] for r in ranges)
    if low == high:
        raise InputError(f"{where} is constant ({low}); Otsu's method needs two phases to "
                         f"separate.")
    integer = np.dtype(array.dtype).kind in "ui"
    bins = int(high) - int(low) + 1 if integer else OTSU_FLOAT_BINS
    ensure_fits(bins * 8 * (HISTOGRAMS_PER_SUM + 1),
                f"The histogram of {bins} gray values of {where} for Otsu's threshold",
                "give a threshold value (--threshold VALUE)")
    counts_task = dask.delayed(_otsu_counts, pure=False)
    parts = [counts_task(array, roi, lo, hi, low, high) for lo, hi in blocks(shape, chunks)]
    while len(parts) > 1:
        parts = [dask.delayed(_sum_counts, pure=False)(*parts[i:i + HISTOGRAMS_PER_SUM])
                 for i in range(0, len(parts), HISTOGRAMS_PER_SUM)]
    counts = compute(parts)[0]
    if integer:
        centres = np.arange(int(low), int(high) + 1)
    else:
        # the bin edges numpy makes of the whole scan's range, as threshold_otsu gets them
        edges = np.histogram(np.array([low, high]), bins=OTSU_FLOAT_BINS, range=(low, high))[1]
        centres = (edges[:-1] + edges[1:]) / 2.0
    return float(threshold_otsu(hist=(counts, centres)))


def _foreground(dtype, facts):
    """The value marking the foreground of a binary mask, as
    :func:`voxtopo.porosity._analysis._binary_foreground` decides it, or None."""
    if dtype == bool:
        return True
    if not (np.issubdtype(dtype, np.integer) or np.issubdtype(dtype, np.floating)):
        return None
    if dtype == np.uint8 and not any(f["has_1"] for f in facts):
        return 255 if all(f["only_0_255"] for f in facts) else None
    return 1 if all(f["only_0_1"] for f in facts) else None


class _Roi(_Box):
    """A region of interest on the scan's grid, with the value marking the sample."""

    def __init__(self, array, foreground, chunks):
        super().__init__(array.shape, chunks, array.dtype)
        self.array, self.foreground = array, foreground
        self.source = getattr(array, "source", "") or "the region of interest"

    def __getitem__(self, index):
        return np.asarray(self.array[index])


def _roi_view(roi, shape, chunks, compute):
    import dask

    named = getattr(roi, "source", "") or "the region of interest"
    if tuple(roi.shape) != tuple(shape):
        raise InputError(f"The region of interest {named} has shape {tuple(roi.shape)} but "
                         f"the scan has shape {tuple(shape)}; give a mask of the same grid.")
    task = dask.delayed(_value_facts, pure=False)
    facts = compute([task(roi, lo, hi) for lo, hi in blocks(shape, chunks)])
    foreground = _foreground(np.dtype(roi.dtype), facts)
    if foreground is None:
        raise InputError(f"The region of interest {named} is not a binary mask (True or 1 "
                         f"marks the sample); threshold it first.")
    return _Roi(roi, foreground, chunks)
