"""Peak memory of one Wasserstein call, against the estimate voxtopo refuses by.

For each size, a fresh Python process computes gudhi's Wasserstein distance (through POT)
between two random diagrams of n and m finite pairs and reports the rise of its peak
resident memory. The script prints the bytes per cell of the (n + 1) x (m + 1) cost matrix
and the ratio of the estimate (voxtopo.compare.wasserstein_bytes) to the measured peak,
which should stay above 1: the estimate refuses before a call could run out of memory.

    .venv/bin/python benchmarks/bench_wasserstein_memory.py
    .venv/bin/python benchmarks/bench_wasserstein_memory.py --sizes 500x500 4000x4000

The machine may be shared: the script prints the load average so that a reader can judge.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys

MEASURE = """
import resource, sys
import numpy as np
from gudhi.wasserstein import wasserstein_distance
n, m = int(sys.argv[1]), int(sys.argv[2])
rng = np.random.default_rng(0)
def diagram(k):
    births = rng.random(k)
    return np.column_stack([births, births + rng.random(k)])
first, second = diagram(n), diagram(m)
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
wasserstein_distance(first, second, order=1.0, internal_p=np.inf, keep_essential_parts=False)
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print((after - before) * 1024)
"""


def main() -> None:
    from voxtopo.compare import wasserstein_bytes

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", nargs="+",
                        default=["500x500", "1000x1000", "2000x1000", "6000x100", "3000x2500",
                                 "4000x4000"], help="n x m finite pairs of each call")
    args = parser.parse_args()
    print(f"load average before: {os.getloadavg()}")
    print(f"{'pairs':>12} {'cells':>12} {'peak rise':>12} {'bytes/cell':>10} "
          f"{'estimate/peak':>13}")
    for size in args.sizes:
        n, m = (int(v) for v in size.split("x"))
        peak = int(subprocess.run([sys.executable, "-c", MEASURE, str(n), str(m)],
                                  capture_output=True, text=True, check=True).stdout)
        cells = (n + 1) * (m + 1)
        print(f"{size:>12} {cells:>12,} {peak / 1e6:>10.1f} MB {peak / cells:>10.1f} "
              f"{wasserstein_bytes(n, m) / peak:>13.2f}")
    print(f"load average after: {os.getloadavg()}")


if __name__ == "__main__":
    main()
