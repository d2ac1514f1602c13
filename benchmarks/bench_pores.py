"""Wall time, CPU time and peak memory of `voxtopo pores` against `porosity.estimate`.

Run from the repository root (512^3 and larger under the shared lock)::

    .venv/bin/python benchmarks/bench_pores.py                       # 256^3, mask and gray
    flock /work/wt/heavy.lock .venv/bin/python benchmarks/bench_pores.py --sizes 512
    flock /work/wt/heavy.lock .venv/bin/python benchmarks/bench_pores.py --sizes 1024 --kinds mask
    flock /work/wt/heavy.lock .venv/bin/python benchmarks/bench_pores.py --sizes 1024 --kinds gray

Data: a seeded Boolean model of overlapping spheres (radii 7 to 11 voxels, about 55 %
solid, like partly sintered beads), written chunk by chunk (32 planes at a time) into a
temporary .npy file, so nothing of the size of the volume is ever in this process's memory
and nothing large is kept. Two kinds per size:

* ``mask``: uint8, 1 = pore (the space between the spheres);
* ``gray``: uint16, pores near 12000 and solid near 30000 with Gaussian noise (sigma 2000),
  run with ``--threshold otsu``. The CLI maps the .npy file and gives the scan's memory
  back once the pores are segmented, so the estimate is ``estimate(..., mapped=True)``.

Each run is `voxtopo pores` in a new child process (the CLI, as a user runs it); its wall
time, CPU time (user + system) and peak resident memory (the child's own ``ru_maxrss``
from ``os.wait4``) are printed beside ``voxtopo.porosity.estimate`` for the same shape and
type, the ratio estimate / peak, and the seconds of each stage from the run's summary.json.
The first child only compiles the numba kernels (not timed). The load average is printed:
figures are only comparable on an otherwise idle machine. The integral geometry runs on a
second thread beside the features and percolation stages, so its seconds overlap theirs:
the three together take about the longer of integral_geometry and features + percolation
(on two free cores).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from numba import njit

SEED = 20261203
#: planes generated and written at a time
CHUNK_PLANES = 32
RADII = (7.0, 11.0)
SOLID_FRACTION = 0.55
PORE_GRAY, SOLID_GRAY, GRAY_NOISE = 12000.0, 30000.0, 2000.0


def spheres(size: int, seed: int = SEED) -> tuple[np.ndarray, np.ndarray]:
    """(centres sorted by z, radii) of a Boolean model covering about SOLID_FRACTION of a
    cube of edge ``size``: for a Poisson number of spheres with mean volume v per unit
    volume lambda, the covered fraction is 1 - exp(-lambda v)."""
    rng = np.random.default_rng(seed)
    low, high = RADII
    mean_volume = 4 / 3 * np.pi * (high ** 4 - low ** 4) / (4 * (high - low))
    reach = size + 2 * high  # centres up to a radius outside, so the faces are not thinner
    count = rng.poisson(-np.log(1 - SOLID_FRACTION) * reach ** 3 / mean_volume)
    centres = rng.uniform(-high, size + high, size=(count, 3))
    radii = rng.uniform(low, high, size=count)
    by_z = np.argsort(centres[:, 0], kind="stable")
    return centres[by_z], radii[by_z]


@njit(cache=True)
def _paint(solid, z0, centres, radii):
    """Mark the voxels of ``solid`` (planes z0 ...) inside any of the spheres."""
    nz, ny, nx = solid.shape
    for s in range(centres.shape[0]):
        cz, cy, cx, r = centres[s, 0], centres[s, 1], centres[s, 2], radii[s]
        for z in range(max(int(np.ceil(cz - r)), z0), min(int(np.floor(cz + r)), z0 + nz - 1) + 1):
            for y in range(max(int(np.ceil(cy - r)), 0), min(int(np.floor(cy + r)), ny - 1) + 1):
                dz, dy = z - cz, y - cy
                left = r * r - dz * dz - dy * dy
                if left < 0:
                    continue
                half = np.sqrt(left)
                for x in range(max(int(np.ceil(cx - half)), 0),
                               min(int(np.floor(cx + half)), nx - 1) + 1):
                    solid[z - z0, y, x] = True


def write_volume(path: Path, size: int, kind: str) -> float:
    """Write the ``kind`` volume of edge ``size`` to ``path`` chunk by chunk; its porosity."""
    centres, radii = spheres(size)
    dtype = np.uint8 if kind == "mask" else np.uint16
    out = np.lib.format.open_memmap(path, mode="w+", dtype=dtype, shape=(size,) * 3)
    pores = 0
    for z0 in range(0, size, CHUNK_PLANES):
        planes = min(CHUNK_PLANES, size - z0)
        near = slice(np.searchsorted(centres[:, 0], z0 - RADII[1]),
                     np.searchsorted(centres[:, 0], z0 + planes + RADII[1]))
        solid = np.zeros((planes, size, size), dtype=bool)
        _paint(solid, z0, centres[near], radii[near])
        pores += int(solid.size - np.count_nonzero(solid))
        if kind == "mask":
            out[z0:z0 + planes] = ~solid
        else:
            rng = np.random.default_rng((SEED, z0))
            gray = np.where(solid, np.float32(SOLID_GRAY), np.float32(PORE_GRAY))
            gray += rng.normal(0, GRAY_NOISE, gray.shape).astype(np.float32)
            out[z0:z0 + planes] = np.clip(gray, 0, 65535).astype(np.uint16)
    out.flush()
    del out
    return pores / size ** 3


def run_child(arguments: list[str]) -> dict:
    """Run a child to the end: wall seconds, CPU seconds, peak resident bytes, exit code."""
    start = time.perf_counter()
    child = subprocess.Popen(arguments, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                             text=True)
    output = child.stdout.read()
    _, status, usage = os.wait4(child.pid, 0)
    child.returncode = os.waitstatus_to_exitcode(status)
    return {"wall": time.perf_counter() - start, "cpu": usage.ru_utime + usage.ru_stime,
            "peak": usage.ru_maxrss * 1024, "code": child.returncode, "output": output}


def pores_command(path: Path, out: Path, kind: str) -> list[str]:
    command = [sys.executable, "-m", "voxtopo.cli", "pores", str(path), "--out", str(out),
               "--spacing", "2.5,2.5,2.5", "--unit", "um"]
    return command + (["--threshold", "otsu"] if kind == "gray" else [])


def main(argv=None) -> int:
    from voxtopo.engine import estimate as persistence_estimate
    from voxtopo.memory import human
    from voxtopo.porosity import estimate

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[256],
                        help="edges of the cubes in voxels")
    parser.add_argument("--kinds", nargs="+", choices=["mask", "gray"],
                        default=["mask", "gray"])
    parser.add_argument("--scratch", default=None,
                        help="folder for the temporary volumes (default: the system's)")
    args = parser.parse_args(argv)
    warm = run_child([sys.executable, "-m", "voxtopo.engine.warm_up"])
    if warm["code"] != 0:
        print(warm["output"])
        return 1
    rows = []
    for size in args.sizes:
        for kind in args.kinds:
            folder = Path(tempfile.mkdtemp(prefix="bench-pores-", dir=args.scratch))
            try:
                path = folder / f"{kind}.npy"
                start = time.perf_counter()
                porosity = write_volume(path, size, kind)
                made = time.perf_counter() - start
                dtype = np.uint8 if kind == "mask" else np.uint16
                shape = (size,) * 3
                # the CLI maps the gray .npy and gives its pages back once it is segmented
                planned = estimate(shape, dtype, mapped=kind == "gray")
                # the engine runs on the distance's uint16 level numbers, both phases
                engine_part = max(persistence_estimate(shape, np.uint16, neighbourhood=n)
                                  for n in (26, 6))
                load = os.getloadavg()[0]
                result = run_child(pores_command(path, folder / "out", kind))
                print(f"\n{size}^3 {kind} ({np.dtype(dtype).name}, porosity {porosity:.3f}, "
                      f"written in {made:.0f} s; load average before the run {load:.2f})")
                if result["code"] != 0:
                    print(f"  exit code {result['code']}: {result['output'].strip()}")
                else:
                    summary = json.loads((folder / "out" / "summary.json").read_text())
                    for stage, seconds in summary["timings_seconds"].items():
                        print(f"  {stage:<22} {seconds:9.1f} s")
                    print(f"  porosity {summary['porosity']:.4f}, "
                          f"{summary['counts']['pores']} pores")
                print(f"  estimate {human(planned)} (persistence part {human(engine_part)}), "
                      f"measured peak {human(result['peak'])}")
                rows.append((size, np.dtype(dtype).name, result, planned))
            finally:
                shutil.rmtree(folder, ignore_errors=True)
    print(f"\n{'size':>6} {'dtype':>7} {'wall s':>8} {'CPU s':>8} {'peak GB':>8} "
          f"{'estimate GB':>12} {'est/peak':>9} {'exit':>5}")
    for size, dtype, result, planned in rows:
        print(f"{size:>5}^3 {dtype:>7} {result['wall']:8.1f} {result['cpu']:8.1f} "
              f"{result['peak'] / 1e9:8.3f} {planned / 1e9:12.3f} "
              f"{planned / result['peak']:9.2f} {result['code']:>5}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
