"""The main job as one function: scan -> filtration -> persistence -> significance ->
result folder.

The CLI (`voxtopo analyse`), the napari plugin's export and the batch runner all call
:func:`analyse` (or :func:`run` then :func:`write_result`), so a result folder means the
same thing whichever shell made it.

Which pairs are kept (``min_persistence``)::

    "auto" (default)   gray-value sweep: the significant pairs (family-wise Monte Carlo
                       test against the scan's own noise, voxtopo.significance);
                       distance sweep: the robust pairs (stability under a boundary moved
                       by the boundary tolerance)
    a number           every pair living longer than it, with p_value / significant
                       (or robust) filled in; 0 lists every pair
"""

from __future__ import annotations

import json
import math
import platform
import time
from dataclasses import asdict, dataclass, replace
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from . import __version__
from . import filtration as filt
from . import significance as sig
from .diagram import Diagram
from .engine import persistence
from .errors import InputError
from .io import load, result_folder
from .io.results import check_target
from .scan import Scan

CAUTIONS = (
    "These results support research. They are not a medical diagnosis, nor a certification "
    "of a part, a material or a structure; defer to local codes and licensed practice.",
    "The numbers depend on segmentation, resolution, smoothing and the chosen neighbourhood; "
    "features a few voxels across are at the limit of what the scan resolves.",
)


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
    significance: float = 0.05
    noise: float | None = None
    noise_model: str = "gaussian"
    boundary_tolerance: float | None = None

    @property
    def keeps_all_tested(self) -> bool:
        """False for "auto" (keep only significant / robust pairs)."""
        return self.min_persistence != AUTO

    @property
    def persistence_floor(self) -> float:
        """The numeric lower bound on persistence handed to the engine."""
        return 0.0 if self.min_persistence == AUTO else float(self.min_persistence)


#: The value of ``min_persistence`` (CLI ``--min-persistence auto``) that keeps the
#: significant pairs of a gray-value sweep and the robust pairs of a distance sweep.
AUTO = "auto"


def check_options(options: AnalysisOptions) -> None:
    """Refuse settings that cannot be used or would be ignored, before any work."""
    if options.min_persistence != AUTO:
        try:
            floor = float(options.min_persistence)
        except (TypeError, ValueError):
            raise InputError(f"min_persistence should be 'auto' or a number of at least 0, "
                             f"got {options.min_persistence!r}.") from None
        if not (math.isfinite(floor) and floor >= 0):
            raise InputError(f"min_persistence should be 'auto' or a number of at least 0, "
                             f"got {floor}.")
    sig.check_alpha(options.significance)
    if options.noise_model not in sig.NOISE_MODELS:
        raise InputError(f"The noise model should be one of {list(sig.NOISE_MODELS)}, "
                         f"got {options.noise_model!r}.")
    if options.noise is not None and not (math.isfinite(options.noise) and options.noise > 0):
        raise InputError(f"The noise level must be a positive number of gray units, "
                         f"got {options.noise}.")
    if options.distance:
        if options.noise is not None or options.noise_model != "gaussian":
            raise InputError("A noise level or noise model would be ignored by a distance "
                             "sweep (its uncertainty is the segmentation); leave them out "
                             "or give --boundary-tolerance.")
    elif options.boundary_tolerance is not None:
        raise InputError("The boundary tolerance only applies to distance sweeps "
                         "(--distance); leave it out or add --distance.")


def prepare(scan: Scan, options: AnalysisOptions) -> tuple[Scan, dict]:
    """Apply crop, invalid-voxel filling, downsampling, the Anscombe transform (Poisson
    noise model), smoothing and (optionally) the signed distance transform, in that
    order. Returns the scan to analyse and notes."""
    unsmoothed, notes = prepare_unsmoothed(scan, options)
    return finish_preparation(unsmoothed, options, notes), notes


def prepare_unsmoothed(scan: Scan, options: AnalysisOptions) -> tuple[Scan, dict]:
    """The preparation up to (not including) smoothing: the scan whose noise is measured."""
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
    def tested_any(self) -> bool:
        """False when the pairs could not be tested (no noise to test against)."""
        return bool(self.thresholds)


