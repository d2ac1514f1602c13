"""The `voxtopo` command: a thin shell over the library.

Each subcommand is added by an ``_add_<name>(subparsers)`` function that sets its handler
with ``set_defaults(handler=...)``; the handlers only translate options into library calls.
Bad input ends with one sentence on stderr and exit code 2 (a traceback only with --debug).
"""

from __future__ import annotations

import argparse
import sys
import time

from . import __version__
from .errors import Cancelled, VoxtopoError

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


class ProgressBar:
    """Progress on stderr: a redrawn bar on a terminal, one line per phase otherwise."""

    def __init__(self, stream=None, width: int = 28):
        self.stream = stream or sys.stderr
        self.width = width
        self.phase = None
        self.started = time.perf_counter()
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self._last_draw = 0.0

    def __call__(self, phase: str, fraction: float) -> None:
        fraction = min(max(float(fraction), 0.0), 1.0)
        now = time.perf_counter()
        if phase != self.phase:
            if self.tty and self.phase is not None:
                self.stream.write("\n")
            self.phase = phase
            self.started = now
            if not self.tty:
                self.stream.write(f"voxtopo: {phase} ...\n")
                self.stream.flush()
        if self.tty and (now - self._last_draw > 0.1 or fraction >= 1.0):
            filled = int(round(self.width * fraction))
            bar = "#" * filled + "." * (self.width - filled)
            self.stream.write(f"\r{phase:<28} [{bar}] {fraction:4.0%} "
                              f"{now - self.started:6.1f} s")
            self.stream.flush()
            self._last_draw = now

    def close(self) -> None:
        if self.tty and self.phase is not None:
            self.stream.write("\n")
            self.stream.flush()


def _spacing(text: str):
    try:
        values = tuple(float(v) for v in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"spacing should be one number or one per axis like 2.5,1.2,1.2; got {text!r}")
    return values


def _shape(text: str):
    try:
        return tuple(int(v) for v in text.lower().replace("x", ",").split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"shape should look like 64,128,128; got {text!r}")


def add_load_options(parser: argparse.ArgumentParser) -> None:
    """Options every subcommand that reads a scan shares."""
    group = parser.add_argument_group("reading the scan")
    group.add_argument("--spacing", type=_spacing, metavar="Z,Y,X",
                       help="voxel size (one value, or one per axis in z,y,x order); "
                            "wins over the file's metadata")
    group.add_argument("--unit", help="unit of the spacing, e.g. um, nm, mm")
    group.add_argument("--channel", type=int, help="channel to take from a multichannel file")
    group.add_argument("--timepoint", type=int, help="time point to take from a time series")
    group.add_argument("--raw-shape", type=_shape, metavar="Z,Y,X",
                       help="shape of a raw binary file")
    group.add_argument("--raw-dtype", help="data type of a raw file, e.g. uint8, uint16, float32")
    group.add_argument("--byte-order", choices=["little", "big"], default="little",
                       help="byte order of a raw file (default little)")
    group.add_argument("--raw-offset", type=int, default=0,
                       help="bytes to skip at the start of a raw file")
    group.add_argument("--level", type=int, default=0,
                       help="resolution level of an OME-Zarr image (0 = full resolution)")


def load_options_from(args) -> dict:
    """The keyword arguments of voxtopo.load from parsed options."""
    options = {"spacing": args.spacing, "unit": args.unit, "channel": args.channel,
               "timepoint": args.timepoint, "shape": args.raw_shape, "dtype": args.raw_dtype,
               "byte_order": args.byte_order, "offset": args.raw_offset, "level": args.level}
    defaults = {"byte_order": "little", "offset": 0, "level": 0}
    return {k: v for k, v in options.items() if v is not None and defaults.get(k, None) != v}


