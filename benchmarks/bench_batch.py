"""Batch throughput on the local cluster: 1 worker against 2, and the cost of the machinery.

Generates COUNT scans of SIZE^3 voxels (smoothed noise, seeded), then times

* ``direct``: :func:`voxtopo.jobs.analyse.analyse` called on each scan in turn, in this process,
  once before and once after the batch runs (the mean is the reference);
* ``batch-1`` and ``batch-2``: ``voxtopo.batch.run_batch`` on a new LocalCluster with one
  and two worker processes (cluster start-up, kernel warm-up and shut-down included "in
  all", and reported on their own; "steady" leaves them out).

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
    from voxtopo.jobs.analyse import analyse

    out.mkdir()
    start = time.perf_counter()
    for path in paths:
        analyse(path, out / path.stem)
    return time.perf_counter() - start


def _warm_up(size: int = 24) -> None:
    """Load the kernels (numba compiles them, or reads its cache) on a small scan, in each
    worker and in this process before the direct calls alike, so that the steady figures
    compare like with like."""
    from voxtopo import Scan
    from voxtopo.jobs.analyse import analyse

    folder = Path(tempfile.mkdtemp(prefix="voxtopo-warm-"))
    try:
        rng = np.random.default_rng(0)
        analyse(Scan(ndimage.gaussian_filter(rng.standard_normal((size,) * 3), 2.0)),
                folder / "warm")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def time_batch(manifest: Path, out: Path, workers: int) -> tuple[float, float, float]:
    """(seconds for the whole run, seconds the cluster took to start, seconds the workers
    took to load the kernels, seconds the cluster took to shut down)."""
    from voxtopo import batch

    start = time.perf_counter()
    client, cluster = batch.local_cluster(workers, 6 * 2**30, out.parent / f"{out.name}-dask",
                                          dashboard=False)
    started = time.perf_counter() - start
    try:
        with client:
            client.run(_warm_up)
        warmed = time.perf_counter() - start - started
        batch.run_batch(manifest, out, scheduler=cluster.scheduler_address,
                        stream=io.StringIO())
    finally:
        ran = time.perf_counter()
        cluster.close()
    return time.perf_counter() - start, started, warmed, time.perf_counter() - ran


def main() -> None:
    # batch tasks run the engine in one thread each; the direct calls must do the same
    # for a like-for-like comparison (the workers inherit this setting too)
    os.environ["VOXTOPO_THREADS"] = "1"
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
        _warm_up()
        # direct calls before and after the batch runs: their mean is the reference, and
        # their difference shows how much the machine itself drifted meanwhile
        before = time_direct(paths, work / "direct-before")
        one, one_start, one_warm, one_stop = time_batch(manifest, work / "batch-1", 1)
        two, two_start, two_warm, two_stop = time_batch(manifest, work / "batch-2", 2)
        after = time_direct(paths, work / "direct-after")
        direct = (before + after) / 2
    finally:
        shutil.rmtree(work, ignore_errors=True)
    n = args.count
    own_peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10
    worker_peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 2**10
    print(f"{n} scans of {args.size}^3 voxels")
    print(f"direct analyse : {direct:8.1f} s  ({direct / n:6.2f} s per scan; {before:.1f} s "
          f"before the batch runs, {after:.1f} s after)")
    for label, total, start, warm, stop in (("1 worker ", one, one_start, one_warm, one_stop),
                                            ("2 workers", two, two_start, two_warm, two_stop)):
        print(f"batch, {label}: {total:7.1f} s  ({total / n:6.2f} s per scan; cluster start "
              f"{start:.1f} s, kernel warm-up {warm:.1f} s, cluster shut-down {stop:.1f} s)")
    one_steady = one - one_start - one_warm - one_stop
    two_steady = two - two_start - two_warm - two_stop
    print(f"throughput ratio 2 workers / 1 worker: {one / two:5.2f}x in all, "
          f"{one_steady / two_steady:5.2f}x steady (target >= 1.8x)")
    print(f"batch overhead per scan against direct calls (1 worker): "
          f"{100 * (one - direct) / direct:+5.1f} % in all, "
          f"{100 * (one_steady - direct) / direct:+5.1f} % steady: the batch command itself "
          f"(tasks, tables, report), without the cluster's start, warm-up and shut-down "
          f"(target < 5 %)")
    print(f"peak memory: this process {own_peak:.0f} MiB, largest worker {worker_peak:.0f} MiB")
    print(f"load average after: {os.getloadavg()}")


if __name__ == "__main__":
    main()