def judge(diagram: Diagram, unsmoothed: Scan, options: AnalysisOptions,
          progress=None) -> Verdict:
    """p-values and ``significant`` flags (gray-value sweeps) or ``robust`` flags
    (distance sweeps) for every pair of ``diagram``."""
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
                                          progress=progress)
    except InputError as reason:
        if not options.keeps_all_tested:
            raise
        return _untested(diagram, str(reason))
    noise = significance.noise
    unit = "Anscombe units" if noise.model == "poisson" else "gray values"
    correlation = ", ".join(f"{v:.3g}" for v in sorted(set(noise.correlation_length)))
    level = (f"(family-wise, alpha {significance.alpha:g}, {noise.model} noise "
             f"{noise.sigma:.3g} {unit} {noise.method}, correlation {correlation} "
             f"{noise.unit}, {significance.null.simulations} simulations)")
    return Verdict(tested, "significant", significance.thresholds(),
                   significance.describe(tested), level)


def _untested(diagram: Diagram, reason: str) -> Verdict:
    """Every pair listed without a test: the user asked for pairs by persistence and the
    scan gives no noise to test against (``p_value`` and ``significant`` left empty)."""
    pairs = diagram.pairs.copy()
    pairs["p_value"] = np.nan
    pairs["significant"] = pd.array([pd.NA] * len(pairs), dtype="boolean")
    level = f"not tested for significance ({reason.rstrip('.')})"
    return Verdict(replace(diagram, pairs=pairs), "significant", {},
                   {"method": "not tested", "reason": reason}, level)


@dataclass(frozen=True)
class AnalysisResult:
    """What :func:`run` computed: the pairs kept, the verdict on every pair, the scans."""

    scan: Scan
    prepared: Scan
    diagram: Diagram
    verdict: Verdict
    options: AnalysisOptions
    notes: dict
    timings: dict

    def headline(self) -> str:
        """The result in one line: what was counted, by which method, at which level."""
        kept = len(self.diagram)
        total = len(self.verdict.tested)
        by_dim = ", ".join(f"dim {d}: {n}" for d, n in self.diagram.counts().items())
        if not self.options.keeps_all_tested:
            return (f"{kept} {self.verdict.flag} of {total} pairs {self.verdict.level}; "
                    f"{by_dim}")
        floor = self.options.persistence_floor
        which = "all pairs" if floor == 0 else f"pairs with persistence above {floor:g}"
        if not self.verdict.tested_any:
            return f"{kept} pairs ({which}; {by_dim}); {self.verdict.phrase}"
        passing = sum(sig.significant_counts(self.diagram, self.verdict.flag).values())
        return f"{kept} pairs ({which}; {by_dim}), of which {passing} {self.verdict.phrase}"


def run(scan: Scan, options: AnalysisOptions | None = None, progress=None) -> AnalysisResult:
    """Prepare, sweep and judge one scan in memory (nothing is written).

    Parameters
    ----------
    scan : Scan
    options : AnalysisOptions
    progress : callable(phase, fraction), optional

    Returns
    -------
    AnalysisResult
    """
    options = options or AnalysisOptions()
    check_options(options)
    timings = {}
    start = time.perf_counter()
    unsmoothed, notes = prepare_unsmoothed(scan, options)
    prepared = finish_preparation(unsmoothed, options, notes)
    timings["prepare"] = time.perf_counter() - start
    start = time.perf_counter()
    diagram = persistence(prepared, superlevel=options.superlevel,
                          neighbourhood=options.neighbourhood, periodic=options.periodic,
                          field=options.field, engine=options.engine,
                          min_persistence=options.persistence_floor, progress=progress)
    timings["persistence"] = time.perf_counter() - start
    start = time.perf_counter()
    verdict = judge(diagram, unsmoothed, options, progress)
    timings["significance"] = time.perf_counter() - start
    kept = verdict.tested
    if not options.keeps_all_tested:
        kept = replace(kept, pairs=kept.pairs[kept.pairs[verdict.flag].to_numpy(dtype=bool)]
                       .reset_index(drop=True),
                       notes=kept.notes + (f"pairs kept: {verdict.phrase}",))
    return AnalysisResult(scan, prepared, kept, verdict, options, notes, timings)


def analyse(source, out, options: AnalysisOptions | None = None, *, force: bool = False,
            progress=None, load_options: dict | None = None) -> Diagram:
    """Run the main job and write its result folder.

    Parameters
    ----------
    source : path or Scan
        A file/folder/glob for :func:`voxtopo.load`, or a Scan already in memory.
    out : path
        The result folder to create (``pairs.csv``, ``summary.json``, PNG plots).
    options : AnalysisOptions
    force : bool
        Replace ``out`` if it exists.
    progress : callable(phase, fraction), optional
    load_options : dict, optional
        Keyword arguments for :func:`voxtopo.load` (spacing, unit, channel, ...).

    Returns
    -------
    Diagram
        The pairs kept: the significant (or robust) ones with ``min_persistence="auto"``,
        else every pair above ``min_persistence``; each with ``p_value`` and
        ``significant`` (or ``robust``).
    """
    options = options or AnalysisOptions()
    check_options(options)
    check_target(out, force)
    start = time.perf_counter()
    scan = source if isinstance(source, Scan) else load(source, **(load_options or {}))
    load_seconds = time.perf_counter() - start
    if progress is not None:
        progress("load", 1.0)
    result = run(scan, options, progress)
    write_result(out, scan, result.diagram, options, prepared=result.prepared,
                 timings={"load": load_seconds, **result.timings}, notes=result.notes,
                 force=force, verdict=result.verdict)
    return result.diagram


