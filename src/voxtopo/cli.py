"""The `voxtopo` command: a thin shell over the library.

Each subcommand is added by an ``_add_<name>(subparsers)`` function that sets its handler
with ``set_defaults(handler=...)``; the handlers only translate options into library calls.
Bad input ends with one sentence on stderr and exit code 2 (a traceback only with --debug).
"""

from __future__ import annotations

import argparse
import math
import signal
import sys
import threading
import time

from . import __version__
from .errors import Cancelled, VoxtopoError

EXIT_FAILED = 1
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


def add_output_options(parser: argparse.ArgumentParser) -> None:
    """--out and --force, the same for every subcommand that writes a result folder."""
    parser.add_argument("--out", required=True,
                        help="result folder to create (missing parent folders are made); it "
                             "may not be an input, hold one, or lie inside an input folder")
    parser.add_argument("--force", action="store_true",
                        help="replace the result folder if it exists and voxtopo wrote it")


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
    add_output_options(p)
    f = p.add_argument_group("filtration")
    f.add_argument("--superlevel", action="store_true",
                   help="sweep from bright to dark (bright features first)")
    f.add_argument("--neighbourhood", "--neighborhood", type=int, choices=[4, 8, 6, 26],
                   help="connectivity of the swept set: 4/8 in 2D, 6/26 in 3D "
                        "(default 8/26, the voxel construction)")
    f.add_argument("--smooth", type=float, metavar="SIGMA",
                   help="Gaussian smoothing, sigma in the scan's unit")
    f.add_argument("--crop", metavar="Z0:Z1,Y0:Y1,X0:X1", help="analyse only this box")
    f.add_argument("--roi", metavar="MASKFILE",
                   help="region of interest: a binary mask on the scan's grid, 1 = inside; "
                        "voxels outside it are not part of the complex, and the noise is "
                        "read and simulated inside it")
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
    e.add_argument("--min-persistence", default="auto", metavar="auto|VALUE",
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


def _run_job(name: str, args, options, source, load_options: dict, inputs) -> int:
    """The one way every subcommand runs its job: check the output, read ``source`` (a
    path, or a list of paths) as the job reads it, run with a progress bar, write the
    result folder, say what was found."""
    from . import jobs
    from .io.results import check_target

    job = jobs.get(name)
    check_target(args.out, args.force, inputs=inputs)
    data = ([jobs.read_input(name, path, load_options) for path in source]
            if isinstance(source, list) else jobs.read_input(name, source, load_options))
    for scan in data if isinstance(data, list) else [data]:
        _say_notes(scan)
    bar = ProgressBar()
    try:
        result = job.run(data, options, progress=bar)
        job.write(result, args.out, force=args.force)
    finally:
        bar.close()
    for line in job.describe(result).splitlines():
        print(f"voxtopo: {line}")
    print(f"voxtopo: results written to {args.out} (research use only)")
    return 0


def _run_analyse(args) -> int:
    from .jobs.analyse import DEFAULT_SIGNIFICANCE, AnalysisOptions
    options = AnalysisOptions(
        superlevel=args.superlevel, neighbourhood=args.neighbourhood, sigma=args.smooth,
        crop=args.crop, downsample=args.downsample, distance=args.distance,
        threshold=_threshold_value(args.threshold), pores_bright=args.pores_bright,
        fill_invalid=_fill_value(args.fill_invalid),
        min_persistence=_min_persistence(args.min_persistence),
        periodic=args.periodic, field=args.field, engine=args.engine,
        significance=(DEFAULT_SIGNIFICANCE if args.significance is None
                      else args.significance),
        noise=args.noise, noise_model=args.noise_model,
        boundary_tolerance=args.boundary_tolerance, roi=args.roi)
    load_options = load_options_from(args)
    if args.out_of_core:
        return _run_out_of_core(args, options, load_options)
    return _run_job("analyse", args, options, args.scan, load_options,
                    [args.scan, args.roi])


def _say_notes(scan) -> None:
    """What the reader noticed about a scan (chunks a store did not hold, a z spacing taken
    from x), said before the work starts; summary.json keeps the same notes."""
    for note in scan.metadata.get("notes", []):
        print(f"voxtopo: note: {note}")


def _threshold_value(text):
    """--threshold: None, "otsu" or a number."""
    if text is None or text == "otsu":
        return text
    try:
        return float(text)
    except ValueError:
        raise VoxtopoError(f"--threshold should be a number or 'otsu', got {text!r}.") from None


def _min_persistence(text: str):
    """--min-persistence: "auto" (the significant or robust pairs) or the shortest lifetime
    kept, a finite number >= 0."""
    if text == "auto":
        return text
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not (math.isfinite(value) and value >= 0):
        raise VoxtopoError(f"--min-persistence should be 'auto' or a finite number >= 0 (the "
                           f"shortest lifetime kept), got {text!r}.")
    return value


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
                    "Features that survive every segmentation whose boundary is off by at "
                    "most --boundary-tolerance are flagged robust and counted. "
                    "Writes pores.csv, summary.json and plots into a new folder. Research "
                    "use only: not a diagnosis nor a certification.")
    p.add_argument("scan", help="binary mask, label image or gray scan (any format voxtopo "
                                "reads)")
    add_output_options(p)
    s = p.add_argument_group("which voxels are pores")
    s.add_argument("--mask", metavar="MASKFILE",
                   help="a binary pore mask (1 = pore) for the gray SCAN, which is then only "
                        "drawn under the marks of the slice plot")
    s.add_argument("--label", type=int, metavar="N", help="pore label of a label image")
    s.add_argument("--threshold", metavar="VALUE|otsu",
                   help="segment a gray scan: pores at or below VALUE, or Otsu's threshold")
    s.add_argument("--pores-bright", action="store_true",
                   help="with --threshold: pores are the voxels above it")
    s.add_argument("--roi", metavar="MASKFILE",
                   help="region of interest: a binary mask on the scan's grid, 1 = sample; "
                        "voxels outside it are neither pore nor solid")
    m = p.add_argument_group("measurement")
    m.add_argument("--axis", choices=["z", "y", "x"], action="append",
                   help="axis for percolation and connected porosity (repeat for several; "
                        "default all)")
    m.add_argument("--neighbourhood", "--neighborhood", type=int, choices=[26, 6, 8, 4],
                   help="connectivity of the pore phase: 26 or 6 in 3D, 8 or 4 in 2D "
                        "(default 26/8); the solid takes the complementary 6/4")
    m.add_argument("--min-persistence", type=float, metavar="LENGTH",
                   help="the shortest lifetime kept: merge pores whose body exceeds their "
                        "throat by no more than this (default half a voxel)")
    m.add_argument("--boundary-tolerance", type=float, metavar="LENGTH",
                   help="how far the segmented boundary may be off, in the scan's unit "
                        "(default one voxel): features living longer than twice it plus a "
                        "voxel diagonal are flagged robust (stability theorem)")
    m.add_argument("--engine", choices=["auto", "voxtopo", "gudhi"], default="auto",
                   help="persistence engine (the diagram is the same)")
    o = p.add_argument_group("scans larger than memory")
    o.add_argument("--out-of-core", action="store_true",
                   help="read the scan chunk by chunk on a dask cluster (zarr / OME-Zarr; a "
                        "TIFF or .npy is rewritten into a store first); everything but the "
                        "loops (dimension 1, in memory only) and the basin volumes, exactly "
                        "as in memory, with Betti curves of all dimensions")
    o.add_argument("--chunks", type=_shape, metavar="Z,Y,X",
                   help="with --out-of-core: block shape of the tasks (default the store's)")
    o.add_argument("--scheduler", metavar="ADDRESS",
                   help="with --out-of-core: address of a running dask scheduler whose "
                        "workers reach the scan and the scratch folder (default: a local "
                        "cluster, one worker per core)")
    o.add_argument("--scratch", metavar="FOLDER",
                   help="with --out-of-core: folder for the intermediate stores (default: "
                        "beside --out); they are removed at the end")
    add_load_options(p)
    p.set_defaults(handler=_run_pores)


