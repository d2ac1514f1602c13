"""The analyse job: scan -> filtration -> persistence diagram -> significance -> result
folder.

``AnalysisOptions`` holds the settings in the user's words, :func:`run` computes an
``AnalysisResult``, :func:`write` fills a result folder through the result-folder contract
(io/results.py), and :func:`describe` says in one line what was found. The CLI
(`voxtopo analyse`), the napari plugin and the batch runner only build the options and call
these, so a result folder means the same thing whichever shell made it.

Which pairs are kept (``min_persistence``)::

    "auto" (default)   gray-value sweep: the significant pairs (family-wise Monte Carlo
                       test against the scan's own noise, voxtopo.significance);
                       distance sweep: the robust pairs (stability under a boundary moved
                       by the boundary tolerance)
    a number           every pair living longer than it, with p_value / significant
                       (or robust) filled in; 0 lists every pair
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass, replace
from dataclasses import field as dataclass_field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from .. import __version__
from .. import filtration as filt
from .. import significance as sig
from ..diagram import Diagram
from ..engine import estimate, out_of_core_remedy, own, persistence
from ..errors import InputError
from ..options import (BOOLEAN, COUNT, ENGINE, FILL, NEIGHBOURHOOD, NON_NEGATIVE, NUMBER,
                       POSITIVE, PRIME, TEXT, THRESHOLD, Rule, check, one_of, optional)
from ..io import load, load_on_grid_of, result_folder
from ..io.results import (check_target, json_ready, read_summary, software_versions,
                          write_summary)
from ..memory import ensure_fits, reported_as_too_big
from ..scan import Scan

CAUTIONS = (
    "These results support research. They are not a medical diagnosis, nor a certification "
    "of a part, a material or a structure; defer to local codes and licensed practice.",
    "The numbers depend on segmentation, resolution, smoothing and the chosen neighbourhood; "
    "features a few voxels across are at the limit of what the scan resolves.",
)

#: Family-wise level of the significance test of gray-value sweeps when none is given.
DEFAULT_SIGNIFICANCE = 0.05


@dataclass
class AnalysisOptions:
    """Settings of one analysis; every field has the CLI option of the same name.

    superlevel      sweep bright to dark instead of dark to bright
    neighbourhood   4/8 (2D) or 6/26 (3D); None = 8/26, the voxel construction
    sigma           Gaussian smoothing in the scan's unit (None = none)
    crop            'z0:z1,y0:y1,x0:x1' box applied first (None = whole scan)
    downsample      block-mean factor (1 = none)
    distance        analyse the signed distance transform of a mask (pores negative)
    threshold       for distance on a gray scan: a value or "otsu"; pores at or below it
    pores_bright    with threshold: pores are the voxels above it
    fill_invalid    None (NaN is an error), "max", "min" or a number to put in NaN voxels
    min_persistence "auto": keep the significant pairs (distance: the robust ones); a
                    number: keep pairs with persistence above it (0 = every pair)
    periodic        glue opposite faces
    field           prime p of the coefficients Z/p
    engine          "auto", "voxtopo" or "gudhi"
    significance    family-wise level alpha of the significance test, in (0, 1)
    noise           noise level (standard deviation, gray units); None = estimated
    noise_model     "gaussian" or "poisson" (photon counts, Anscombe transform first)
    boundary_tolerance  distance sweeps: how far the boundary may be off, in the scan's
                    unit (None = one voxel)
    roi             a mask file of the region of interest on the scan's grid (1 = inside):
                    voxels outside it are not part of the cubical complex, and the noise
                    is read and simulated within it (None = the whole scan)
    """

    superlevel: bool = False
    neighbourhood: int | None = None
    sigma: float | None = None
    crop: str | None = None
    downsample: int = 1
    distance: bool = False
    threshold: str | float | None = None
    pores_bright: bool = False
    fill_invalid: str | float | None = None
    min_persistence: float | str = "auto"
    periodic: bool = False
    field: int = 2
    engine: str = "auto"
    significance: float = DEFAULT_SIGNIFICANCE
    noise: float | None = None
    noise_model: str = "gaussian"
    boundary_tolerance: float | None = None
    roi: str | None = None

    @property
    def keeps_all_tested(self) -> bool:
        """False for "auto" (keep only significant / robust pairs)."""
        return self.min_persistence != AUTO

    @property
    def persistence_floor(self) -> float:
        """The numeric lower bound on persistence handed to the engine."""
        return 0.0 if self.min_persistence == AUTO else float(self.min_persistence)

    @property
    def listed(self) -> str:
        """The pairs a count of every listed pair counts: "all pairs" or "pairs with
        persistence above 0.5"."""
        floor = self.persistence_floor
        return "all pairs" if floor == 0 else f"pairs with persistence above {floor:g}"

    def __post_init__(self):
        check(asdict(self), ANALYSE_RULES, "the analyse options")
        if self.distance:
            if self.noise is not None or self.noise_model != "gaussian":
                raise InputError("A noise level or noise model would be ignored by a distance "
                                 "sweep (its uncertainty is the segmentation); leave them out "
                                 "or give --boundary-tolerance.")
            if self.significance != DEFAULT_SIGNIFICANCE:
                raise InputError(f"--significance {self.significance:g} tests gray-value "
                                 f"sweeps and would be ignored with --distance (robust "
                                 f"features are kept there); leave it out or set "
                                 f"--boundary-tolerance.")
        elif self.boundary_tolerance is not None:
            raise InputError("The boundary tolerance only applies to distance sweeps "
                             "(--distance); leave it out or add --distance.")
        if self.threshold is not None and not self.distance:
            raise InputError("A threshold segments a gray scan for the distance sweep; give "
                             "--distance with it, or leave --threshold out.")
        if self.pores_bright and self.threshold is None:
            raise InputError("--pores-bright says which side of --threshold the pores are; "
                             "give --distance --threshold with it, or leave it out.")
        if self.roi is not None and self.distance:
            raise InputError("A region of interest with --distance is what `voxtopo pores "
                             "--roi` measures (outside voxels neither pore nor solid); use "
                             "it, or leave --roi out.")