def _records(frame) -> list[dict]:
    """Rows as JSON values: missing and infinite numbers become null."""
    out = []
    for row in frame.to_dict(orient="records"):
        clean = {}
        for key, value in row.items():
            if pd.isna(value):
                clean[key] = None
            elif isinstance(value, (np.integer, int)):
                clean[key] = int(value)
            elif isinstance(value, (np.floating, float)):
                clean[key] = float(value) if np.isfinite(value) else None
            else:
                clean[key] = value
        out.append(clean)
    return out


def software_versions() -> dict:
    """Versions of voxtopo, Python and the libraries the numbers depend on."""
    import importlib.metadata as md
    versions = {"voxtopo": __version__, "python": platform.python_version()}
    for name in ("numpy", "scipy", "scikit-image", "gudhi", "numba", "tifffile", "pandas"):
        try:
            versions[name] = md.version(name)
        except md.PackageNotFoundError:
            versions[name] = None
    return versions


def summarise(scan: Scan, diagram: Diagram, options: AnalysisOptions, *, prepared=None,
              timings=None, notes=None, verdict: Verdict | None = None) -> dict:
    """The content of summary.json (the diagram's own description is added on save)."""
    prepared = prepared or scan
    threshold = options.persistence_floor
    most = diagram.most_persistent(10)
    top = {str(d): _records(most[most["dim"] == d]) for d in range(diagram.ndim)}
    judged = {}
    if verdict is not None:
        judged = {"significance" if verdict.flag == "significant" else "robustness":
                  verdict.description,
                  "counted": (f"{verdict.flag} features {verdict.level}"
                              if not options.keeps_all_tested else
                              "all pairs" if threshold == 0 else
                              f"pairs with persistence above {threshold:g}"),
                  "pairs_computed": {str(d): n for d, n in verdict.tested.counts().items()}}
    return {
        "voxtopo_version": __version__,
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "scan": scan.describe(),
        "analysed": prepared.describe(),
        "options": asdict(options),
        "counts": {str(d): n for d, n in diagram.counts(threshold).items()},
        **judged,
        "essential": {str(d): int(((diagram.pairs["dim"] == d)
                                   & ~np.isfinite(diagram.pairs["death"])).sum())
                      for d in range(diagram.ndim)},
        "most_persistent": top,
        "timings_seconds": {k: round(v, 4) for k, v in (timings or {}).items()},
        "preparation": notes or {},
        "software": software_versions(),
        "cautions": list(CAUTIONS),
    }


def write_result(out, scan: Scan, diagram: Diagram, options: AnalysisOptions | None = None, *,
                 prepared=None, timings=None, notes=None, force: bool = False,
                 verdict: Verdict | None = None) -> Path:
    """Write pairs.csv, summary.json and the standard plots into ``out``, atomically.

    With a ``verdict`` the plots show every tested pair and the threshold (a band along
    the diagonal, a line on the lifetime histograms); pairs.csv holds ``diagram``."""
    from .report.html import write_report
    from .report.plots import save_standard_plots

    options = options or AnalysisOptions()
    timings = dict(timings or {})
    start = time.perf_counter()
    with result_folder(out, force=force) as tmp:
        summary = summarise(scan, diagram, options, prepared=prepared, timings=timings,
                            notes=notes, verdict=verdict)
        (tmp / "summary.json").write_text(json.dumps(summary, indent=2, allow_nan=False))
        diagram.save(tmp)
        if verdict is None or not verdict.tested_any:
            summary["plots"] = save_standard_plots(diagram, tmp)
        else:
            summary["plots"] = save_standard_plots(verdict.tested, tmp,
                                                   thresholds=verdict.thresholds,
                                                   flag=verdict.flag)
        summary["timings_seconds"]["write"] = round(time.perf_counter() - start, 4)
        summary["diagram"] = diagram.description()
        (tmp / "summary.json").write_text(json.dumps(summary, indent=2, allow_nan=False))
        write_report(tmp)
    return Path(out)
