"""The cost of the significance test beside one plain persistence run of the same data.

Run from the repository root::

    .venv/bin/python benchmarks/bench_significance.py                 # 2048^2 and 256^3
    .venv/bin/python benchmarks/bench_significance.py --with-512      # and 512^3

For each case two new child processes make the same seeded data and load the compiled
kernels on a tiny array first. The first runs one plain ``voxtopo.persistence``; the
second runs the same and then ``voxtopo.significance.assess`` (noise estimate and the
simulated null). Each reports its wall time and its peak resident size (ru_maxrss, which
includes the data). Printed per case: plain time, significance time, their ratio, the
whole analysis (plain + significance) over plain, the number of simulations and the
simulated shape, and both peaks.

Targets (issue 12, on the 2-core machine): significance of a 2048^2 image and of a 256^3
uint8 scan at most 2x the plain run, of a 512^3 scan at most 3x. Numbers are only
comparable on an otherwise idle machine: the load average is printed.
"""

from __future__ import annotations

import argparse
import multiprocessing
import os
import resource
import time

import numpy as np

from bench_engine import sintered_beads

SEED = 20261202


def beads(shape):
    """The bead image or volume of bench_engine, with this benchmark's own seed."""
    return sintered_beads(shape, seed=SEED)


CASES = {
    "2048x2048": lambda: beads((2048, 2048)),
    "256x256x256": lambda: beads((256, 256, 256)),
    "512x512x512": lambda: beads((512, 512, 512)),
}


def _child(case, with_significance, connection):
    import voxtopo
    from voxtopo.significance import assess

    values = CASES[case]()
    voxtopo.persistence(np.arange(3 ** values.ndim, dtype=values.dtype)
                        .reshape((3,) * values.ndim))     # load the compiled kernels
    start = time.perf_counter()
    diagram = voxtopo.persistence(values)
    plain = time.perf_counter() - start
    extra = {}
    if with_significance:
        start = time.perf_counter()
        tested, how = assess(diagram, values)
        extra = {"seconds": time.perf_counter() - start,
                 "simulations": how.null.simulations,
                 "simulated_shape": how.null.block_shape, "method": how.null.method,
                 "noise": how.noise.sigma, "correlation": how.noise.correlation_voxels,
                 "significant": int(tested.pairs["significant"].sum()),
                 "pairs": len(tested)}
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    connection.send((plain, peak, extra))
    connection.close()


def run_in_child(case, with_significance):
    context = multiprocessing.get_context("spawn")
    receiver, sender = context.Pipe(duplex=False)
    child = context.Process(target=_child, args=(case, with_significance, sender))
    child.start()
    sender.close()
    result = receiver.recv()
    child.join()
    return result


def main(argv=None):
    from voxtopo.memory import human

    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--with-512", action="store_true", help="also run the 512^3 case")
    args = parser.parse_args(argv)
    cases = ["2048x2048", "256x256x256"] + (["512x512x512"] if args.with_512 else [])
    print(f"load average at start: {os.getloadavg()}  (2 cores; other work may be running)")
    for case in cases:
        plain, plain_peak, _ = run_in_child(case, False)
        again, peak, extra = run_in_child(case, True)
        seconds = extra["seconds"]
        print(f"\n== {case} uint8 beads ==")
        print(f"plain persistence:  {plain:8.2f} s  peak {human(plain_peak)}")
        print(f"significance:       {seconds:8.2f} s  peak {human(peak)} (with the plain run "
              f"of {again:.2f} s before it)")
        print(f"ratio significance / plain: {seconds / plain:.2f}x;  whole analysis / plain: "
              f"{(plain + seconds) / plain:.2f}x")
        print(f"simulations: {extra['simulations']} ({extra['method']}, shape "
              f"{'x'.join(map(str, extra['simulated_shape']))}); noise {extra['noise']:.3g} "
              f"gray values, correlation {extra['correlation']:.3g} voxels; "
              f"{extra['significant']} significant of {extra['pairs']} pairs")
    print(f"\nload average at end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
