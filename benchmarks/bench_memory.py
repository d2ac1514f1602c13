"""Whole `voxtopo analyse` runs on 16-bit micro-CT-like volumes: time, peak memory, estimate.

Run from the repository root, one heavy run at a time (under the shared lock)::

    flock /work/wt/heavy.lock .venv/bin/python benchmarks/bench_memory.py --sizes 512
    flock /work/wt/heavy.lock .venv/bin/python benchmarks/bench_memory.py --sizes 1024

For each edge length the script writes a seeded uint16 volume of sintered beads into a
.npy file in the scratch folder (plane by plane, so that no full-size float copy is ever
held; an existing file of the right shape is reused), then runs ``voxtopo analyse`` on it
as a child process with the default options (full diagram, dimensions 0, 1 and 2;
significance tested at the default level) and prints:

* wall time and CPU time (user + system) of the child;
* its peak resident set size (``ru_maxrss`` from ``wait4``: the kernel's own count, no
  polling);
* the memory plan: the input volume the child loads, plus the largest step of
  ``voxtopo.jobs.analyse.preparation_plan`` (whose persistence step is
  ``voxtopo.engine.estimate``), plus the interpreter with its libraries, measured here as
  the peak of ``voxtopo analyse --help``; and the ratio plan / measured peak (the goal is
  0.75 to 1.25).

Numbers are only comparable on an otherwise idle machine: the load average is printed.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import ndimage

SEED = 20261201

#: Gray levels of the 16-bit scan: dark matrix, bright beads, reconstruction noise.
MATRIX, BEADS, NOISE = 15_000.0, 43_000.0, 6_000.0

#: Planes generated at once; the blur reads BLUR_HALO planes beyond each side.
SLAB_PLANES = 32
BLUR_HALO = 4


def bead_volume(shape, path: Path, radius=(7.0, 11.0), solid_fraction=0.55,
                noise: float = NOISE) -> None:
    """Write a uint16 volume of overlapping bright beads in a dark matrix, with Gaussian
    noise blurred over about a voxel, into the .npy file ``path``, slab by slab.

    The beads are drawn once from the seed; the noise of plane ``z`` comes from its own
    generator seeded with ``(SEED, z)``, so each slab (with its halo) sees exactly the
    planes its neighbours see and the file does not depend on the slab size.
    """
    rng = np.random.default_rng(SEED)
    mean_volume = 4 / 3 * np.pi * np.mean(radius) ** 3
    count = int(solid_fraction * np.prod(shape, dtype=np.int64) / mean_volume)
    radii = rng.uniform(*radius, count)
    centres = rng.uniform(0, 1, (count, 3)) * np.asarray(shape, dtype=np.float64)
    by_top = np.argsort(centres[:, 0] - radii)
    tops = (centres[:, 0] - radii)[by_top]
    target = np.lib.format.open_memmap(path, mode="w+", dtype=np.uint16, shape=tuple(shape))
    depth = shape[0]
    for first in range(0, depth, SLAB_PLANES):
        low, high = max(first - BLUR_HALO, 0), min(first + SLAB_PLANES + BLUR_HALO, depth)
        solid = np.zeros((high - low,) + tuple(shape[1:]), dtype=bool)
        for b in by_top[:np.searchsorted(tops, high)]:
            r, centre = radii[b], centres[b]
            if centre[0] + r < low:
                continue
            start = np.maximum(np.floor(centre - r).astype(int), 0)
            stop = np.minimum(np.ceil(centre + r).astype(int) + 1, shape)
            start[0], stop[0] = max(start[0], low), min(stop[0], high)
            if start[0] >= stop[0]:
                continue
            grid = np.ogrid[tuple(slice(a, b) for a, b in zip(start, stop))]
            inside = sum((g - c) ** 2 for g, c in zip(grid, centre)) <= r * r
            start[0] -= low
            stop[0] -= low
            solid[tuple(slice(a, b) for a, b in zip(start, stop))] |= inside
        slab = np.where(solid, np.float32(BEADS), np.float32(MATRIX))
        del solid
        for z in range(low, high):
            plane_rng = np.random.default_rng((SEED, z))
            slab[z - low] += plane_rng.standard_normal(shape[1:], dtype=np.float32) * noise
        slab = ndimage.gaussian_filter(slab, 1.0, output=np.float32, truncate=BLUR_HALO)
        inner = slab[first - low:first - low + min(SLAB_PLANES, depth - first)]
        target[first:first + inner.shape[0]] = np.clip(np.rint(inner), 0, 65535)
    target.flush()
    del target


def _child_peak(command) -> tuple[float, float, int, int]:
    """(wall s, CPU s, peak resident bytes, exit code) of ``command`` as a child process."""
    wall = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(child.pid, 0)
    wall = time.perf_counter() - wall
    child.returncode = os.waitstatus_to_exitcode(status)
    error = child.stderr.read().decode(errors="replace").strip()
    if child.returncode:
        print(f"   child failed (exit {child.returncode}): {error[-500:]}")
    return wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss * 1024, child.returncode


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", nargs="+", type=int, default=[512, 1024],
                        help="edge lengths of the cubic volumes (default 512 1024)")
    parser.add_argument("--scratch", type=Path,
                        default=Path(tempfile.gettempdir()) / "voxtopo-bench-memory",
                        help="folder for the generated volumes and the results")
    parser.add_argument("--keep", action="store_true", help="keep the generated volumes")
    parser.add_argument("--noise", type=float, default=NOISE,
                        help=f"standard deviation of the noise in gray levels before the blur "
                             f"(default {NOISE:g}, a noisy scan; 500 gives a smooth one, "
                             f"whose reduction keeps far fewer columns than the plan)")
    args = parser.parse_args(argv)

    from voxtopo.engine import estimate
    from voxtopo.jobs.analyse import AnalysisOptions, preparation_plan
    from voxtopo.memory import human
    from voxtopo.scan import Scan

    args.scratch.mkdir(parents=True, exist_ok=True)
    cli = [sys.executable, "-m", "voxtopo.cli"]
    print(f"load average at start: {os.getloadavg()}  (2 cores; other work may be running)")
    _, _, interpreter, _ = _child_peak(cli + ["analyse", "--help"])
    print(f"interpreter with voxtopo's libraries: peak {human(interpreter)}")
    for size in args.sizes:
        shape = (size,) * 3
        path = args.scratch / f"beads_{size}_uint16_noise{args.noise:g}.npy"
        ready = path.exists() and np.load(path, mmap_mode="r").shape == shape
        if not ready:
            start = time.perf_counter()
            bead_volume(shape, path, noise=args.noise)
            print(f"\nwrote {path} in {time.perf_counter() - start:.0f} s")
        out = args.scratch / f"result_{size}"
        shutil.rmtree(out, ignore_errors=True)
        wall, cpu, peak, code = _child_peak(cli + ["analyse", str(path), "--out", str(out)])
        volume = int(np.prod(shape, dtype=np.int64)) * 2
        probe = Scan(np.lib.format.open_memmap(path, mode="r"))
        steps = preparation_plan(probe, AnalysisOptions())
        engine_need = estimate(shape, np.uint16)
        plan = volume + max(needed for _, needed in steps) + interpreter
        print(f"\n== {size}^3 uint16 sintered beads, noise {args.noise:g}, voxtopo analyse "
              f"(defaults) ==")
        print(f"wall {wall:8.1f} s   CPU {cpu:8.1f} s   peak resident {human(peak)}   "
              f"exit {code}")
        print(f"engine estimate {human(engine_need)}; plan = volume {human(volume)} + "
              f"largest step {human(max(n for _, n in steps))} + interpreter "
              f"{human(interpreter)} = {human(plan)};  plan / peak {plan / peak:.2f}")
        shutil.rmtree(out, ignore_errors=True)
        if not args.keep:
            path.unlink()
    print(f"\nload average at end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
