"""Wall time and peak memory of per-pixel periodicity maps at benchmark size.

    .venv/bin/python benchmarks/bench_periodicity.py                # 256 x 256 x 200
    .venv/bin/python benchmarks/bench_periodicity.py --size 64      # a quick look

The case (our own scenario, seeded): 256 x 256 pixels x 200 frames at 0.05 s, noise around
100 with five beating discs (periods 0.4 to 2 s, one damped with an e-folding time of two
periods). Every pixel is measured: 30-point sliding-window clouds, Rips H1 over Z/2 and
Z/3, 99 pooled phase-randomised surrogates, then the whole-field rhythm, then the result
folder is written. Target: at most 300 s in total on a 2-core machine.

Printed per stage: seconds, and the process's peak resident memory (which includes
gudhi's C++ allocations). Side by side: the time per signal of the whole scoring stage
(detrending, periodogram, windows, max-min, our H1 kernel over Z/2 and Z/3) against gudhi's
RipsComplex alone on the same clouds, and the total against the 300 s target.
"""

from __future__ import annotations

import argparse
import resource
import tempfile
import time
from pathlib import Path

import numpy as np

TARGET_SECONDS = 300.0


def beating_stack(size: int, frames: int, interval: float, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    time_s = np.arange(frames) * interval
    yy, xx = np.mgrid[0:size, 0:size] / size
    stack = 100 + 5 * rng.standard_normal((frames, size, size)).astype(np.float32)
    discs = [(0.25, 0.25, 0.12, 0.4, np.inf), (0.25, 0.7, 0.1, 0.9, np.inf),
             (0.7, 0.3, 0.15, 1.3, np.inf), (0.7, 0.75, 0.1, 2.0, np.inf),
             (0.5, 0.5, 0.08, 0.7, 1.4)]
    for cy, cx, radius, period, efold in discs:
        inside = (yy - cy) ** 2 + (xx - cx) ** 2 < radius ** 2
        wave = 15 * np.exp(-time_s / efold) * np.cos(2 * np.pi * time_s / period)
        stack += wave[:, None, None].astype(np.float32) * inside
    return stack


def peak_rss() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--size", type=int, default=256)
    parser.add_argument("--frames", type=int, default=200)
    parser.add_argument("--surrogates", type=int, default=99)
    args = parser.parse_args()

    import gudhi

    from voxtopo.jobs.periodicity import PeriodicityOptions, run, write
    from voxtopo.periodicity import detrend, normalise, sliding_windows, spectral_period
    from voxtopo.scan import TimeLapse

    interval = 0.05
    stack = beating_stack(args.size, args.frames, interval)
    lapse = TimeLapse(stack, frame_interval=interval, time_unit="s", spacing=(0.5, 0.5),
                      unit="um", source="benchmark")
    print(f"case: {args.size} x {args.size} pixels x {args.frames} frames, "
          f"{args.surrogates} pooled surrogates, peak RSS after making it "
          f"{peak_rss() / 2**20:.0f} MiB")
    phases: dict[str, float] = {}
    started = time.perf_counter()
    last = {"at": started}

    def progress(phase, fraction):
        # the time since the previous report belongs to the phase reporting now
        now = time.perf_counter()
        phases[phase] = phases.get(phase, 0.0) + now - last["at"]
        last["at"] = now

    result = run(lapse, PeriodicityOptions(surrogates=args.surrogates), progress=progress)
    computed = time.perf_counter() - started
    with tempfile.TemporaryDirectory() as folder:
        mark = time.perf_counter()
        write(result, Path(folder) / "maps")
        written = time.perf_counter() - mark
    total = computed + written
    for phase, seconds in phases.items():
        print(f"  {phase:<32} {seconds:8.1f} s")
    print(f"  {'writing the folder':<32} {written:8.1f} s")
    print(f"total {total:.1f} s for {len(result.table)} signals "
          f"({1e3 * total / len(result.table):.2f} ms per signal); "
          f"{total / TARGET_SECONDS:.2f} of the {TARGET_SECONDS:.0f} s target")
    print(f"process peak RSS {peak_rss() / 2**20:.0f} MiB")
    print(result.counts["statement"])

    # the floor: gudhi alone on 1000 of the same clouds, both fields
    rows = np.random.default_rng(1).choice(len(result.table), 1000, replace=False)
    z, _ = normalise(detrend(result.signals.traces[rows]))
    clouds = sliding_windows(z, spectral_period(z, (2.0, args.frames / 2)), 30)
    mark = time.perf_counter()
    for cloud in clouds:
        tree = gudhi.RipsComplex(points=cloud).create_simplex_tree(max_dimension=2)
        for p in (2, 3):
            tree.compute_persistence(homology_coeff_field=p)
            tree.persistence_intervals_in_dimension(1)
    floor = (time.perf_counter() - mark) / len(clouds)
    ours = phases.get("sliding-window persistence", np.nan) / len(result.table)
    print(f"per signal, Z/2 and Z/3: pipeline (windows, max-min, kernel; numba threads) "
          f"{1e3 * ours:.3f} ms, gudhi's RipsComplex alone (one thread) {1e3 * floor:.3f} "
          f"ms, ratio {ours / floor:.2f}")


if __name__ == "__main__":
    main()