def _run_pores(args) -> int:
    from .jobs.pores import PoresOptions
    options = PoresOptions(
        mask=args.mask, threshold=_threshold_value(args.threshold),
        pores_bright=args.pores_bright, label=args.label,
        roi=args.roi, axis=tuple(args.axis) if args.axis else None,
        neighbourhood=args.neighbourhood, min_persistence=args.min_persistence,
        engine=args.engine, boundary_tolerance=args.boundary_tolerance,
        out_of_core=args.out_of_core, chunks=args.chunks)
    load_options = load_options_from(args)
    if args.out_of_core:
        return _run_pores_out_of_core(args, options, load_options)
    for name in ("scheduler", "scratch"):
        if getattr(args, name) is not None:
            raise VoxtopoError(f"--{name} is for the out-of-core path and would be ignored; "
                               f"add --out-of-core, or leave --{name} out.")
    return _run_job("pores", args, options, args.scan, load_options,
                    [args.scan, args.mask, args.roi])


def _run_pores_out_of_core(args, options, load_options) -> int:
    from .jobs import pores
    bar = ProgressBar()
    try:
        result = pores.pores_out_of_core(args.scan, args.out, options, scratch=args.scratch,
                                         scheduler=args.scheduler, load_options=load_options,
                                         force=args.force, progress=bar)
    finally:
        bar.close()
    for line in pores.describe(result).splitlines():
        print(f"voxtopo: {line}")
    print(f"voxtopo: results written to {args.out} (research use only)")
    return 0