#: What each field of AnalysisOptions accepts (settings files are checked against it).
ANALYSE_RULES = {
    "superlevel": BOOLEAN,
    "neighbourhood": optional(NEIGHBOURHOOD),
    "sigma": optional(POSITIVE),
    "crop": optional(TEXT),
    "downsample": COUNT,
    "distance": BOOLEAN,
    "threshold": optional(THRESHOLD),
    "pores_bright": BOOLEAN,
    "fill_invalid": optional(FILL),
    "min_persistence": Rule(lambda v: v == "auto" or NON_NEGATIVE.accepts(v),
                            "\"auto\" or a number, 0 or more"),
    "periodic": BOOLEAN,
    "field": PRIME,
    "engine": ENGINE,
    "significance": Rule(lambda v: NUMBER.accepts(v) and 0 < v < 1,
                         "a level between 0 and 1, such as 0.05"),
    "noise": optional(POSITIVE),
    "noise_model": one_of(*sig.NOISE_MODELS),
    "boundary_tolerance": optional(POSITIVE),
    "roi": optional(TEXT),
}

#: The value of ``min_persistence`` (CLI ``--min-persistence auto``) that keeps the
#: significant pairs of a gray-value sweep and the robust pairs of a distance sweep.
AUTO = "auto"


#: Bytes per pair held while the diagram is tested and its tables and plots written,
#: beyond the scan: the Diagram, its p-values and flags, the tables and the plots' copies.
#: Measured on a 512^3 uint16 noisy bead scan (benchmarks/bench_memory.py): 1.57 GB beyond
#: the scan and the interpreter for 4.85 million pairs, at the peak of that stage.
RESULT_BYTES_PER_PAIR = 330


