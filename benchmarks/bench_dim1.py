"""Dimension 1 of 3D volumes: voxtopo's implicit reduction next to gudhi's CubicalComplex.

Each case runs in a fresh child process (so the peak resident memory reported is that
run's own) on the same seeded data: voxtopo's ``pairs_dim1`` (dimension 1 only, after a
warm-up that loads numba's compiled kernels), and gudhi's full cubical persistence (gudhi
has no dimension-1-only mode, so its time covers all dimensions). When both ran, the
dimension-1 multisets are compared. gudhi is skipped, and said so, where its measured
need (about 420 bytes per voxel) would not fit in the memory available.

    .venv/bin/python benchmarks/bench_dim1.py                 # 64^3, 128^3 float, 256^3 uint8
    .venv/bin/python benchmarks/bench_dim1.py --cases 64 --construction vertex

The machine may be shared: the script prints the load average next to the figures.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

import numpy as np

#: name -> (side, dtype, kind of data)
CASES = {
    "64": (64, "float32", "smooth"),
    "128": (128, "float32", "smooth"),
    "256": (256, "uint8", "beads"),
    "512": (512, "uint8", "beads"),
}

GUDHI_BYTES_PER_VOXEL = 420


def make_volume(side: int, dtype: str, kind: str) -> np.ndarray:
    """Seeded test data: a smooth random field, or a micro-CT-like bed of beads."""
    from scipy import ndimage

    rng = np.random.default_rng(side)
    if kind == "smooth":
        field = ndimage.gaussian_filter(rng.normal(size=(side,) * 3).astype(np.float32), 2.0,
                                        mode="wrap")
        return field.astype(dtype)
    # partly sintered beads: balls around random centres, bright solid and dark pores,
    # scanner-like blur and noise, stored as 8-bit gray values
    seeds = np.ones((side,) * 3, dtype=bool)
    count = max(1, side ** 3 // 2000)
    seeds[tuple(rng.integers(0, side, size=(3, count)))] = False
    distance = ndimage.distance_transform_edt(seeds).astype(np.float32)
    gray = np.where(distance < 7.5, 190.0, 70.0).astype(np.float32)
    gray = ndimage.gaussian_filter(gray, 1.0)
    gray += rng.normal(0.0, 12.0, size=gray.shape).astype(np.float32)
    return np.clip(gray, 0, 255).astype(np.uint8)


def peak_bytes() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def run_child(case: str, engine: str, construction: str) -> dict:
    side, dtype, kind = CASES[case]
    values = make_volume(side, dtype, kind)
    base = peak_bytes()
    if engine == "voxtopo":
        from voxtopo.engine._reduction import reduce_dim1

        reduce_dim1(values[:8, :8, :8], construction)
        start = time.perf_counter()
        birth, death, _, _, counts = reduce_dim1(values, construction)
        seconds = time.perf_counter() - start
    else:
        import gudhi

        key = "top_dimensional_cells" if construction == "voxel" else "vertices"
        start = time.perf_counter()
        complex_ = gudhi.CubicalComplex(**{key: values})
        complex_.compute_persistence(homology_coeff_field=2, min_persistence=0)
        seconds = time.perf_counter() - start
        intervals = np.asarray(complex_.persistence_intervals_in_dimension(1)).reshape(-1, 2)
        intervals = intervals[intervals[:, 1] > intervals[:, 0]]
        birth, death, counts = intervals[:, 0], intervals[:, 1], {}
    pairs = sorted(zip(birth.tolist(), death.tolist()))
    return {"seconds": seconds, "peak": peak_bytes(), "before": base, "pairs": len(pairs),
            "digest": hash(tuple(pairs)), "counts": counts}


def spawn(case: str, engine: str, construction: str) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", case, engine, construction],
                         capture_output=True, text=True, check=False)
    if out.returncode != 0:
        return {"error": out.stderr.strip().splitlines()[-1] if out.stderr else "failed"}
    return json.loads(out.stdout.strip().splitlines()[-1])


def available_bytes() -> int:
    with open("/proc/meminfo") as fh:
        for line in fh:
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024
    return 0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", nargs="+", default=["64", "128", "256"],
                        choices=sorted(CASES))
    parser.add_argument("--construction", nargs="+", default=["voxel", "vertex"],
                        choices=["voxel", "vertex"])
    parser.add_argument("--gudhi-max-side", type=int, default=128,
                        help="skip gudhi above this side length (it takes minutes at 256^3)")
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(run_child(*args.child)))
        return

    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores "
          f"(shared machine: other jobs may be running)")
    print(f"{'case':>14} {'constr.':>7} {'voxtopo s':>9} {'gudhi s':>8} {'ratio':>6} "
          f"{'voxtopo peak':>12} {'gudhi peak':>10}  same  reduced/at once")
    for case in args.cases:
        side, dtype, _ = CASES[case]
        for construction in args.construction:
            ours = spawn(case, "voxtopo", construction)
            gudhi_need = GUDHI_BYTES_PER_VOXEL * side ** 3
            if gudhi_need > 0.8 * available_bytes():
                theirs = {"error": f"skipped: needs about {gudhi_need / 1e9:.1f} GB"}
            elif side > args.gudhi_max_side:
                theirs = {"error": f"skipped above side {args.gudhi_max_side}"}
            else:
                theirs = spawn(case, "gudhi", construction)
            label = f"{side}^3 {dtype}"
            if "error" in ours:
                print(f"{label:>14} {construction:>7} voxtopo failed: {ours['error']}")
                continue
            counts = ours["counts"]
            tail = f"{counts['reduced']}/{counts['paired_at_once']}"
            if "error" in theirs:
                print(f"{label:>14} {construction:>7} {ours['seconds']:9.2f} {'-':>8} "
                      f"{'-':>6} {ours['peak'] / 1e9:10.2f}GB {'-':>10}  -     {tail}"
                      f"   (gudhi {theirs['error']})")
                continue
            same = ours["digest"] == theirs["digest"] and ours["pairs"] == theirs["pairs"]
            print(f"{label:>14} {construction:>7} {ours['seconds']:9.2f} "
                  f"{theirs['seconds']:8.2f} {theirs['seconds'] / ours['seconds']:6.1f} "
                  f"{ours['peak'] / 1e9:10.2f}GB {theirs['peak'] / 1e9:8.2f}GB  "
                  f"{'yes' if same else 'NO '}   {tail}")
    print("voxtopo time: dimension 1 only, warm numba cache; gudhi time: its whole diagram "
          "(it has no dimension-1-only mode). Peak: resident memory of the child process, "
          "test data included.")


if __name__ == "__main__":
    main()