def _add_analyse(subparsers) -> None:
    p = subparsers.add_parser(
        "analyse", aliases=["analyze"],
        help="persistence diagram of one scan, written to a result folder",
        description="Compute the cubical persistence diagram of a 2D image or 3D volume "
                    "and write pairs.csv, summary.json and plots into a new folder.")
    p.add_argument("scan", help="TIFF/OME-TIFF file, folder or glob of slices, .npy, raw, "
                                "or OME-Zarr")
    p.add_argument("--out", required=True, help="result folder to create")
    p.add_argument("--force", action="store_true", help="replace the result folder if it exists")
    f = p.add_argument_group("filtration")
    f.add_argument("--superlevel", action="store_true",
                   help="sweep from bright to dark (bright features first)")
    f.add_argument("--neighbourhood", "--neighborhood", type=int, choices=[4, 8, 6, 26],
                   help="connectivity of the swept set: 4/8 in 2D, 6/26 in 3D "
                        "(default 8/26, the voxel construction)")
    f.add_argument("--smooth", type=float, metavar="SIGMA",
                   help="Gaussian smoothing, sigma in the scan's unit")
    f.add_argument("--crop", metavar="Z0:Z1,Y0:Y1,X0:X1", help="analyse only this box")
    f.add_argument("--downsample", type=int, default=1, metavar="N",
                   help="block-mean downsampling by N along every axis")
    f.add_argument("--distance", action="store_true",
                   help="analyse the signed distance transform of a mask (pores negative)")
    f.add_argument("--threshold", help="with --distance on a gray scan: a value or 'otsu'")
    f.add_argument("--pores-bright", action="store_true",
                   help="with --threshold: pores are the voxels above it")
    f.add_argument("--fill-invalid", metavar="max|min|VALUE",
                   help="put this value into NaN voxels instead of refusing the scan")
    e = p.add_argument_group("persistence")
    e.add_argument("--min-persistence", type=_min_persistence, default="auto",
                   metavar="auto|VALUE",
                   help="auto (default): keep the significant pairs (with --distance the "
                        "robust ones); a number: keep every pair that lives longer than it, "
                        "with p_value and significant filled in (0 = every pair)")
    e.add_argument("--periodic", action="store_true", help="glue opposite faces of the scan")
    e.add_argument("--field", type=int, default=2, help="prime p of the coefficients Z/p")
    e.add_argument("--engine", choices=["auto", "voxtopo", "gudhi"], default="auto",
                   help="persistence engine (auto: our own where it applies)")
    t = p.add_argument_group("which features are real")
    t.add_argument("--significance", type=float, metavar="ALPHA",
                   help="family-wise level of the significance test of gray-value sweeps "
                        "(default 0.05)")
    t.add_argument("--noise", type=float, metavar="SIGMA",
                   help="noise level (standard deviation) in the scan's gray units "
                        "(default: estimated from the scan)")
    t.add_argument("--noise-model", choices=["gaussian", "poisson"], default="gaussian",
                   help="gaussian (default), or poisson for photon counts (Anscombe "
                        "transform before the sweep)")
    t.add_argument("--boundary-tolerance", type=float, metavar="LENGTH",
                   help="with --distance: how far the mask's boundary may be off, in the "
                        "scan's unit (default one voxel)")
    o = p.add_argument_group("volumes larger than memory")
    o.add_argument("--out-of-core", action="store_true",
                   help="read a zarr / OME-Zarr store chunk by chunk and compute dimension 0 "
                        "and d-1 exactly (dimension 1 of a volume is not computed)")
    o.add_argument("--chunks", type=_shape, metavar="Z,Y,X",
                   help="with --out-of-core: block shape of the tasks (default the store's)")
    add_load_options(p)
    p.set_defaults(handler=_run_analyse)


def _min_persistence(text: str):
    """--min-persistence: "auto" or a number of at least 0."""
    if text == "auto":
        return text
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"should be 'auto' or a number, got {text!r}")
    if not value >= 0:
        raise argparse.ArgumentTypeError(f"should be 'auto' or a number of at least 0, "
                                         f"got {text!r}")
    return value


