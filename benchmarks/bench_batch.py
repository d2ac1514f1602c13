"""Batch throughput on the local cluster: 1 worker against 2, and the cost of the machinery.

Generates COUNT scans of SIZE^3 voxels (smoothed noise, seeded), then times

* ``direct``: :func:`voxtopo.pipeline.analyse` called on each scan in turn, in this process;
* ``batch-1`` and ``batch-2``: ``voxtopo.batch.run_batch`` on a new LocalCluster with one
  and two worker processes (cluster start-up included, and reported on its own).

and prints the throughput ratio batch-1 / batch-2 (target >= 1.8) and the per-scan
overhead of the batch machinery against the direct calls (target < 5 %), with the peak
resident memory of this process and of the largest worker.

    .venv/bin/python benchmarks/bench_batch.py            # 16 scans of 128^3
    .venv/bin/python benchmarks/bench_batch.py --size 48 --count 4   # a quick look

The machine this runs on may be shared: the script prints the load average before and
after, so that a reader can judge the numbers.
"""

from __future__ import annotations

import argparse
import io
import os
import resource
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import ndimage


def make_scans(folder: Path, count: int, size: int) -> list[Path]:
    rng = np.random.default_rng(2026)
    paths = []
    for i in range(count):
        volume = ndimage.gaussian_filter(rng.standard_normal((size,) * 3), 2.0 + (i % 4) * 0.5)
        path = folder / f"scan_{i:02d}.npy"
        np.save(path, volume.astype(np.float32))
        paths.append(path)
    return paths


def time_direct(paths: list[Path], out: Path) -> float:
    from voxtopo.pipeline import analyse

    out.mkdir()
    start = time.perf_counter()
    for path in paths:
        analyse(path, out / path.stem)
    return time.perf_counter() - start


def time_batch(manifest: Path, out: Path, workers: int) -> tuple[float, float]:
    """(seconds for the whole run, seconds the cluster took to start)."""
    import dask
    from distributed import LocalCluster

    from voxtopo import batch

    start = time.perf_counter()
    with dask.config.set(batch._WORKER_MEMORY_CONFIG):
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None, silence_logs=40,
                               memory_limit="6GiB")
    started = time.perf_counter() - start
    try:
        batch.run_batch(manifest, out, scheduler=cluster.scheduler_address,
                        stream=io.StringIO())
    finally:
        cluster.close()
    return time.perf_counter() - start, started


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=128)
    parser.add_argument("--count", type=int, default=16)
    args = parser.parse_args()
    print(f"load average before: {os.getloadavg()}; cores: {os.cpu_count()}")
    work = Path(tempfile.mkdtemp(prefix="voxtopo-bench-batch-"))
    try:
        paths = make_scans(work, args.count, args.size)
        manifest = work / "manifest.csv"
        manifest.write_text("path\n" + "".join(f"{p.name}\n" for p in paths))
        from voxtopo.pipeline import analyse

        analyse(paths[0], work / "warm-up")   # compile the kernels once (numba cache)
        direct = time_direct(paths, work / "direct")
        one, one_start = time_batch(manifest, work / "batch-1", 1)
        two, two_start = time_batch(manifest, work / "batch-2", 2)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    n = args.count
    own_peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10
    worker_peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 2**10
    print(f"{n} scans of {args.size}^3 voxels")
    print(f"direct analyse : {direct:8.1f} s  ({direct / n:6.2f} s per scan)")
    print(f"batch, 1 worker: {one:8.1f} s  ({one / n:6.2f} s per scan, cluster start "
          f"{one_start:.1f} s)")
    print(f"batch, 2 workers: {two:7.1f} s  ({two / n:6.2f} s per scan, cluster start "
          f"{two_start:.1f} s)")
    print(f"throughput ratio 2 workers / 1 worker: {one / two:5.2f}x (target >= 1.8x)")
    overhead = (one - direct) / direct
    steady = (one - one_start - direct) / direct
    print(f"batch overhead per scan against direct calls: {100 * overhead:+5.1f} % "
          f"({100 * steady:+5.1f} % without the cluster start; target < 5 %)")
    print(f"peak memory: this process {own_peak:.0f} MiB, largest worker {worker_peak:.0f} MiB")
    print(f"load average after: {os.getloadavg()}")


if __name__ == "__main__":
    main()
