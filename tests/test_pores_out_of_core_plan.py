"""The memory plan of out-of-core pores: each kind of task, the merges of border data
among them, and the worker's own baseline, checked against what the tasks really hold."""

import tracemalloc

import numpy as np
import pytest
from scipy import ndimage

from voxtopo.engine import chunked
from voxtopo.errors import TooBigError
from voxtopo.jobs import pores as pores_job
from voxtopo.memory import human
from voxtopo.porosity import _out_of_core, analyse_chunked
from voxtopo.porosity._local_counts import HALO
from voxtopo.porosity._out_of_core import (
    BUDGET_FRACTION,
    BYTES_PER_COUNT_VOXEL,
    WORKER_BASELINE_BYTES,
    _check_worker_memory,
    plan_tasks,
)


def _blobs(shape, seed, sigma=2.0):
    """A random two-phase structure: smoothed noise below 0 is pore."""
    rng = np.random.default_rng(seed)
    return ndimage.gaussian_filter(rng.standard_normal(shape), sigma) < 0


class _Workers:
    """A distributed scheduler as the plan sees one: workers with memory limits."""

    def __init__(self, *limits):
        self.limits = limits

    def scheduler_info(self):
        return {"workers": {f"tcp://127.0.0.1:{9000 + k}": {"memory_limit": limit}
                            for k, limit in enumerate(self.limits)}}


def _lazy(shape):
    """A scan of ``shape`` that holds no voxels (the plan is checked before reading)."""
    return np.broadcast_to(np.zeros((), np.uint8), shape)


def test_merge_plan_grows_with_the_chunk_faces_merged():
    # counted by hand: a face of n x n voxels; across it each voxel has 3 x 3 neighbours
    # in the 26-neighbourhood (common practice, no source)
    merges = chunked.planned_merges((64, 64, 64), (16, 16, 16))
    top = merges[-1]
    assert top.axis == 2 and top.first[1][2] == 32 and top.second[0][2] == 32
    assert top.strip == 9 * 64 * 64                # the edges across the face, one strip
    # of them a spanning forest is kept, and a forest has fewer edges than vertices: the
    # strip's rows on one side and one row more on either side on the other (common
    # practice, no source)
    assert top.crossing == 2 * 64 * 64 + 2 * 64
    assert top.vertices >= 2 * 64 * 64                      # the middle faces of both halves
    first = merges[0]                                       # two chunks, along z
    assert first.strip == 9 * 16 * 16 and first.crossing == 2 * 16 * 16 + 2 * 16
    sizes = [m.nbytes for m in merges]
    assert max(sizes) > 5 * min(sizes)
    # the same grid of chunks, twice the edge: four times the faces
    small = chunked.planned_merge_bytes((64, 64, 64), (16, 16, 16))
    large = chunked.planned_merge_bytes((128, 128, 128), (32, 32, 32))
    assert 3.9 * small < large < 4.1 * small
    # smaller chunks do not make the merges smaller: near the top they hold whole
    # cross-sections of the scan
    assert chunked.planned_merge_bytes((128, 128, 128), (16, 16, 16)) >= large
    # the tree merges along the axis where its blocks are thinnest, so no merge below the
    # top holds more than the top, which holds the middle cross-section twice
    assert max(sizes) == sizes[-1]
    # the plan found level by level is the largest of every merge
    for shape, chunks in [((65, 47, 33), (16, 8, 10)), ((41, 37), (9, 11)),
                          ((13, 11, 17), (13, 4, 5))]:
        assert chunked.planned_merge_bytes(shape, chunks) == max(
            m.nbytes for m in chunked.planned_merges(shape, chunks))
    assert chunked.planned_merge_bytes((40, 40), (40, 40)) == 0


def test_worker_plan_counts_the_largest_merge_and_the_baseline():
    plan = plan_tasks((1024, 1024, 1024), (128, 128, 128))
    assert plan.merge > max(plan.distance_pass, plan.union_find, plan.local_counts)
    assert plan.per_worker == plan.merge + WORKER_BASELINE_BYTES
    # the merges do not shrink with the chunks: smaller chunks cannot make them fit
    assert plan_tasks((1024, 1024, 1024), (32, 32, 32)).merge >= plan.merge


#: allocations of other threads that tracemalloc counts within a task (see below)
OTHER_THREADS_BYTES = 256_000


def _nbytes(block):
    return sum(getattr(block, name).nbytes for name in
               ("vert_id", "vert_value", "edge_a", "edge_b", "edge_voxel", "edge_value"))