def _run_analyse(args) -> int:
    from .io import load
    from .io.results import check_target
    from .pipeline import AnalysisOptions, check_options, run, write_result
    threshold = _threshold_value(args.threshold)
    if args.distance and args.significance is not None:
        raise VoxtopoError("--significance tests gray-value sweeps and would be ignored with "
                           "--distance (robust features are kept there); leave it out or "
                           "set --boundary-tolerance.")
    options = AnalysisOptions(
        superlevel=args.superlevel, neighbourhood=args.neighbourhood, sigma=args.smooth,
        crop=args.crop, downsample=args.downsample, distance=args.distance,
        threshold=threshold, pores_bright=args.pores_bright,
        fill_invalid=_fill_value(args.fill_invalid), min_persistence=args.min_persistence,
        periodic=args.periodic, field=args.field, engine=args.engine,
        significance=0.05 if args.significance is None else args.significance,
        noise=args.noise, noise_model=args.noise_model,
        boundary_tolerance=args.boundary_tolerance)
    check_options(options)
    check_target(args.out, args.force)
    load_options = load_options_from(args)
    if args.out_of_core:
        return _run_out_of_core(args, options, load_options)
    scan = load(args.scan, **load_options)
    bar = ProgressBar()
    start = time.perf_counter()
    try:
        result = run(scan, options, progress=bar)
        write_result(args.out, scan, result.diagram, options, prepared=result.prepared,
                     timings=result.timings, notes=result.notes, force=args.force,
                     verdict=result.verdict)
    finally:
        bar.close()
    print(f"voxtopo: {result.headline()} in {time.perf_counter() - start:.2f} s with the "
          f"{result.diagram.engine} engine")
    print(f"voxtopo: results written to {args.out}")
    return 0


def _threshold_value(text):
    """--threshold: None, "otsu" or a number."""
    if text is None or text == "otsu":
        return text
    try:
        return float(text)
    except ValueError:
        raise VoxtopoError(f"--threshold should be a number or 'otsu', got {text!r}.") from None


def _fill_value(text):
    if text is None or text in ("max", "min"):
        return text
    try:
        return float(text)
    except ValueError:
        raise VoxtopoError(f"--fill-invalid should be max, min or a number, got {text!r}.")


def _add_pores(subparsers) -> None:
    p = subparsers.add_parser(
        "pores",
        help="pore bodies, throats, percolation and connectivity of a segmented scan",
        description="Measure the pore space of a two-phase scan: pore bodies and throats "
                    "from the persistence of the signed distance transform, grains, loops, "
                    "enclosed voids, percolation radius and connected porosity per axis, "
                    "Euler characteristic, connectivity density and Minkowski functionals. "
                    "Writes pores.csv, summary.json and plots into a new folder. Research "
                    "use only: not a diagnosis nor a certification.")
    p.add_argument("scan", help="binary mask, label image or gray scan (any format voxtopo "
                                "reads)")
    p.add_argument("--out", required=True, help="result folder to create")
    p.add_argument("--force", action="store_true", help="replace the result folder if it exists")
    s = p.add_argument_group("which voxels are pores")
    s.add_argument("--mask", metavar="MASKFILE",
                   help="a binary pore mask (1 = pore) for the gray SCAN, which is then only "
                        "drawn under the marks of the slice plot")
    s.add_argument("--label", type=int, metavar="N", help="pore label of a label image")
    s.add_argument("--threshold", metavar="VALUE|otsu",
                   help="segment a gray scan: pores at or below VALUE, or Otsu's threshold")
    s.add_argument("--pores-bright", action="store_true",
                   help="with --threshold: pores are the voxels above it")
    m = p.add_argument_group("measurement")
    m.add_argument("--axis", choices=["z", "y", "x"], action="append",
                   help="axis for percolation and connected porosity (repeat for several; "
                        "default all)")
    m.add_argument("--neighbourhood", "--neighborhood", type=int, choices=[26, 6, 8, 4],
                   help="connectivity of the pore phase: 26 or 6 in 3D, 8 or 4 in 2D "
                        "(default 26/8); the solid takes the complementary 6/4")
    m.add_argument("--min-lifetime", type=float, metavar="LENGTH",
                   help="merge pores whose body exceeds their throat by no more than this "
                        "(default half a voxel)")
    m.add_argument("--engine", choices=["auto", "voxtopo", "gudhi"], default="auto",
                   help="persistence engine (the diagram is the same)")
    add_load_options(p)
    p.set_defaults(handler=_run_pores)


