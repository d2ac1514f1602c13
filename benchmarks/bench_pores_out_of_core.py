"""Wall time, CPU time and per-worker peak memory of `voxtopo pores --out-of-core`.

    PYTHONPATH=src .venv/bin/python benchmarks/bench_pores_out_of_core.py --size 512
    PYTHONPATH=src .venv/bin/python benchmarks/bench_pores_out_of_core.py --size 2048 \\
        --folder /big/disk --workers 2 --memory-per-worker 6e9

The data: a uint8 OME-Zarr mask of sintered beads (radius 7 to 11 voxels, seeded, about 55 %
solid), written chunk by chunk: every bead is listed first (a few floats each), then each
chunk draws the beads that reach it, so no more than one chunk of voxels is ever in memory
and nothing large is made before the run. The store, the result folder and the scratch
folder all go inside --folder (default a new temporary folder, removed at the end unless
--keep).

The run: a local dask cluster of --workers processes set up as a local out-of-core run's
(voxtopo.batch.cluster.local_cluster: one thread each, --memory-per-worker bytes each,
default an equal share of 80 % of the available memory), the whole out-of-core
pores job (segmentation, separable EDT, chunked union-find sweeps, percolation along the
three axes, local counts, result folder).

Printed: the store's size and chunks; the planned memory per worker (checked before the
run starts: the largest task, often a merge of border data, and the worker's own baseline
of about 0.4 GB) beside each worker's measured peak resident memory (getrusage, which
includes the interpreter and libraries); wall time; CPU time of the workers and
of this process; the seconds of each stage; the machine's load average before and after.

A 2048^3 run (8.6e9 voxels) needs, before zarr's compression, at most 9 bytes per voxel of
scratch (77 GB: during the last pass of the distance transform, the float32 store of the
pass before and the float32 signed distance it writes, beside the one-byte phase store),
and the input store; zarr's default compression (zstd) takes the stores of a bead packing
to a fraction of that (printed: the scratch folder's largest size, sampled every few
seconds). Give --folder on a disk with room for it.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

SEED = 20261203


def bead_list(size: int, radius=(7.0, 11.0), solid_fraction=0.55, seed=SEED) -> np.ndarray:
    """(n, 4) centres (z, y, x) and radii of overlapping beads filling about
    ``solid_fraction`` of a ``size``^3 volume before overlaps (seeded)."""
    rng = np.random.default_rng(seed)
    mean_volume = 4 / 3 * np.pi * np.mean(radius) ** 3
    count = int(solid_fraction * size ** 3 / mean_volume)
    centres = rng.uniform(0, size, (count, 3))
    radii = rng.uniform(*radius, count)
    return np.column_stack([centres, radii])


def write_store(path: Path, size: int, chunk: int, spacing_um: float = 2.0,
                processes: int = 1) -> Path:
    """An OME-Zarr mask (1 = pore, uint8) of the bead packing, written chunk by chunk, one
    slab of chunks at a time by each of ``processes`` processes."""
    import zarr

    root = zarr.open_group(str(path), mode="w")
    root.create_array("0", shape=(size,) * 3, chunks=(chunk,) * 3, dtype=np.uint8)
    root.attrs["multiscales"] = [{
        "version": "0.4",
        "axes": [{"name": a, "type": "space", "unit": "micrometer"} for a in "zyx"],
        "datasets": [{"path": "0", "coordinateTransformations":
                      [{"type": "scale", "scale": [spacing_um] * 3}]}]}]
    slabs = [(str(path), size, chunk, z0) for z0 in range(0, size, chunk)]
    if processes == 1:
        for slab in slabs:
            _write_slab(*slab)
    else:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(processes, mp_context=multiprocessing.get_context("spawn")) \
                as pool:
            list(pool.map(_write_slab, *zip(*slabs)))
    return path


_BEADS = {}


def _write_slab(path: str, size: int, chunk: int, z0: int) -> None:
    """Write the chunks whose first plane is ``z0`` (the bead list and its tree are made
    once per process)."""
    import zarr
    from scipy.spatial import cKDTree

    if size not in _BEADS:
        beads = bead_list(size)
        _BEADS[size] = beads, cKDTree(beads[:, :3])
    beads, tree = _BEADS[size]
    reach = float(beads[:, 3].max())
    data = zarr.open_group(path, mode="r+")["0"]
    starts = range(0, size, chunk)
    for y0 in starts:
        for x0 in starts:
            lo = np.array([z0, y0, x0])
            hi = np.minimum(lo + chunk, size)
            middle = (lo + hi - 1) / 2
            half = np.linalg.norm((hi - lo) / 2)
            near = tree.query_ball_point(middle, half + reach)
            solid = np.zeros(tuple(hi - lo), bool)
            for z, y, x, r in beads[near]:
                # only the box of the bead within the chunk
                first = np.maximum(np.floor([z - r, y - r, x - r]).astype(int), lo)
                last = np.minimum(np.ceil([z + r, y + r, x + r]).astype(int) + 1, hi)
                if np.any(last <= first):
                    continue
                grid = np.ogrid[tuple(slice(a, b) for a, b in zip(first, last))]
                inside = ((grid[0] - z) ** 2 + (grid[1] - y) ** 2 + (grid[2] - x) ** 2
                          <= r * r)
                solid[tuple(slice(a - o, b - o) for a, b, o in zip(first, last, lo))] |= inside
            data[z0:hi[0], y0:hi[1], x0:hi[2]] = (~solid).astype(np.uint8)


def tree_bytes(folder: Path, skip: Path | None = None) -> int:
    """Bytes of the files under ``folder``, less those under ``skip``."""
    total = 0
    for root, dirs, files in os.walk(folder):
        dirs[:] = [d for d in dirs if Path(root, d) != skip]
        for name in files:
            try:
                total += os.stat(os.path.join(root, name)).st_size
            except FileNotFoundError:   # removed meanwhile
                pass
    return total


class FolderPeak(threading.Thread):
    """The largest size ``folder``, less the input store ``skip``, reaches while the run
    lasts, sampled every ``every`` seconds (the scratch stores, the result and the
    workers' own folders)."""

    def __init__(self, folder: Path, skip: Path, every: float = 3.0):
        super().__init__(daemon=True)
        self.folder, self.skip, self.every = folder, skip, every
        self.peak = 0
        self.done = threading.Event()

    def run(self):
        while not self.done.wait(self.every):
            self.peak = max(self.peak, tree_bytes(self.folder, self.skip))


class StageClock:
    """Prints, as the run goes, when each stage starts, so a long run tells how far it
    got even if it is stopped."""

    def __init__(self, start: float):
        self.start, self.phase = start, None

    def __call__(self, phase: str, fraction: float) -> None:
        if phase != self.phase:
            self.phase = phase
            print(f"  {time.perf_counter() - self.start:8.1f} s  {phase}", flush=True)


def _usage():
    """(peak resident bytes, CPU seconds) of the calling process."""
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_maxrss * 1024, usage.ru_utime + usage.ru_stime


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--size", type=int, default=512, help="edge of the cube (voxels)")
    parser.add_argument("--chunk", type=int, default=128, help="chunk edge (voxels)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--memory-per-worker", type=float, default=None,
                        help="bytes (default an equal share of 80 %% of available memory)")
    parser.add_argument("--folder", type=Path, default=None,
                        help="where the store, the result and the scratch go")
    parser.add_argument("--keep", action="store_true", help="keep the folder")
    args = parser.parse_args(argv)

    from voxtopo.batch.cluster import local_cluster
    from voxtopo.jobs import pores
    from voxtopo.memory import available_bytes, human
    from voxtopo.porosity._out_of_core import plan_tasks

    folder = args.folder or Path(tempfile.mkdtemp(prefix="bench-ooc-pores-"))
    folder.mkdir(parents=True, exist_ok=True)
    shape, chunks = (args.size,) * 3, (args.chunk,) * 3
    print(f"load average before: {os.getloadavg()}")
    clock = time.perf_counter()
    store = write_store(folder / "beads.ome.zarr", args.size, args.chunk,
                        processes=args.workers)
    print(f"store: {store} {args.size}^3 uint8 in {args.chunk}^3 chunks, written in "
          f"{time.perf_counter() - clock:.1f} s")
    share = int(args.memory_per_worker or 0.8 * available_bytes() / args.workers)
    plan = plan_tasks(shape, chunks)
    planned = plan.per_worker
    print(f"planned memory per worker: {human(planned)} = {human(plan.largest)} for "
          f"{plan.largest_task} + the worker's baseline; the tasks: "
          + ", ".join(f"{what} {human(size)}" for size, what in plan.tasks())
          + f"; worker memory limit {human(share)}")
    # the workers a local out-of-core run starts (voxtopo.jobs.pores.dask_scheduler)
    client, cluster = local_cluster(args.workers, share, folder / "dask-scratch",
                                    dashboard=False, config={"distributed.worker.daemon": False})
    try:
        with client:
            before = client.run(_usage)
            start_cpu = _usage()[1]
            disk = FolderPeak(folder, store)
            disk.start()
            clock = time.perf_counter()
            result = pores.pores_out_of_core(store, folder / "result", scheduler=client,
                                             scratch=folder, progress=StageClock(clock))
            wall = time.perf_counter() - clock
            disk.done.set()
            after = client.run(_usage)
    finally:
        cluster.close()
    worker_cpu = sum(after[w][1] - before[w][1] for w in after)
    own_cpu = _usage()[1] - start_cpu
    summary = result.analysis.summary
    print(f"wall {wall:.1f} s; CPU {worker_cpu:.1f} s in the workers + {own_cpu:.1f} s here "
          f"(CPU / wall = {(worker_cpu + own_cpu) / wall:.2f} on {os.cpu_count()} cores)")
    for name, (peak, _) in sorted(after.items()):
        print(f"worker {name}: peak resident {human(peak)} (planned per worker "
              f"{human(planned)}, ratio {peak / planned:.2f})")
    print(f"this process: peak resident {human(_usage()[0])}")
    print("stages (s):", json.dumps(summary["timings_seconds"]))
    print(f"disk: the folder less the input store peaked at {human(disk.peak)} (sampled "
          f"every {disk.every:.0f} s); the input store: {human(tree_bytes(store))} "
          f"({human(args.size ** 3)} before compression)")
    print(f"porosity {summary['porosity']:.4f}, pores {summary['counts']['pores']}, "
          f"percolates {summary['percolates']}")
    print(f"load average after: {os.getloadavg()}")
    if not args.keep and args.folder is None:
        shutil.rmtree(folder, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
