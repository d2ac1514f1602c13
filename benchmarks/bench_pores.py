"""Time per stage and peak memory of `voxtopo pores` on a bead packing.

    .venv/bin/python benchmarks/bench_pores.py               # 256^3, engine auto
    .venv/bin/python benchmarks/bench_pores.py --size 128 --engine gudhi

The packing: beads of radius 14 voxels dropped at random (seeded) into the volume, each
new bead kept when its centre is at least 1.8 radii from every kept one, so neighbours
overlap a little like sintered beads. The pore phase is everything else.

Printed: the seconds of each stage of the analysis and of writing the folder, each as a
share of the total (the distance transform and persistence should dominate), and the peak
resident memory of the process against the estimate the analysis checked before
allocating. A second engine can run side by side with --compare ENGINE (ratios printed).
"""

from __future__ import annotations

import argparse
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def bead_packing(size: int, radius: float = 14.0, seed: int = 7) -> np.ndarray:
    """Pore mask (True = pore) of a random packing of slightly overlapping beads."""
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(seed)
    spacing = 1.8 * radius
    kept = np.zeros((0, 3))
    for _ in range(40):
        batch = rng.uniform(0, size, size=(2000, 3))
        if len(kept):
            clear = np.isinf(cKDTree(kept).query(batch, distance_upper_bound=spacing)[0])
            batch = batch[clear]
        # within the batch the earlier candidate wins, as if they had been dropped in turn
        drop = set()
        for i, j in sorted(cKDTree(batch).query_pairs(spacing)):
            if i not in drop:
                drop.add(j)
        batch = batch[[k for k in range(len(batch)) if k not in drop]]
        kept = np.vstack([kept, batch])
    solid = np.zeros((size,) * 3, dtype=bool)
    reach = int(np.ceil(radius))
    for centre in kept:
        lo = np.maximum(np.floor(centre).astype(int) - reach, 0)
        hi = np.minimum(np.floor(centre).astype(int) + reach + 1, size)
        grids = np.meshgrid(*[np.arange(a, b) for a, b in zip(lo, hi)], indexing="ij")
        inside = sum((g - c) ** 2 for g, c in zip(grids, centre)) <= radius ** 2
        solid[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]] |= inside
    return ~solid


def peak_rss_bytes() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def run(mask: np.ndarray, engine: str) -> dict:
    from voxtopo.memory import human
    from voxtopo.jobs.pores import write_pores
    from voxtopo.porosity import analyse
    from voxtopo.porosity._analysis import _estimate_bytes

    start = time.perf_counter()
    result = analyse(mask, spacing=(2.5, 2.5, 2.5), unit="um", engine=engine)
    analyse_seconds = time.perf_counter() - start
    folder = Path(tempfile.mkdtemp(prefix="bench-pores-"))
    start = time.perf_counter()
    write_pores(folder / "out", result)
    write_seconds = time.perf_counter() - start
    shutil.rmtree(folder)
    stages = dict(result.summary["timings_seconds"])
    stages["write (csv, json, plots)"] = write_seconds
    total = analyse_seconds + write_seconds
    print(f"\nengine {engine}: {total:.1f} s in all "
          f"({result.diagram.engine} engine for the diagram)")
    for name, seconds in stages.items():
        print(f"  {name:<28} {seconds:9.2f} s  {seconds / total:6.1%}")
    print(f"  estimate checked before allocating: {human(_estimate_bytes(mask.shape, 26, engine))}")
    print(f"  peak resident memory so far:        {human(peak_rss_bytes())}")
    counts = result.summary["counts"]
    print(f"  porosity {result.summary['porosity']:.3f}, {counts['pores']} pores, "
          f"{counts['grains']} grains, percolates "
          + ", ".join(f"{a} {state}" + (f" (r = {radius:.3g} um)" if radius else "")
                      for (a, state), radius in zip(result.summary["percolates"].items(),
                                                    result.summary["percolation_radius"].values())))
    return {"total": total, **stages}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=256, help="edge of the cube in voxels")
    parser.add_argument("--engine", default="auto", help="persistence engine")
    parser.add_argument("--compare", metavar="ENGINE",
                        help="also run with this engine and print the time ratios")
    args = parser.parse_args(argv)
    start = time.perf_counter()
    mask = bead_packing(args.size)
    print(f"bead packing {args.size}^3: porosity {mask.mean():.3f}, made in "
          f"{time.perf_counter() - start:.1f} s (not counted below)")
    first = run(mask, args.engine)
    if args.compare:
        second = run(mask, args.compare)
        print(f"\nratio {args.engine} / {args.compare}:")
        for name in first:  # stages under a tenth of a second are timer noise
            if min(first[name], second.get(name, 0.0)) >= 0.1:
                print(f"  {name:<28} {first[name] / second[name]:6.2f}")
    shares = {k: v / first["total"] for k, v in first.items() if k != "total"}
    heavy = shares.get("distance_transform", 0) + shares.get("persistence", 0)
    print(f"\ndistance transform + persistence: {heavy:.0%} of the time")
    return 0


if __name__ == "__main__":
    sys.exit(main())