def _run_pores(args) -> int:
    from .io import load
    from .io.results import check_target
    from .porosity import analyse, write_pores
    threshold = _threshold_value(args.threshold)
    if args.mask and (threshold is not None or args.label is not None):
        raise VoxtopoError("--mask already says which voxels are pores; leave out "
                           "--threshold and --label.")
    check_target(args.out, args.force)
    load_options = load_options_from(args)
    scan = load(args.scan, **load_options)
    target = scan
    if args.mask:
        target = load(args.mask, **load_options)
        if target.shape != scan.shape:
            raise VoxtopoError(f"The mask {args.mask} has shape {target.shape} but the scan "
                               f"{args.scan} has shape {scan.shape}; give a mask of the same "
                               f"scan.")
        target = target.with_data(target.data, spacing=scan.spacing, unit=scan.unit)
    bar = ProgressBar()
    try:
        analysis = analyse(target, threshold=threshold, pores_bright=args.pores_bright,
                           label=args.label, axis=args.axis, neighbourhood=args.neighbourhood,
                           min_lifetime=args.min_lifetime, engine=args.engine, progress=bar)
        write_pores(args.out, analysis, scan, force=args.force)
    finally:
        bar.close()
    summary = analysis.summary
    unit = summary["unit"]
    flow = ", ".join(f"{a}: {'yes' if summary['percolates'][a] else 'no'} "
                     f"(r = {summary['percolation_radius'][a]:.4g} {unit})"
                     for a in summary["percolates"])
    print(f"voxtopo: porosity {summary['porosity']:.4f}, {summary['counts']['pores']} pores "
          f"({summary['counts']['pores_at_border']} at the border); percolates {flow}")
    print(f"voxtopo: results written to {args.out} (research use only)")
    return 0


def _run_out_of_core(args, options, load_options) -> int:
    from dataclasses import replace

    from .batch import analyse_out_of_core
    if not options.keeps_all_tested:
        # the significance test simulates noise through the whole scan's preparation,
        # which the out-of-core path does not hold in memory: every pair is listed
        options = replace(options, min_persistence=0.0)
    diagram = analyse_out_of_core(args.scan, args.out, options, load_options=load_options,
                                  chunks=args.chunks, force=args.force)
    floor = options.persistence_floor
    counts = ", ".join(f"dim {d}: {n}" for d, n in diagram.counts(floor).items()
                       if d in (0, diagram.ndim - 1))
    which = ("all pairs, not tested for significance out of core" if args.min_persistence ==
             "auto" else "all pairs" if floor == 0 else f"pairs with persistence above {floor:g}")
    print(f"voxtopo: {len(diagram)} pairs ({which}; {counts}) out of core; "
          f"{'; '.join(diagram.notes)}")
    print(f"voxtopo: results written to {args.out}")
    return 0