def preparation_plan(scan: Scan, options: AnalysisOptions) -> list[tuple[str, int]]:
    """What each step of :func:`prepare`, then the testing and writing of the pairs, and
    then persistence will allocate beyond the scan.

    Returns ``(step, bytes)`` pairs, worked out from shapes alone so that a step that would
    not fit is refused before any earlier step has run. Persistence comes last (the engine
    checks it with its own remedies); the pairs it makes are planned at
    ``voxtopo.engine.own.PLANNED_PAIRS_PER_VOXEL``.
    """
    shape, dtype = scan.shape, scan.data.dtype
    steps = []

    def named(step):
        return f"{step} the {'x'.join(map(str, shape))} scan"

    if options.crop:
        box = (filt.parse_box(options.crop, scan.ndim) if isinstance(options.crop, str)
               else options.crop)
        shape = tuple(len(range(*b.indices(n))) for b, n in zip(box, shape))
    if options.fill_invalid is not None:
        steps.append((named("Filling the invalid voxels of"),
                      int(np.prod(shape, dtype=np.int64)) * dtype.itemsize))
    if options.downsample and options.downsample != 1:
        factors = tuple(max(int(f), 1) for f in np.broadcast_to(options.downsample, scan.ndim))
        steps.append((named("Downsampling"), filt.downsampling_bytes(shape, factors)))
        shape = tuple(n // f for n, f in zip(shape, factors))
    if options.sigma:
        steps.append((named("Smoothing"), filt.smoothing_bytes(shape, dtype)))
        dtype = np.dtype(np.float32)
    if options.distance:
        steps.append((named("The distance transform of"), filt.distance_bytes(shape)))
        dtype = np.dtype(np.float64)
    pairs = own.PLANNED_PAIRS_PER_VOXEL * int(np.prod(shape, dtype=np.int64))
    steps.append((named("Testing and writing the pairs of"),
                  int(pairs * RESULT_BYTES_PER_PAIR)))
    steps.append((named("Persistence of"),
                  estimate(shape, dtype, engine=options.engine,
                           neighbourhood=options.neighbourhood, field=options.field,
                           periodic=bool(np.any(options.periodic)))))
    return steps


def region_of_interest(scan: Scan, options: AnalysisOptions) -> np.ndarray | None:
    """The region of interest of ``options.roi`` on the scan's grid (True inside), or None
    without one. A mask of another shape, not binary, or empty is refused in one
    sentence."""
    if options.roi is None:
        return None
    return filt.region_of_interest(load_on_grid_of(scan, options.roi, "region of interest"),
                                   scan.shape, scan.source or "array")


def outside_made_finite(scan: Scan, region: np.ndarray) -> Scan:
    """``scan`` with NaN or infinite voxels outside ``region`` set to the lowest value
    inside, since those voxels never enter the sweep (a scan masked with NaN outside its
    field of view); invalid voxels inside are left for the usual refusal."""
    data = scan.data
    if not np.issubdtype(data.dtype, np.floating):
        return scan
    invalid_outside = ~np.isfinite(data) & ~region
    if not invalid_outside.any():
        return scan
    ensure_fits(data.nbytes, f"Setting the invalid voxels outside the region of interest of "
                             f"the {'x'.join(map(str, scan.shape))} scan",
                filt.PREPARATION_REMEDY)
    inside = data[region & np.isfinite(data)]
    lowest = inside.min() if inside.size else 0.0
    return scan.with_data(np.where(invalid_outside, lowest, data))


def region_as_swept(region: np.ndarray, scan: Scan, options: AnalysisOptions) -> np.ndarray:
    """``region`` (on the scan's grid) on the grid that is swept: cropped like the scan,
    and after downsampling the blocks that lie wholly inside it; a region left empty is
    refused in one sentence."""
    where = scan.source or "array"
    sample = region
    if options.crop:
        sample = filt.crop(scan.with_data(sample), options.crop).data
    if options.downsample and options.downsample != 1:
        blocks = filt.downsample(scan.with_data(sample.astype(np.float32)), options.downsample)
        sample = blocks.data == 1
    if not sample.any():
        raise InputError(f"The region of interest {options.roi} holds no voxel of the part of "
                         f"{where} that is analysed (after --crop, or no whole block after "
                         f"--downsample); give a region inside it.")
    return sample


def prepare(scan: Scan, options: AnalysisOptions) -> tuple[Scan, dict]:
    """Apply crop, invalid-voxel filling, downsampling, the Anscombe transform (Poisson
    noise model), smoothing and (optionally) the signed distance transform, in that
    order. Returns the scan to analyse and notes.

    Every step's memory is checked before the first one runs (:func:`preparation_plan`).
    """
    unsmoothed, notes = prepare_unsmoothed(scan, options)
    return finish_preparation(unsmoothed, options, notes), notes


def prepare_unsmoothed(scan: Scan, options: AnalysisOptions,
                       plan: list | None = None) -> tuple[Scan, dict]:
    """The preparation up to (not including) smoothing: the scan whose noise is measured.

    ``plan`` is :func:`preparation_plan` of the same scan and options when the caller has
    already worked it out."""
    # the preparation's steps; then the pairs' testing and writing, which the out-of-core
    # path avoids too; persistence, the last step, is checked by the engine itself
    *preparing, (results, result_bytes), _ = plan or preparation_plan(scan, options)
    for step, needed in preparing:
        ensure_fits(needed, step, filt.PREPARATION_REMEDY)
    ensure_fits(result_bytes, results, out_of_core_remedy(scan.ndim))
    notes = {}
    if options.crop:
        scan = filt.crop(scan, options.crop)
    if options.fill_invalid is not None:
        scan = filt.fill_invalid(scan, options.fill_invalid)
    filt.check_finite(scan)
    if options.downsample and options.downsample != 1:
        scan = filt.downsample(scan, options.downsample)
    if options.noise_model == "poisson" and not options.distance:
        scan = sig.anscombe(scan)
        notes["anscombe"] = ("gray values are photon counts after the Anscombe transform "
                             "2 sqrt(x + 3/8): births, deaths and persistence are in "
                             "Anscombe units")
    return scan, notes


def finish_preparation(scan: Scan, options: AnalysisOptions, notes: dict) -> Scan:
    """Smoothing and (optionally) the signed distance transform; adds to ``notes``."""
    if options.sigma:
        scan = filt.smooth(scan, options.sigma)
    if options.distance:
        data = scan.data
        is_binary = data.dtype == bool or set(np.unique(data).tolist()) <= {0, 1}
        if options.threshold is None and not is_binary:
            raise InputError(
                f"{scan.source or 'The scan'} is not a binary mask; give --threshold VALUE "
                f"or --threshold otsu to separate pores from solid."
            )
        if options.threshold is not None:
            mask, used = filt.threshold(scan, options.threshold, below=not options.pores_bright)
            notes["threshold"] = {"value": used, "method": "otsu" if options.threshold == "otsu"
                                  else "given", "pores": "above" if options.pores_bright
                                  else "at or below"}
        else:
            mask = data.astype(bool)
        scan = filt.signed_distance(scan.with_data(mask))
    return scan


@dataclass(frozen=True)
class Verdict:
    """Which pairs are features: the test, its level and its outcome.

    tested       every computed pair, with ``p_value`` and ``significant`` (gray-value
                 sweeps) or ``robust`` (distance sweeps)
    flag         "significant" or "robust"
    thresholds   persistence above which a pair passes, per dimension (scan's values)
    description  the summary.json entry
    level        method and level in brackets, said beside every count
    """

    tested: Diagram
    flag: str
    thresholds: dict
    description: dict
    level: str

    @property
    def phrase(self) -> str:
        """"significant (family-wise, alpha 0.05, ...)" or "robust (...)"."""
        return f"{self.flag} {self.level}" if self.tested_any else self.level

    @property
    def features(self) -> str:
        """What a count of the pairs that passed counts: "significant features
        (family-wise, alpha 0.05, ...)" or "robust features (...)"."""
        return f"{self.flag} features {self.level}"

    @property
    def tested_any(self) -> bool:
        """False when the pairs could not be tested (no noise to test against)."""
        return bool(self.thresholds)


def judge(diagram: Diagram, unsmoothed: Scan, options: AnalysisOptions,
          progress=None, sample: np.ndarray | None = None) -> Verdict:
    """p-values and ``significant`` flags (gray-value sweeps) or ``robust`` flags
    (distance sweeps) for every pair of ``diagram``; with a region of interest
    (``sample``) the noise is read and simulated within it."""
    if options.distance:
        tested = sig.robust_flags(diagram, options.boundary_tolerance)
        delta = sig.boundary_tolerance_of(diagram, options.boundary_tolerance)
        threshold = sig.robust_threshold(diagram, options.boundary_tolerance)
        counts = sig.significant_counts(tested, "robust")
        description = {"method": sig.ROBUST_METHOD, "boundary_tolerance": delta,
                       "unit": diagram.unit,
                       "threshold": {str(d): threshold for d in range(diagram.ndim)},
                       "robust": {str(d): n for d, n in counts.items()},
                       "essential_classes": "never die; always counted as features"}
        level = (f"(persistence above {threshold:.4g} {diagram.unit}: boundary "
                 f"tolerance {delta:.4g} {diagram.unit}, stability theorem)")
        return Verdict(tested, "robust", {d: threshold for d in range(diagram.ndim)},
                       description, level)
    try:
        tested, significance = sig.assess(diagram, unsmoothed, alpha=options.significance,
                                          noise=options.noise,
                                          noise_model=options.noise_model,
                                          smoothing=options.sigma, engine=options.engine,
                                          progress=progress, sample=sample)
    except InputError as reason:
        if not options.keeps_all_tested:
            raise
        return untested(diagram, str(reason))
    noise = significance.noise
    unit = "Anscombe units" if noise.model == "poisson" else "gray values"
    correlation = ", ".join(f"{v:.3g}" for v in sorted(set(noise.correlation_length)))
    level = (f"(family-wise, alpha {significance.alpha:g}, {noise.model} noise "
             f"{noise.sigma:.3g} {unit} {noise.method}, correlation {correlation} "
             f"{noise.unit}, {significance.null.simulations} simulations)")
    return Verdict(tested, "significant", significance.thresholds(),
                   significance.describe(tested), level)


def untested(diagram: Diagram, reason: str) -> Verdict:
    """Every pair listed without a test (``p_value`` and ``significant`` left empty), with
    the reason: no noise to test against, or a path that does not test yet."""
    pairs = diagram.pairs.copy()
    pairs["p_value"] = np.nan
    pairs["significant"] = pd.array([pd.NA] * len(pairs), dtype="boolean")
    level = f"not tested for significance ({reason.rstrip('.')})"
    return Verdict(replace(diagram, pairs=pairs), "significant", {},
                   {"method": "not tested", "reason": reason}, level)


#: The settings class of this job, under the name every job uses.
Options = AnalysisOptions


@dataclass(frozen=True)
class RecordedAnalysis:
    """What a result folder's summary.json says of the analysis that wrote it.

    options      the settings it was made with
    flag         "significant" or "robust" when its pairs were tested, else None
    thresholds   persistence above which a pair passed, per dimension ({} untested)
    features     what a count of the passing pairs counts, in the words of the result
                 line ("significant features (family-wise, alpha 0.05, ...)"); "" untested
    """

    options: AnalysisOptions
    flag: str | None
    thresholds: dict
    features: str


def recorded(folder) -> RecordedAnalysis:
    """The settings and the verdict recorded in the summary.json of an analyse folder.

    Parameters
    ----------
    folder : str or Path
        A result folder written by :func:`write`.

    Returns
    -------
    RecordedAnalysis
        Settings the summary does not name take their defaults; a folder whose pairs
        were not tested (or whose thresholds are all missing) has flag None.

    Raises
    ------
    InputError
        When summary.json is missing or unreadable, or its options are refused.
    """
    summary = read_summary(folder)
    known = AnalysisOptions.__dataclass_fields__
    options = AnalysisOptions(**{name: value for name, value
                                 in (summary.get("options") or {}).items() if name in known})
    flag, section = sig.recorded_verdict(summary)
    thresholds = {int(d): float(t) for d, t in (section.get("threshold") or {}).items()
                  if t is not None}
    if flag is None or not thresholds:
        return RecordedAnalysis(options, None, {}, "")
    # folders written before the summary named its features say the method alone
    features = section.get("features") or f"{flag} features ({section.get('method')})"
    return RecordedAnalysis(options, flag, thresholds, features)


@dataclass
class AnalysisResult:
    """What :func:`run` computed: the pairs kept, the verdict on every pair, the scans."""

    scan: Scan
    prepared: Scan
    diagram: Diagram
    verdict: Verdict
    options: AnalysisOptions
    notes: dict = dataclass_field(default_factory=dict)
    timings: dict = dataclass_field(default_factory=dict)
    sample: np.ndarray | None = None

    def region(self) -> dict | None:
        """The region of interest for summary.json: file, voxels, its volume (2D: area)
        in the scan's unit; None when the whole scan was swept."""
        return describe_region(self.sample, self.prepared, self.options.roi)

    def headline(self) -> str:
        """The result in one line: what was counted, by which method, at which level."""
        kept = len(self.diagram)
        total = len(self.verdict.tested)
        skipped = set((self.notes.get("out_of_core") or {}).get("dimensions_not_computed", []))
        by_dim = ", ".join(f"dim {d}: {n}" for d, n in self.diagram.counts().items()
                           if d not in skipped)
        region = self.region()
        within = "" if region is None else f"; {region_phrase(region)}"
        if not self.options.keeps_all_tested and self.verdict.tested_any:
            return (f"{kept} {self.verdict.flag} of {total} pairs {self.verdict.level}; "
                    f"{by_dim}{within}")
        which = self.options.listed
        if not self.verdict.tested_any:
            return f"{kept} pairs ({which}; {by_dim}); {self.verdict.phrase}{within}"
        passing = sum(sig.significant_counts(self.diagram, self.verdict.flag).values())
        return (f"{kept} pairs ({which}; {by_dim}), of which {passing} "
                f"{self.verdict.phrase}{within}")


def describe_region(sample: np.ndarray | None, grid: Scan, roi) -> dict | None:
    """What summary.json, the report and the result line say of a region of interest
    (``sample`` on the grid of ``grid``): its file, voxel count and volume (an area in 2D)
    in the scan's unit."""
    if sample is None:
        return None
    voxels = int(np.count_nonzero(sample))
    size = "volume" if sample.ndim == 3 else "area"
    amount = voxels * float(np.prod(grid.spacing))
    unit = f"{grid.unit}^{sample.ndim}"
    return {"file": None if roi is None else str(roi), "voxels": voxels, size: amount,
            "unit": unit, "fraction_of_analysed_scan": voxels / sample.size,
            "meaning": "voxels outside the region are not part of the cubical complex; the "
                       "noise is read and simulated within the region"}


def region_phrase(region: dict) -> str:
    """The region of interest (:func:`describe_region`) in the words beside every count."""
    size = "volume" if "volume" in region else "area"
    return (f"within the region of interest ({region['voxels']} voxels, {size} "
            f"{region[size]:.4g} {region['unit']})")


def run(scan: Scan, options: AnalysisOptions | None = None, progress=None) -> AnalysisResult:
    """Prepare, sweep and judge one scan in memory (nothing is written).

    Parameters
    ----------
    scan : Scan
        The scan as read (:func:`voxtopo.load`).
    options : AnalysisOptions, optional
        The settings; the defaults of ``voxtopo analyse`` without one.
    progress : callable(phase, fraction), optional
        Called as the work goes on; may raise :class:`~voxtopo.Cancelled`.

    Returns
    -------
    AnalysisResult
        The scan, the prepared filtration, the diagram kept (every pair, or those that
        passed the test), the verdict of the test, the options, notes and timings.

    Raises
    ------
    InputError
        For options the scan cannot take (a threshold without a distance sweep, a crop
        outside the scan, NaN values without fill_invalid, ...).
    TooBigError
        When the preparation or the sweep would not fit in memory (with the estimate).
    """
    options = options or AnalysisOptions()
    timings = {}
    plan = preparation_plan(scan, options)
    with reported_as_too_big(f"Analysing {scan.source or 'the scan'}",
                             max(needed for _, needed in plan), out_of_core_remedy(scan.ndim)):
        start = time.perf_counter()
        region = region_of_interest(scan, options)
        sample, given = None, scan
        if region is not None:
            given = outside_made_finite(scan, region)
            sample = region_as_swept(region, scan, options)
            del region
        unsmoothed, notes = prepare_unsmoothed(given, options, plan)
        del given
        prepared = finish_preparation(unsmoothed, options, notes)
        timings["prepare"] = time.perf_counter() - start
        start = time.perf_counter()
        swept = prepared
        if sample is not None:
            swept, outside = filt.outside_last(prepared, sample, superlevel=options.superlevel,
                                               min_persistence=options.persistence_floor)
        diagram = persistence(swept, superlevel=options.superlevel,
                              neighbourhood=options.neighbourhood, periodic=options.periodic,
                              field=options.field, engine=options.engine,
                              min_persistence=options.persistence_floor, progress=progress)
        diagram = diagram.placed_in_scan(*filt.grid_frame(scan.shape, options.crop,
                                                          options.downsample))
        if sample is not None:
            del swept
            diagram = diagram.without_outside(outside)
            diagram = replace(diagram, notes=diagram.notes + (
                region_phrase(describe_region(sample, prepared, options.roi)),))
        timings["persistence"] = time.perf_counter() - start
        start = time.perf_counter()
        verdict = judge(diagram, unsmoothed, options, progress, sample)
        timings["significance"] = time.perf_counter() - start
    kept = verdict.tested
    if not options.keeps_all_tested:
        kept = replace(kept, pairs=kept.pairs[kept.pairs[verdict.flag].to_numpy(dtype=bool)]
                       .reset_index(drop=True),
                       notes=kept.notes + (f"pairs kept: {verdict.phrase}",))
    return AnalysisResult(scan, prepared, kept, verdict, options, notes, timings, sample)


def write(result: AnalysisResult, out, force: bool = False) -> Path:
    """Fill the result folder ``out`` (see :func:`write_result`).

    Parameters
    ----------
    result : AnalysisResult
        What :func:`run` returned.
    out : str or Path
        The result folder to create: pairs.csv, summary.json, the plots and report.html,
        written whole or not at all.
    force : bool
        Replace ``out`` when it is a result folder voxtopo wrote.

    Returns
    -------
    Path
        ``out``.
    """
    return write_result(out, result.scan, result.diagram, result.options,
                        prepared=result.prepared, timings=result.timings, notes=result.notes,
                        force=force, verdict=result.verdict, region=result.region())


def describe(result: AnalysisResult) -> str:
    """What was found, in the words of the CLI line and the plugin's status.

    Parameters
    ----------
    result : AnalysisResult
        What :func:`run` (or :func:`run_out_of_core`) returned.

    Returns
    -------
    str
        The counts with what they count (method and level), the engine and its time, and,
        on a second line, that the voxel size is unknown when it is.
    """
    where = ("out of core" if "out_of_core" in result.notes
             else f"with the {result.diagram.engine} engine")
    line = f"{result.headline()}; persistence in {result.diagram.seconds:.2f} s {where}"
    if result.scan.unit == UNKNOWN_UNIT:
        line += f"\n{VOXEL_SIZE_UNKNOWN}"
    return line


#: The unit of births, deaths and persistence after the Anscombe transform of photon counts.
ANSCOMBE_UNITS = "Anscombe units, 2 sqrt(counts + 3/8)"

#: The unit of a scan whose voxel size nobody gave.
UNKNOWN_UNIT = "px"
VOXEL_SIZE_UNKNOWN = ("No voxel size was given or found in the file: positions, sizes and "
                      "smoothing are in voxels (px); give --spacing and --unit for physical "
                      "units.")


def analyse(source, out, options: AnalysisOptions | None = None, *, force: bool = False,
            progress=None, load_options: dict | None = None) -> Diagram:
    """Load, :func:`run` and :func:`write` in one call.

    Parameters
    ----------
    source : path or Scan
        A file/folder/glob for :func:`voxtopo.load`, or a Scan already in memory.
    out : path
        The result folder to create (``pairs.csv``, ``summary.json``, PNG plots).
    options : AnalysisOptions
    force : bool
        Replace ``out`` if it is a result folder voxtopo wrote.
    progress : callable(phase, fraction), optional
    load_options : dict, optional
        Keyword arguments for :func:`voxtopo.load` (spacing, unit, channel, ...).

    Returns
    -------
    Diagram
    """
    check_target(out, force, inputs=[source.source if isinstance(source, Scan) else source])
    start = time.perf_counter()
    scan = source if isinstance(source, Scan) else load(source, **(load_options or {}))
    seconds = time.perf_counter() - start
    if progress is not None:
        progress("load", 1.0)
    result = run(scan, options, progress)
    result.timings = {"load": seconds, **result.timings}
    write(result, out, force)
    return result.diagram


#: Options that need the whole volume in memory at once.
_WHOLE_VOLUME = ("sigma", "crop", "downsample", "distance", "periodic", "fill_invalid",
                 "field")


def run_out_of_core(source, options: AnalysisOptions | None = None, *, load_options=None,
                    chunks=None, scheduler=None) -> AnalysisResult:
    """The analyse job for a zarr / OME-Zarr scan too big for memory.

    Dimension 0 and dimension d-1 are computed chunk by chunk
    (:func:`voxtopo.engine.chunked.chunked_persistence`); the result's notes say that
    dimension 1 of a volume is absent. Options that need the whole volume at once
    (smoothing, cropping, downsampling, the distance transform, periodic boundaries,
    filling invalid voxels, other fields than Z/2) are refused.

    Parameters
    ----------
    source : str or Path
        A zarr array or OME-Zarr image (:func:`voxtopo.io.open_chunked`).
    options : AnalysisOptions, optional
        The settings; only superlevel, neighbourhood and min_persistence apply here.
    load_options : dict, optional
        ``spacing``, ``unit``, ``channel``, ``timepoint`` and ``level`` of the store.
    chunks : tuple of int, optional
        The block shape of the work; default the store's chunks.
    scheduler : optional
        A dask scheduler or Client for the chunk tasks (default dask's own).

    Returns
    -------
    AnalysisResult
        Every pair listed (untested), the dimensions not computed named in its notes.

    Raises
    ------
    InputError
        For options or load options the out-of-core path cannot apply, or a store it
        cannot open.
    """
    from ..engine.chunked import chunked_persistence
    from ..io import open_chunked

    options = options or AnalysisOptions()
    defaults = AnalysisOptions()
    asked = [name for name in _WHOLE_VOLUME
             if getattr(options, name) != getattr(defaults, name)]
    if asked:
        raise InputError(f"The out-of-core path cannot apply {', '.join(asked)} (they need the "
                         f"whole volume in memory); leave them out or drop --out-of-core.")
    if options.roi is not None:
        raise InputError("The out-of-core path does not take a region of interest yet; leave "
                         "--roi out, or crop the store to the region and drop --out-of-core.")
    load_options = dict(load_options or {})
    unknown = set(load_options) - {"spacing", "unit", "channel", "timepoint", "level"}
    if unknown:
        raise InputError(f"The out-of-core path reads zarr stores and takes no {sorted(unknown)} "
                         f"option; leave it out.")
    opened = open_chunked(source, level=load_options.get("level", 0),
                          channel=load_options.get("channel"),
                          timepoint=load_options.get("timepoint"), chunks=chunks,
                          unit=load_options.get("unit"))
    if load_options.get("spacing") is not None:
        spacing = tuple(float(v) for v in np.atleast_1d(load_options["spacing"]))
        spacing = spacing * opened.ndim if len(spacing) == 1 else spacing
        if len(spacing) != opened.ndim:
            raise InputError(f"Spacing {spacing} has {len(spacing)} values but {source} is "
                             f"{opened.ndim}D; give one value per axis in (z, y, x) order.")
        opened.spacing = spacing
    start = time.perf_counter()
    diagram = chunked_persistence(opened, superlevel=options.superlevel,
                                  neighbourhood=options.neighbourhood,
                                  min_persistence=options.persistence_floor,
                                  scheduler=scheduler)
    seconds = time.perf_counter() - start
    placeholder = np.broadcast_to(np.zeros((), opened.dtype), opened.shape)
    scan = Scan(placeholder, spacing=opened.spacing, unit=opened.unit, source=opened.source)
    missing = list(range(1, opened.ndim - 1))
    verdict = untested(diagram, "the out-of-core path does not test significance yet, so "
                                "every pair is listed")
    return AnalysisResult(scan, scan, verdict.tested, verdict, options,
                          {"out_of_core": {"chunks": list(opened.chunks),
                                           "dimensions_not_computed": missing}},
                          {"persistence": seconds})


def analyse_out_of_core(source, out, options: AnalysisOptions | None = None, *,
                        load_options=None, chunks=None, force: bool = False,
                        scheduler=None) -> AnalysisResult:
    """:func:`run_out_of_core` then :func:`write`; returns the result.

    Parameters
    ----------
    source : str or Path
        A zarr array or OME-Zarr image.
    out : str or Path
        The result folder to create (checked before any chunk is read).
    options, load_options, chunks, scheduler
        As for :func:`run_out_of_core`.
    force : bool
        Replace ``out`` when it is a result folder voxtopo wrote.

    Returns
    -------
    AnalysisResult
        What :func:`run_out_of_core` returned (:func:`describe` says it in one line).
    """
    check_target(out, force, inputs=[source])
    result = run_out_of_core(source, options, load_options=load_options, chunks=chunks,
                             scheduler=scheduler)
    write(result, out, force)
    return result


def summarise(scan: Scan, diagram: Diagram, options: AnalysisOptions, *, prepared=None,
              timings=None, notes=None, verdict: Verdict | None = None,
              region: dict | None = None) -> dict:
    """The content of summary.json (the diagram's own description is added on save)."""
    prepared = prepared or scan
    threshold = options.persistence_floor
    value_unit = ANSCOMBE_UNITS if "anscombe" in (notes or {}) else None
    most = diagram.most_persistent(10)
    top = {str(d): json_ready(most[most["dim"] == d].to_dict(orient="records"))
           for d in range(diagram.ndim)}
    judged = {}
    if verdict is not None:
        section = dict(verdict.description)
        if verdict.tested_any:
            section["features"] = verdict.features
        judged = {sig.VERDICT_SECTIONS[verdict.flag]: section,
                  "counted": (verdict.features
                              if not options.keeps_all_tested and verdict.tested_any else
                              options.listed)
                  + ("" if region is None else f", {region_phrase(region)}"),
                  "pairs_computed": {str(d): n for d, n in verdict.tested.counts().items()}}
    return {
        "voxtopo_version": __version__,
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "scan": scan.describe(),
        "voxel_size_known": scan.unit != UNKNOWN_UNIT,
        "analysed": prepared.describe(),
        "options": asdict(options),
        "region_of_interest": region,
        "counts": {str(d): n for d, n in diagram.counts(threshold).items()},
        **judged,
        "essential": {str(d): int(((diagram.pairs["dim"] == d)
                                   & ~np.isfinite(diagram.pairs["death"])).sum())
                      for d in range(diagram.ndim)},
        "most_persistent": top,
        "columns": {"pairs.csv": diagram.column_units(value_unit)},
        "positions": diagram.placement_note(),
        "timings_seconds": {k: round(v, 4) for k, v in (timings or {}).items()},
        "preparation": notes or {},
        "software": software_versions(),
        "cautions": list(CAUTIONS) + ([] if scan.unit != UNKNOWN_UNIT else [VOXEL_SIZE_UNKNOWN]),
    }


def write_result(out, scan: Scan, diagram: Diagram, options: AnalysisOptions | None = None, *,
                 prepared=None, timings=None, notes=None, force: bool = False,
                 verdict: Verdict | None = None, region: dict | None = None) -> Path:
    """Write pairs.csv, summary.json and the standard plots into ``out``, atomically.

    With a ``verdict`` the plots show every tested pair and the threshold (a band along
    the diagonal, a line on the lifetime histograms); pairs.csv holds ``diagram``.

    Parameters
    ----------
    out : str or Path
        The result folder to create, with report.html.
    scan : Scan
        The scan as read (its source may not be inside ``out``).
    diagram : Diagram
        The pairs to write.
    options : AnalysisOptions, optional
        The settings the diagram was made with, recorded in summary.json.
    prepared : Scan, optional
        The prepared filtration, described in summary.json when it differs from the scan.
    timings, notes : dict, optional
        Seconds per stage, and what the preparation did.
    force : bool
        Replace ``out`` when it is a result folder voxtopo wrote.
    verdict : Verdict, optional
        The significance or robustness test, for the counts and the plots.

    Returns
    -------
    Path
        ``out``.
    """
    from ..report.html import write_report
    from ..report.plots import save_standard_plots

    options = options or AnalysisOptions()
    timings = dict(timings or {})
    start = time.perf_counter()
    with result_folder(out, force=force, inputs=[scan.source, options.roi]) as tmp:
        summary = summarise(scan, diagram, options, prepared=prepared, timings=timings,
                            notes=notes, verdict=verdict, region=region)
        write_summary(tmp, summary)
        diagram.save(tmp)
        if verdict is None or not verdict.tested_any:
            summary["plots"] = save_standard_plots(diagram, tmp)
        else:
            summary["plots"] = save_standard_plots(verdict.tested, tmp,
                                                   thresholds=verdict.thresholds,
                                                   flag=verdict.flag)
        summary["timings_seconds"]["write"] = round(time.perf_counter() - start, 4)
        summary["diagram"] = diagram.description()
        write_summary(tmp, summary)
        write_report(tmp)
    return Path(out)
