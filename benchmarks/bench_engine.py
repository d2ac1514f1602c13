"""voxtopo's own persistence engine against gudhi, side by side on the same data.

Run from the repository root::

    .venv/bin/python benchmarks/bench_engine.py            # all four cases
    .venv/bin/python benchmarks/bench_engine.py --cases 2048x2048 128x128x128

Each engine runs in a new child process, which makes the case's data with a fixed seed
(the same array in every child), loads the compiled kernels on a tiny array, and reports
its wall and CPU time, its peak memory above the data (the child's peak resident set
size, counted afresh before the run, minus its resident size then) and its pairs. The parent
prints, per case, both times, the ratio, both peaks, voxtopo's memory estimate beside its
measured peak, and whether the two diagrams are the same multiset of (dim, birth, death).
gudhi is skipped, saying so, where its own estimate would not fit in the memory available.

Cases (targets on a 2-core machine): 2048^2 float32 smooth noise (>= 30x faster than
gudhi), 128^3 float32 smooth noise (>= 20x), 256^3 uint8 micro-CT-like sintered beads,
512^3 uint8 sintered beads (all dimensions in under 5 minutes, peak under 12 GB).
Numbers are only comparable on an otherwise idle machine: the load average is printed.
"""

from __future__ import annotations

import argparse
import multiprocessing
import os
import time

import numpy as np
from scipy import ndimage

from voxtopo.engine import BACKENDS, estimate
from voxtopo.memory import BUDGET_FRACTION, available_bytes, human

SEED = 20261201


def smooth_noise(shape, sigma):
    """Gaussian-smoothed white noise, float32."""
    rng = np.random.default_rng(SEED)
    noise = rng.standard_normal(shape, dtype=np.float32)
    return ndimage.gaussian_filter(noise, sigma).astype(np.float32)


def sintered_beads(shape, radius=(7.0, 11.0), solid_fraction=0.55, seed=SEED):
    """A uint8 micro-CT-like image or volume: overlapping bright beads (partly sintered
    beads of a filter disc) in a dark matrix, with noise (sigma 25 gray levels) blurred over
    about a voxel as in a reconstruction. bench_significance draws its data here too."""
    rng = np.random.default_rng(seed)
    ndim = len(shape)
    solid = np.zeros(shape, dtype=bool)
    mean_size = (np.pi * np.mean(radius) ** 2 if ndim == 2
                 else 4 / 3 * np.pi * np.mean(radius) ** 3)
    for _ in range(int(solid_fraction * np.prod(shape) / mean_size)):
        r = rng.uniform(*radius)
        centre = rng.uniform(0, shape[0], ndim)
        low = np.maximum(np.floor(centre - r).astype(int), 0)
        high = np.minimum(np.ceil(centre + r).astype(int) + 1, shape[0])
        grid = np.ogrid[tuple(slice(a, b) for a, b in zip(low, high))]
        inside = sum((g - c) ** 2 for g, c in zip(grid, centre)) <= r * r
        solid[tuple(slice(a, b) for a, b in zip(low, high))] |= inside
    image = np.where(solid, np.float32(170), np.float32(60))
    del solid
    image += rng.normal(0, 25, image.shape).astype(np.float32)
    image = ndimage.gaussian_filter(image, 1.0, output=np.float32)
    return np.clip(image, 0, 255).astype(np.uint8)


CASES = {
    "2048x2048": ("float32 smooth noise", lambda: smooth_noise((2048, 2048), 4.0)),
    "128x128x128": ("float32 smooth noise", lambda: smooth_noise((128, 128, 128), 2.0)),
    "256x256x256": ("uint8 sintered beads", lambda: sintered_beads((256,) * 3)),
    "512x512x512": ("uint8 sintered beads", lambda: sintered_beads((512,) * 3)),
}


def _status_bytes(field: str) -> int:
    """VmRSS (resident now) or VmHWM (peak resident) of this process, in bytes."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(field + ":"):
                return int(line.split()[1]) * 1024
    raise RuntimeError(f"/proc/self/status has no {field}")


def _reset_peak() -> None:
    """Start the peak resident size afresh (Linux: 5 > clear_refs), so the child's peak
    is its own and not its parent's high-water mark copied at fork."""
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")