def _run_out_of_core(args, options, load_options) -> int:
    from .jobs import analyse
    result = analyse.analyse_out_of_core(args.scan, args.out, options,
                                         load_options=load_options, chunks=args.chunks,
                                         force=args.force)
    print(f"voxtopo: {analyse.describe(result)}; {'; '.join(result.diagram.notes)}")
    print(f"voxtopo: results written to {args.out} (research use only)")
    return 0


def _add_batch(subparsers) -> None:
    from .batch import __doc__ as batch_doc
    p = subparsers.add_parser(
        "batch", help="run one job on every scan of a manifest, as dask tasks",
        description=batch_doc, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("manifest", help="CSV manifest (path, spacing, unit, group, ...) or a "
                                    "quoted glob of scan files")
    p.add_argument("--out", required=True,
                   help="batch folder to create, or a batch folder of voxtopo's to resume "
                        "with the same settings")
    p.add_argument("--force", action="store_true",
                   help="start an existing batch folder of voxtopo's anew instead of "
                        "resuming it")
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
    try:
        table = run_batch(args.manifest, args.out, settings_path=args.settings,
                          scheduler=args.scheduler, workers=args.workers, force=args.force)
    except KeyboardInterrupt:
        print(f"voxtopo: interrupted; the scans that had finished were kept in "
              f"{args.out}/scans, and running the same command again resumes the rest.",
              file=sys.stderr)
        return EXIT_INTERRUPTED
    failed = int((table["status"] != "done").sum())
    print(f"voxtopo: {len(table) - failed} scans complete, {failed} failed; "
          f"summary in {args.out}/summary.csv")
    return 0 if failed == 0 else 1


def _add_compare(subparsers) -> None:
    p = subparsers.add_parser(
        "compare", help="distances, embedding and a group test between result folders",
        description="Compare the persistence diagrams of result folders (or of every scan of "
                    "a batch folder): the bottleneck or Wasserstein distance, persistence "
                    "images, Betti curves, an MDS plot and a permutation test by group. By "
                    "default only the significant (or robust) features of each scan and the "
                    "classes that never die are compared.")
    p.add_argument("results", nargs="+", help="result folders, or batch folders")
    add_output_options(p)
    p.add_argument("--dims", default="0,1", metavar="D,D",
                   help="homological dimensions to compare (default 0,1)")
    p.add_argument("--metric", choices=["bottleneck", "wasserstein"], default="bottleneck",
                   help="the distance computed, used for the embedding and the test "
                        "(default bottleneck)")
    p.add_argument("--order", type=float, default=None,
                   help="order q of the Wasserstein distance (default 1)")
    p.add_argument("--essential", choices=["separate", "ignore"], default="separate",
                   help="classes that never die: matched among themselves (default) or "
                        "left out")
    p.add_argument("--all-pairs", action="store_true",
                   help="compare every pair, not only the significant (or robust) features")
    p.add_argument("--min-persistence", type=float, default=0.0, metavar="VALUE",
                   help="leave out pairs that live no longer than this, in the diagrams' "
                        "values (gray values, or the scan's unit for distances; default 0)")
    p.add_argument("--permutations", type=int, default=999,
                   help="relabellings in the permutation test (default 999)")
    p.add_argument("--seed", type=int, default=0, help="seed of the permutations and MDS")
    p.add_argument("--group-column", default=None,
                   help="summary.csv column holding the groups of a batch folder "
                        "(default group)")
    p.set_defaults(handler=_run_compare)


def _run_compare(args) -> int:
    from .compare import compare_diagrams, load_results
    from .io.results import check_target
    from .report.html import write_comparison
    try:
        dims = tuple(int(d) for d in args.dims.split(","))
    except ValueError:
        raise VoxtopoError(f"--dims should be dimensions like 0,1; got {args.dims!r}.")
    if args.order is not None and args.metric != "wasserstein":
        raise VoxtopoError(f"--order {args.order:g} applies only to the Wasserstein distance; "
                           f"add --metric wasserstein or leave --order out.")
    check_target(args.out, args.force, inputs=args.results)
    diagrams, names, groups = load_results(args.results, args.group_column)
    use_groups = groups if len(set(groups)) > 1 else None
    comparison = compare_diagrams(diagrams, names, use_groups, dims=dims, metric=args.metric,
                                  order=1.0 if args.order is None else args.order,
                                  essential=args.essential,
                                  all_pairs=args.all_pairs,
                                  min_persistence=args.min_persistence,
                                  n_permutations=args.permutations, seed=args.seed)
    write_comparison(comparison, args.out, force=args.force, inputs=args.results)
    if comparison.test is not None:
        print(f"voxtopo: permutation test p = {comparison.test.p_value:.4g}; "
              f"{comparison.test.resolution()}")
    print(f"voxtopo: {comparison.distance} distances of {len(names)} diagrams, "
          f"{comparison.features}, written to {args.out}")
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
    from .jobs.patches import PatchOptions
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
    add_output_options(p)
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
    v = p.add_argument_group("which bars are real")
    v.add_argument("--significance", type=float, default=defaults.significance,
                   metavar="ALPHA",
                   help=f"level of the test of every Rips bar under the universal null "
                        f"distribution (Bonferroni over the bars of a dimension; default "
                        f"{defaults.significance:g})")
    v.add_argument("--resamples", type=int, default=defaults.resamples, metavar="N",
                   help=f"rerun the sampling with N other seeds and count in how many the "
                        f"longest loop is again the dominant one (default {defaults.resamples}; "
                        f"0 = none)")
    add_load_options(p)
    p.set_defaults(handler=_run_patches)


def _run_patches(args) -> int:
    from .jobs.patches import PatchOptions
    options = PatchOptions(
        k=args.patch_size, contrast_percent=args.contrast_percent, positions=args.positions,
        seed=args.seed, log=args.log, axis=args.axis, slices=args.slices,
        k_neighbour=args.k_neighbour, density_percent=args.density_percent,
        landmarks=args.landmarks, fields=args.field, max_edge=args.max_edge,
        method=args.method, max_dimension=args.max_dimension,
        significance=args.significance, resamples=args.resamples)
    return _run_job("patches", args, options, list(args.images), load_options_from(args),
                    args.images)


def _period_range(text: str):
    try:
        shortest, longest = (float(v) for v in text.split(":"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"periods should look like MIN:MAX in seconds, e.g. "
                                         f"0.5:4; got {text!r}")
    return shortest, longest


def _add_periodicity(subparsers) -> None:
    from .jobs.periodicity import PeriodicityOptions
    defaults = PeriodicityOptions()
    p = subparsers.add_parser(
        "periodicity",
        help="where a time-lapse oscillates, with what period, and how surely",
        description="Measure rhythms in a time-lapse: the mean intensity of every pixel "
                    "(or bin, tile, region) over time is embedded in sliding windows and "
                    "scored by the longest H1 bar of its Rips complex (SW1PerS); the period "
                    "comes from the spectrum and the p-value from surrogates with random "
                    "phases and the signal's smoothed spectrum. Writes score.tif, period.tif, "
                    "regions.csv, summary.json, plots and report.html into a new folder; "
                    "research use only.")
    p.add_argument("stack", help="time-lapse: ImageJ hyperstack, OME-TIFF, OME-Zarr, folder "
                                 "of frames, .npy, ...")
    add_output_options(p)
    t = p.add_argument_group("time")
    t.add_argument("--axes", help="the stored axes when the file names none or wrongly, e.g. "
                                  "TYX or TZYX (a folder of frames: TYX)")
    t.add_argument("--frame-interval", type=float, metavar="SECONDS",
                   help="seconds between frames; wins over the file's")
    t.add_argument("--periods", type=_period_range, metavar="MIN:MAX",
                   help="shortest and longest period searched, in seconds (default: 2 "
                        "frames to half the duration)")
    s = p.add_argument_group("signals (pixels by default; one of these at most)")
    s.add_argument("--bin", type=int, default=defaults.bin, metavar="N",
                   help="average N x N pixel blocks (N x N x N voxels in a volume) before "
                        "measuring (default 1)")
    s.add_argument("--tiles", type=int, metavar="N",
                   help="one signal per tile, the frame cut into N parts along each axis")
    s.add_argument("--regions", metavar="LABELS",
                   help="one signal per region of this label image (0 = background)")
    m = p.add_argument_group("significance")
    m.add_argument("--surrogates", type=int, default=defaults.surrogates, metavar="N",
                   help=f"surrogates per p-value (random phases, smoothed spectrum; default "
                        f"{defaults.surrogates}; per-pixel maps share one pooled null)")
    m.add_argument("--significance", type=float, default=defaults.significance,
                   metavar="ALPHA", help=f"level of significance (default "
                                         f"{defaults.significance:g})")
    m.add_argument("--points", type=int, metavar="N",
                   help="points per sliding-window cloud (default 30 for pixels, 60 for "
                        "tiles and regions)")
    m.add_argument("--whole-field", action=argparse.BooleanOptionalAction,
                   default=defaults.whole_field,
                   help="also measure the rhythm of the whole field (default on)")
    m.add_argument("--seed", type=int, default=defaults.seed, help="seed of the surrogates")
    r = p.add_argument_group("reading the stack")
    r.add_argument("--spacing", type=_spacing, metavar="Y,X",
                   help="pixel size (one value, or one per spatial axis); wins over the file")
    r.add_argument("--unit", help="unit of the spacing, e.g. um")
    r.add_argument("--channel", type=int, help="channel to take from a multichannel file")
    r.add_argument("--level", type=int, default=0,
                   help="resolution level of an OME-Zarr image (0 = full resolution)")
    p.set_defaults(handler=_run_periodicity)


def _run_periodicity(args) -> int:
    from .jobs.periodicity import PeriodicityOptions
    options = PeriodicityOptions(
        periods=args.periods, bin=args.bin, tiles=args.tiles, regions=args.regions,
        surrogates=args.surrogates, significance=args.significance, points=args.points,
        whole_field=args.whole_field, seed=args.seed)
    load_options = {"axes": args.axes, "frame_interval": args.frame_interval,
                    "spacing": args.spacing, "unit": args.unit, "channel": args.channel,
                    "level": args.level}
    return _run_job("periodicity", args, options, args.stack, load_options,
                    [args.stack, args.regions])


SUBCOMMANDS = (_add_analyse, _add_pores, _add_batch, _add_compare, _add_patches,
               _add_periodicity)


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


#: Ctrl-C presses seen by :func:`main` (its handler records them before it interrupts).
_INTERRUPTS: list[int] = []


def _interrupt(signum, frame):
    _INTERRUPTS.append(signum)
    raise KeyboardInterrupt


def main(argv=None) -> int:
    """Run the command; returns the exit code (0 done, 1 some batch scans failed or the
    system failed us, 2 bad input, 130 interrupted)."""
    # Python's own Ctrl-C handler, replaced by one that also records the press: a press
    # while a compiled library imports can surface as that library's ImportError
    # (numpy's, for one) instead of KeyboardInterrupt
    ours = (threading.current_thread() is threading.main_thread()
            and signal.getsignal(signal.SIGINT) is signal.default_int_handler)
    if ours:
        _INTERRUPTS.clear()
        signal.signal(signal.SIGINT, _interrupt)
    try:
        return _main(argv)
    finally:
        if ours:
            signal.signal(signal.SIGINT, signal.default_int_handler)


def _main(argv) -> int:
    debug = "--debug" in (sys.argv[1:] if argv is None else argv)
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "handler", None):
            parser.print_help(sys.stderr)
            return EXIT_BAD_INPUT
        from .engine.warm_up import kernels_cached

        if not kernels_cached():
            print("voxtopo: compiling the engine's kernels for this machine (once, a few "
                  "minutes) ...", file=sys.stderr)
        return int(args.handler(args) or 0)
    except Cancelled:
        print("voxtopo: cancelled; nothing was written.", file=sys.stderr)
        return EXIT_INTERRUPTED
    except KeyboardInterrupt:
        print("voxtopo: interrupted; no result folder was written.", file=sys.stderr)
        return EXIT_INTERRUPTED
    except ImportError:
        if not _INTERRUPTS or debug:
            raise
        print("voxtopo: interrupted; no result folder was written.", file=sys.stderr)
        return EXIT_INTERRUPTED
    except (VoxtopoError, MemoryError) as error:
        if debug:
            raise
        if not isinstance(error, VoxtopoError):  # numpy's or numba's own words
            error = ("the run ran out of memory; close other programs, or crop or "
                     "downsample the scan")
        print(f"voxtopo: error: {_one_line(error)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as error:
        # the disk filled up, a network share went away: not the user's input, but still
        # one sentence, and the atomic writes left nothing half-made behind
        if debug:
            raise
        where = f" ({error.filename})" if error.filename else ""
        print(f"voxtopo: error: the system refused a file operation{where}: "
              f"{error.strerror or error}; nothing half-written was left.", file=sys.stderr)
        return EXIT_FAILED


def _one_line(error) -> str:
    return " ".join(str(error).split()) or type(error).__name__


if __name__ == "__main__":
    sys.exit(main())