def _add_batch(subparsers) -> None:
    from .batch import __doc__ as batch_doc
    p = subparsers.add_parser(
        "batch", help="run one job on every scan of a manifest, as dask tasks",
        description=batch_doc, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("manifest", help="CSV manifest (path, spacing, unit, group, ...) or a "
                                    "quoted glob of scan files")
    p.add_argument("--out", required=True,
                   help="batch folder to create, or to resume with the same settings")
    p.add_argument("--settings", metavar="FILE", help="TOML or YAML settings file")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="address of a running dask scheduler (default: a local cluster)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="workers of the local cluster (default: one per core)")
    p.set_defaults(handler=_run_batch)


def _run_batch(args) -> int:
    from .batch import run_batch
    if args.workers is not None and args.workers < 1:
        raise VoxtopoError(f"--workers should be 1 or more, got {args.workers}.")
    table = run_batch(args.manifest, args.out, settings_path=args.settings,
                      scheduler=args.scheduler, workers=args.workers)
    failed = int((table["status"] != "done").sum())
    print(f"voxtopo: {len(table) - failed} scans complete, {failed} failed; "
          f"summary in {args.out}/summary.csv")
    return 0 if failed == 0 else 1


def _add_compare(subparsers) -> None:
    p = subparsers.add_parser(
        "compare", help="distances, embedding and a group test between result folders",
        description="Compare the persistence diagrams of result folders (or of every scan of "
                    "a batch folder): bottleneck and Wasserstein distances, persistence "
                    "images, Betti curves, an MDS plot and a permutation test by group.")
    p.add_argument("results", nargs="+", help="result folders, or batch folders")
    p.add_argument("--out", required=True, help="comparison folder to create")
    p.add_argument("--force", action="store_true", help="replace the folder if it exists")
    p.add_argument("--dims", default="0,1", metavar="D,D",
                   help="homological dimensions to compare (default 0,1)")
    p.add_argument("--metric", choices=["bottleneck", "wasserstein"], default="bottleneck",
                   help="distance used for the embedding and the test (default bottleneck)")
    p.add_argument("--order", type=float, default=1.0, help="Wasserstein order q (default 1)")
    p.add_argument("--essential", choices=["separate", "ignore"], default="separate",
                   help="essential classes: matched among themselves (default) or left out")
    p.add_argument("--permutations", type=int, default=999,
                   help="relabellings in the permutation test (default 999)")
    p.add_argument("--seed", type=int, default=0, help="seed of the permutations and MDS")
    p.add_argument("--group-column", default="group",
                   help="summary.csv column holding the groups of a batch folder")
    p.set_defaults(handler=_run_compare)


def _run_compare(args) -> int:
    from .compare import compare_diagrams, load_results
    from .io.results import check_target
    from .report.html import write_comparison
    try:
        dims = tuple(int(d) for d in args.dims.split(","))
    except ValueError:
        raise VoxtopoError(f"--dims should be dimensions like 0,1; got {args.dims!r}.")
    check_target(args.out, args.force)
    diagrams, names, groups = load_results(args.results, args.group_column)
    use_groups = groups if len(set(groups)) > 1 else None
    comparison = compare_diagrams(diagrams, names, use_groups, dims=dims, metric=args.metric,
                                  order=args.order, essential=args.essential,
                                  n_permutations=args.permutations, seed=args.seed)
    write_comparison(comparison, args.out, force=args.force)
    if comparison.test is not None:
        print(f"voxtopo: permutation test p = {comparison.test.p_value:.4g} "
              f"({comparison.test.n_permutations} permutations)")
    print(f"voxtopo: comparison of {len(names)} diagrams written to {args.out}")
    return 0


def _primes(text: str):
    try:
        return tuple(int(v) for v in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"field should be a prime or primes like 2,3; "
                                         f"got {text!r}")


def _positions(text: str):
    if text == "all":
        return text
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"positions should be a whole number or 'all'; "
                                         f"got {text!r}")