def _warm_up(name, construction, superlevel):
    """Load numba's compiled kernels (or compile them) on tiny arrays, outside the timing."""
    if name != "voxtopo":
        return
    for dtype in (np.float32, np.uint8):
        BACKENDS[name][0](np.arange(27, dtype=dtype).reshape(3, 3, 3), superlevel=superlevel,
                          construction=construction)


def _run_engine(name, case, construction, superlevel, connection):
    """Child process: make the case's data (seeded: the same in every child), warm up, run
    one engine, and send back times, peak memory and the pairs."""
    values = CASES[case][1]()
    _warm_up(name, construction, superlevel)
    _reset_peak()
    start_resident = _status_bytes("VmRSS")
    compute = BACKENDS[name][0]
    wall, cpu = time.perf_counter(), time.process_time()
    raw = compute(values, superlevel=superlevel, construction=construction, periodic=None,
                  field=2, progress=None)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    peak = _status_bytes("VmHWM") - start_resident
    connection.send((wall, cpu, peak, raw.dim, raw.birth, raw.death))
    connection.close()


def run_in_child(name, case, construction, superlevel):
    # a new process, not a fork: a forked child would write into its parent's freed heap
    # pages and pay a copy for each (measured: 0.2-0.3 s more on 128^3 for voxtopo)
    context = multiprocessing.get_context("spawn")
    receiver, sender = context.Pipe(duplex=False)
    child = context.Process(target=_run_engine,
                            args=(name, case, construction, superlevel, sender))
    child.start()
    sender.close()
    result = receiver.recv()
    child.join()
    return result


def same_diagram(a, b) -> bool:
    """Same multiset of (dim, birth, death)."""
    def canonical(dim, birth, death):
        order = np.lexsort((death, birth, dim))
        return dim[order], birth[order], death[order]
    return all(np.array_equal(x, y) for x, y in zip(canonical(*a), canonical(*b)))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--cases", nargs="+", choices=sorted(CASES), default=list(CASES))
    parser.add_argument("--construction", choices=["voxel", "vertex"], default="voxel")
    parser.add_argument("--superlevel", action="store_true")
    parser.add_argument("--no-gudhi", action="store_true", help="time the own engine only")
    args = parser.parse_args(argv)

    print(f"load average at start: {os.getloadavg()}  (2 cores; other work may be running)")
    _warm_up("voxtopo", args.construction, args.superlevel)  # compile once, into the cache
    for case in args.cases:
        what, make = CASES[case]
        values = make()
        print(f"\n== {case} {what} ({values.dtype}, {args.construction} construction, "
              f"{'superlevel' if args.superlevel else 'sublevel'}) ==")
        ours = run_in_child("voxtopo", case, args.construction, args.superlevel)
        planned = estimate(values.shape, values.dtype, engine="voxtopo")
        counts = np.bincount(ours[3], minlength=values.ndim).tolist()
        print(f"voxtopo: {ours[0]:8.2f} s wall {ours[1]:8.2f} s CPU  peak {human(ours[2])} "
              f"(estimate {human(planned)}, measured/estimate {ours[2] / planned:.2f})  "
              f"pairs per dim {counts}")
        gudhi_need = estimate(values.shape, values.dtype, engine="gudhi")
        budget = int(available_bytes() * BUDGET_FRACTION)
        if args.no_gudhi:
            print("gudhi: not run (--no-gudhi)")
        elif gudhi_need > budget:
            print(f"gudhi: skipped, its estimate {human(gudhi_need)} would not fit in the "
                  f"{human(budget)} available")
        else:
            theirs = run_in_child("gudhi", case, args.construction, args.superlevel)
            print(f"gudhi:   {theirs[0]:8.2f} s wall {theirs[1]:8.2f} s CPU  peak "
                  f"{human(theirs[2])}")
            print(f"ratio gudhi/voxtopo: {theirs[0] / ours[0]:.1f}x wall, "
                  f"{theirs[1] / ours[1]:.1f}x CPU;  identical diagrams: "
                  f"{same_diagram(ours[3:], theirs[3:])}")
        del values
    print(f"\nload average at end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