def test_each_merge_of_a_run_holds_no_more_than_its_plan(tmp_path, monkeypatch):
    """tracemalloc (Python's own allocation tracer, which numpy reports to) measures what
    each merge task of a whole 64^3 run in 16^3 chunks allocates, plus the two blocks it
    is handed; none exceeds the plan of that merge, and the largest uses most of its
    plan (the plan is not a loose bound). The local-count tasks stay within theirs."""
    mask = _blobs((64, 64, 64), seed=3)
    # numba loads its cached kernels at the first call: that belongs to the baseline
    chunked.chunked_persistence(mask[:8, :8, :8].astype(np.float32), chunks=(4, 4, 4),
                                scheduler="sync")
    plans = {}
    measured = []
    merge = chunked._merge

    def traced_merge(source, a, b, axis, sweep):
        if source.shape not in plans:
            plans[source.shape] = {(m.first, m.second): m for m in
                                   chunked.planned_merges(source.shape, source.chunks)}
        plan = plans[source.shape][((a.lo, a.hi), (b.lo, b.hi))]
        tracemalloc.start()         # traces what this task allocates, and nothing else
        try:
            result = merge(source, a, b, axis, sweep)
            held = tracemalloc.get_traced_memory()[1] + _nbytes(a) + _nbytes(b)
        finally:
            tracemalloc.stop()
        measured.append((held, plan.nbytes, len(a.vert_id) + len(b.vert_id), plan.vertices))
        return result

    counts = []
    count_chunk = _out_of_core._count_chunk

    def traced_count(field, codes, lo, hi, shape, *args):
        halo = [min(b + HALO, n) - max(a - HALO, 0) for a, b, n in zip(lo, hi, shape)]
        tracemalloc.start()
        try:
            result = count_chunk(field, codes, lo, hi, shape, *args)
            counts.append((tracemalloc.get_traced_memory()[1],
                           np.prod(halo) * BYTES_PER_COUNT_VOXEL))
        finally:
            tracemalloc.stop()
        return result

    monkeypatch.setattr(chunked, "_merge", traced_merge)
    monkeypatch.setattr(_out_of_core, "_count_chunk", traced_count)
    analyse_chunked(mask, scratch=tmp_path, chunks=(16, 16, 16), scheduler="sync")
    assert len(counts) == 64
    assert all(held <= planned + OTHER_THREADS_BYTES for held, planned in counts)
    # 4 sweeps (pores and grains with their duals, which give the border flags too, the
    # pores' sweep percolation too), each of 64 chunks
    assert len(measured) == 4 * 63
    # tracemalloc also sees what other threads allocate meanwhile (the event loop of a
    # dask cluster another test left running): a quarter of a megabyte is allowed for it
    over = [(held, planned) for held, planned, _, _ in measured
            if held > planned + OTHER_THREADS_BYTES]
    assert over == []
    assert all(vertices <= planned for _, _, vertices, planned in measured)
    # the merges with the largest plan (the top of each sweep's tree; dask may run the
    # sweeps in any order): the fullest of them uses more than half of it
    planned = max(m[1] for m in measured)
    held = max(m[0] for m in measured if m[1] == planned)
    assert held > 0.5 * planned


def test_a_worker_whose_limit_is_below_the_plan_is_refused_in_one_sentence(tmp_path):
    plan = plan_tasks((1024, 1024, 1024), (128, 128, 128))
    limit = int(plan.per_worker / BUDGET_FRACTION) - 1
    with pytest.raises(TooBigError) as err:
        analyse_chunked(_lazy((1024, 1024, 1024)), scratch=tmp_path / "work",
                        chunks=(128, 128, 128), scheduler=_Workers(limit, 2 * limit))
    message = str(err.value)
    assert message.count(". ") == 0 and "\n" not in message and message.endswith(".")
    assert f"{human(plan.per_worker)} per worker" in message     # the per-worker need
    assert "largest merge" in message and "400.0 MB for the worker itself" in message
    assert f"memory limit of at least {human(plan.per_worker / BUDGET_FRACTION)}" in message
    assert "smaller chunks would not help" in message
    assert not (tmp_path / "work").exists()
    # workers just large enough pass: the check compares against the plan itself
    assert _check_worker_memory(_Workers(limit + 2), plan, (1024, 1024, 1024),
                                (128, 128, 128), 2) is None


def test_a_refusal_that_smaller_chunks_would_mend_names_them(tmp_path):
    with pytest.raises(TooBigError, match=r"--chunks 128,128,128\)\.$"):
        analyse_chunked(_lazy((256, 256, 256)), scratch=tmp_path / "work",
                        chunks=(256, 256, 256), scheduler=_Workers(int(2e9)))


def test_the_pores_job_refused_by_its_workers_writes_nothing(tmp_path):
    with pytest.raises(TooBigError, match="per worker"):
        pores_job.pores_out_of_core(_blobs((24, 24, 24), seed=4), tmp_path / "out",
                                    pores_job.PoresOptions(out_of_core=True, chunks=(8, 8, 8)),
                                    scratch=tmp_path / "scratch",
                                    scheduler=_Workers(WORKER_BASELINE_BYTES))
    assert not (tmp_path / "out").exists()
    assert list((tmp_path / "scratch").iterdir()) == []
