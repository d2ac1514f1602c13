"""Stage by stage time and peak memory of the patch-space workflow at benchmark size.

    .venv/bin/python benchmarks/bench_patches.py                 # 200 000 positions
    .venv/bin/python benchmarks/bench_patches.py --positions 50000 --k-neighbour 30

The case: 200 000 patch positions drawn at random (seeded) from scikit-image's bundled
photographs gravel, coffee, brick and grass (no download), 3x3 log-intensity patches, the
top 20 percent by contrast (40 000 points on the 7-sphere), a dense core of 10 000 points
(density_percent = 25, distance to the 100th neighbour), 500 max-min landmarks, Rips
persistence in dimensions 0-2 over Z/2 with the default max_edge. Target: under 60 s in
total on a 2-core machine.

Printed per stage: seconds, the peak of numpy/Python allocations during the stage
(tracemalloc; gudhi's C++ memory is not seen there) and the process's peak resident
memory so far (which does include gudhi). Side by side, where another library does the
same step: the k-th neighbour distances against scikit-learn's NearestNeighbors and the
max-min landmarks against gudhi.subsampling.choose_n_farthest_points, with time ratios
and a check that the answers agree.
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc

import numpy as np

PHOTOGRAPHS = ("gravel", "coffee", "brick", "grass")


def _gray_photographs():
    from skimage import color, data

    out = []
    for name in PHOTOGRAPHS:
        image = getattr(data, name)()
        out.append(color.rgb2gray(image[..., :3]) * 255 if image.ndim == 3 else image)
    return out


class Stage:
    """Times one stage and records its peak traced allocation and the process peak RSS."""

    rows: list = []

    def __init__(self, name: str):
        self.name = name

    def __enter__(self):
        tracemalloc.reset_peak()
        self.started = time.perf_counter()
        return self

    def __exit__(self, *exc):
        seconds = time.perf_counter() - self.started
        traced = tracemalloc.get_traced_memory()[1]
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
        Stage.rows.append((self.name, seconds, traced, rss))
        print(f"{self.name:<34} {seconds:8.2f} s   stage peak {traced / 1e6:8.1f} MB   "
              f"process peak {rss / 1e6:8.1f} MB", flush=True)
        return False


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--positions", type=int, default=200_000)
    parser.add_argument("--core-size", type=int, default=10_000)
    parser.add_argument("--k-neighbour", type=int, default=100)
    parser.add_argument("--landmarks", type=int, default=500)
    parser.add_argument("--no-compare", action="store_true",
                        help="skip the side-by-side runs of scikit-learn and gudhi")
    args = parser.parse_args()

    from voxtopo.patches import core, persistence, sample
    from voxtopo.patches._density import kth_neighbour_distance
    from voxtopo.patches._landmarks import maxmin

    images = _gray_photographs()
    tracemalloc.start()
    with Stage(f"sample {args.positions} positions"):
        cloud = sample(images, k=3, positions=args.positions, seed=0, log=True)
    density_percent = 100.0 * args.core_size / len(cloud)
    with Stage(f"core of {len(cloud)} (k={args.k_neighbour})"):
        dense = core(cloud, k_neighbour=args.k_neighbour, density_percent=density_percent)
    with Stage(f"{args.landmarks} landmarks + Rips H0-H2 Z/2"):
        result = persistence(dense, landmarks=args.landmarks, max_dimension=2, field=2)
    tracemalloc.stop()
    total = sum(row[1] for row in Stage.rows)
    margin = result.margin()
    print(f"{'total':<34} {total:8.2f} s   (target < 60 s)")
    print(f"cloud {len(cloud)} -> core {len(dense)} -> landmarks {len(result.landmarks)}; "
          f"max_edge {result.max_edge:.3f} ({result.max_edge_rule}); "
          f"{result.simplices} simplices; Betti at {result.middle_scale:.3f}: "
          f"{result.betti[2]}; longest loop {margin['longest']:.3f}, "
          f"{margin['ratio']:.2f} times the second")

    if args.no_compare:
        return
    from gudhi.subsampling import choose_n_farthest_points
    from sklearn.neighbors import NearestNeighbors

    points = cloud.coordinates
    started = time.perf_counter()
    ours = kth_neighbour_distance(points, args.k_neighbour)
    ours_s = time.perf_counter() - started
    started = time.perf_counter()
    theirs = NearestNeighbors(n_neighbors=args.k_neighbour + 1, n_jobs=-1).fit(points) \
        .kneighbors(points)[0][:, args.k_neighbour]
    theirs_s = time.perf_counter() - started
    print(f"k-th neighbour distance: voxtopo {ours_s:.2f} s, scikit-learn {theirs_s:.2f} s, "
          f"ratio {ours_s / theirs_s:.2f}; largest difference "
          f"{np.abs(ours - theirs).max():.1e}")
    first = int(result.landmarks[0])
    started = time.perf_counter()
    mine, _ = maxmin(dense.coordinates, args.landmarks, seed=0)
    ours_s = time.perf_counter() - started
    started = time.perf_counter()
    reference = choose_n_farthest_points(points=dense.coordinates, nb_points=args.landmarks,
                                         starting_point=first)
    theirs_s = time.perf_counter() - started
    chosen = {tuple(np.round(p, 12)) for p in dense.coordinates[mine]}
    other = {tuple(np.round(p, 12)) for p in np.asarray(reference)}
    print(f"max-min landmarks: voxtopo {ours_s:.2f} s, gudhi {theirs_s:.2f} s, ratio "
          f"{ours_s / theirs_s:.2f}; same landmarks: {len(chosen & other)} of "
          f"{args.landmarks}")


if __name__ == "__main__":
    main()