def _add_patches(subparsers) -> None:
    from .patches import PatchOptions
    defaults = PatchOptions()
    p = subparsers.add_parser(
        "patches",
        help="topology of the space of high-contrast patches of images",
        description="Sample k x k patches of one or more images (or slices of volumes), keep "
                    "the high-contrast ones, normalise them onto a sphere in DCT "
                    "coordinates, keep the dense core and compute the persistence of its "
                    "landmarks. Writes the cloud, pairs.csv, summary.json and plots into a "
                    "new folder. The defaults show the primary circle on natural "
                    "photographs of texture; research use only.")
    p.add_argument("images", nargs="+", metavar="IMAGE",
                   help="gray 2D images or 3D volumes in any format voxtopo reads")
    p.add_argument("--out", required=True, help="result folder to create")
    p.add_argument("--force", action="store_true", help="replace the result folder if it exists")
    s = p.add_argument_group("sampling")
    s.add_argument("-k", "--patch-size", type=int, default=defaults.k, choices=[3, 5, 7],
                   help=f"patch size k (default {defaults.k})")
    s.add_argument("--positions", type=_positions, default=defaults.positions,
                   help=f"patch positions drawn at random from all images together, or "
                        f"'all' (default {defaults.positions})")
    s.add_argument("--contrast-percent", type=float, default=defaults.contrast_percent,
                   help=f"keep this percentage of highest-contrast patches per image "
                        f"(default {defaults.contrast_percent:g})")
    s.add_argument("--log", action=argparse.BooleanOptionalAction, default=defaults.log,
                   help="use log intensities log(1 + value) (default on)")
    s.add_argument("--axis", choices=["z", "y", "x"],
                   help="cut volumes into slices along this axis (default z)")
    s.add_argument("--slices", type=_shape, metavar="I,J,..",
                   help="use only these slices of each volume (default all)")
    s.add_argument("--seed", type=int, default=defaults.seed,
                   help="seed of the random positions and the first landmark")
    t = p.add_argument_group("core and persistence")
    t.add_argument("--k-neighbour", "--k-neighbor", type=int, default=defaults.k_neighbour,
                   help=f"density from the distance to this nearest neighbour "
                        f"(default {defaults.k_neighbour})")
    t.add_argument("--density-percent", type=float, default=defaults.density_percent,
                   help=f"keep the densest percentage of the cloud "
                        f"(default {defaults.density_percent:g})")
    t.add_argument("--landmarks", type=int, default=defaults.landmarks,
                   help=f"number of max-min landmarks (default {defaults.landmarks})")
    t.add_argument("--field", type=_primes, default=defaults.fields, metavar="P[,Q]",
                   help="coefficient field Z/p; 2,3 computes both side by side (default 2)")
    t.add_argument("--max-edge", type=float,
                   help="largest scale (default: the median landmark distance, lowered "
                        "while the complex would be too large)")
    t.add_argument("--method", choices=["rips", "witness"], default=defaults.method,
                   help="Rips complex of the landmarks or the witness complex")
    t.add_argument("--max-dimension", type=int, choices=[0, 1, 2],
                   default=defaults.max_dimension, help="highest homology dimension")
    add_load_options(p)
    p.set_defaults(handler=_run_patches)


def _run_patches(args) -> int:
    from .io import load
    from .io.results import check_target
    from .patches import PatchOptions, analyse
    options = PatchOptions(
        k=args.patch_size, contrast_percent=args.contrast_percent, positions=args.positions,
        seed=args.seed, log=args.log, axis=args.axis, slices=args.slices,
        k_neighbour=args.k_neighbour, density_percent=args.density_percent,
        landmarks=args.landmarks, fields=args.field, max_edge=args.max_edge,
        method=args.method, max_dimension=args.max_dimension)
    check_target(args.out, args.force)
    load_options = load_options_from(args)
    scans = [load(path, **load_options) for path in args.images]
    bar = ProgressBar()
    try:
        dense, result = analyse(scans, args.out, options, force=args.force, progress=bar)
    finally:
        bar.close()
    for f in result.fields:
        margin = result.margin(f)
        print(f"voxtopo: Z/{f}: Betti numbers {result.betti[f]} at scale "
              f"{result.middle_scale:.3g}; longest loop {margin['longest']:.3g}, "
              f"{margin['ratio']:.2f} times the second")
    print(f"voxtopo: {len(dense)} core patches, {len(result.landmarks)} landmarks; results "
          f"written to {args.out} (research use only)")
    return 0


SUBCOMMANDS = (_add_analyse, _add_pores, _add_batch, _add_compare, _add_patches)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="voxtopo",
        description="Topology of images and volumes with cubical persistent homology. "
                    "Results support research; they are not a diagnosis nor a certification.")
    parser.add_argument("--version", action="version", version=f"voxtopo {__version__}")
    parser.add_argument("--debug", action="store_true",
                        help="show the full traceback when something goes wrong")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for add in SUBCOMMANDS:
        add(subparsers)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    try:
        return int(args.handler(args) or 0)
    except Cancelled:
        print("voxtopo: cancelled; nothing was written.", file=sys.stderr)
        return EXIT_INTERRUPTED
    except KeyboardInterrupt:
        print("voxtopo: interrupted; nothing was written.", file=sys.stderr)
        return EXIT_INTERRUPTED
    except (VoxtopoError, MemoryError) as error:
        if args.debug:
            raise
        print(f"voxtopo: error: {error}", file=sys.stderr)
        return EXIT_BAD_INPUT


if __name__ == "__main__":
    sys.exit(main())
