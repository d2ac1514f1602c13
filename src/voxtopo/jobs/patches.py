"""The patches job: the whole patch-space workflow into one result folder (what
`voxtopo patches`, the plugin and the batch runner run).

Which loops are real: every bar of dimension 1 and up of a Rips diagram gets a p-value
under the universal null distribution of Bobrowski & Skraba 2023
(:func:`voxtopo.significance.rips_significance`, Bonferroni over the bars of its dimension
and field), and the dominant loop is rerun on ``resamples`` other samplings of the patch
positions (:func:`voxtopo.significance.dominant_loop_stability`): in how many of them the
loop of largest death / birth is again significant.
"""

from __future__ import annotations

import platform
import time
from dataclasses import asdict, dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from .. import significance as sig
from ..io import result_folder
from ..io.results import check_target, json_ready, write_summary
from ..options import (BOOLEAN, COUNT, PERCENT, POSITIVE, PRIME, WHOLE, Rule, check, one_of,
                       optional)
from ..patches import core, persistence, sample
from ..patches._rips import RESEARCH_CAUTION


@dataclass(frozen=True)
class PatchOptions:
    """Settings of a patch-space run; the defaults are those of `voxtopo patches`.

    The defaults were chosen on scikit-image's gravel photograph, where with them the dense
    core of high-contrast 3 x 3 patches has one dominant loop, the primary circle (see
    tests/test_patches.py for the margin): 30 000 random positions, log intensities, the
    top 20 percent by contrast, the densest 10 percent by the distance to the 30th
    neighbour, 150 max-min landmarks, Rips up to dimension 2 over Z/2.

    significance    family-wise level alpha of the universal-null test of each bar
    resamples       reruns with the sampling seeds seed + 1, ..., seed + resamples that
                    say how stable the dominant loop is (0 = none)
    """

    k: int = 3
    contrast_percent: float = 20.0
    positions: int | str = 30000
    seed: int = 0
    log: bool = True
    axis: int | str | None = None
    slices: tuple[int, ...] | None = None
    k_neighbour: int = 30
    density_percent: float = 10.0
    landmarks: int | None = 150
    fields: tuple[int, ...] = (2,)
    max_edge: float | None = None
    method: str = "rips"
    max_dimension: int = 2
    significance: float = 0.05
    resamples: int = 3

    def __post_init__(self):
        check(asdict(self), PATCH_RULES, "the patches options")


def _whole_numbers(value) -> bool:
    return isinstance(value, (list, tuple)) and len(value) > 0 and all(
        WHOLE.accepts(v) for v in value)


#: What each field of PatchOptions accepts (settings files are checked against it).
PATCH_RULES = {
    "k": one_of(3, 5, 7),
    "contrast_percent": PERCENT,
    "positions": Rule(lambda v: COUNT.accepts(v) or v == "all",
                      "a whole number, 1 or more, or \"all\""),
    "seed": WHOLE,
    "log": BOOLEAN,
    "axis": optional(Rule(lambda v: WHOLE.accepts(v) or v in ("z", "y", "x"),
                          "\"z\", \"y\", \"x\" or an axis number")),
    "slices": optional(Rule(_whole_numbers, "a list of slice numbers")),
    "k_neighbour": COUNT,
    "density_percent": PERCENT,
    "landmarks": optional(COUNT),
    "fields": Rule(lambda v: isinstance(v, (list, tuple)) and 0 < len(v)
                   and all(PRIME.accepts(p) for p in v), "a list of primes such as [2, 3]"),
    "max_edge": optional(POSITIVE),
    "method": one_of("rips", "witness"),
    "max_dimension": one_of(0, 1, 2),
    "significance": Rule(lambda v: isinstance(v, (int, float)) and not isinstance(v, bool)
                         and 0 < v < 1, "a level between 0 and 1, such as 0.05"),
    "resamples": WHOLE,
}


#: The settings class of this job, under the name every job uses.
Options = PatchOptions


@dataclass
class PatchesResult:
    """What :func:`run` computed: the cloud, its core, the landmark persistence, its bars
    with ``p_value`` and ``significant`` (``tested``) and the dominant loop's stability
    over resamples (None when none were asked for or the complex is not Rips)."""

    cloud: object
    dense: object
    core_index: np.ndarray
    persistence: object
    options: PatchOptions
    k_neighbour: int
    seconds: float
    sources: list = field(default_factory=list)
    tested: pd.DataFrame | None = None
    stability: dict | None = None


def _items(images_or_scans) -> list:
    return (list(images_or_scans) if isinstance(images_or_scans, (list, tuple))
            else [images_or_scans])


def run(images_or_scans, options: PatchOptions | None = None, progress=None,
        mask=None) -> PatchesResult:
    """Sample the high-contrast patches of one or more images, keep the dense core and
    compute the persistence of its landmarks.

    Parameters
    ----------
    images_or_scans : ndarray, Scan, or a list of them
        Gray 2D images or 3D scans (3D scans give patches from the slices
        ``options.axis`` and ``options.slices`` choose).
    options : PatchOptions, optional
        The settings; the defaults of ``voxtopo patches`` without one.
    progress : callable(phase, fraction), optional
        Called as the work goes on; may raise :class:`~voxtopo.Cancelled`.
    mask : ndarray of bool or a list of them, optional
        True where an image must not be used; patches touching it are left out. One per
        input, of its shape.

    Returns
    -------
    PatchesResult
        The cloud, its dense core, the landmark persistence, its bars with ``p_value`` and
        ``significant``, and the dominant loop's stability over resamples.

    Raises
    ------
    InputError
        Images that give too few high-contrast patches, or options that contradict each
        other.
    """
    options = options or PatchOptions()
    items = _items(images_or_scans)
    report = progress or (lambda phase, fraction: None)
    started = time.perf_counter()
    cloud, dense, core_index, bars, keep_n = _sample_and_sweep(images_or_scans, options,
                                                               report, mask)
    tested = _tested_bars(bars.pairs, options)
    stability = _loop_stability(images_or_scans, options, report, mask)
    return PatchesResult(cloud, dense, core_index, bars, options, keep_n,
                         time.perf_counter() - started,
                         [getattr(item, "source", None) for item in items], tested, stability)


def _sample_and_sweep(images_or_scans, options: PatchOptions, report, mask):
    """The cloud, its dense core (and where it sits in the cloud), the landmark
    persistence and the neighbour count used."""
    report("sampling patches", 0.0)
    cloud = sample(images_or_scans, options.k, axis=options.axis,
                   slices=options.slices, positions=options.positions, seed=options.seed,
                   log=options.log, mask=mask, contrast_percent=options.contrast_percent)
    report("sampling patches", 1.0)
    report("density core", 0.0)
    keep_n = min(options.k_neighbour, len(cloud) - 1)
    dense = core(cloud, k_neighbour=keep_n, density_percent=options.density_percent)
    core_index = _core_indices(cloud, dense)
    report("density core", 1.0)
    report("landmark persistence", 0.0)
    bars = persistence(dense, landmarks=options.landmarks,
                       max_dimension=options.max_dimension, field=options.fields,
                       max_edge=options.max_edge, method=options.method, seed=options.seed)
    report("landmark persistence", 1.0)
    return cloud, dense, core_index, bars, keep_n


def _tested_bars(pairs: pd.DataFrame, options: PatchOptions) -> pd.DataFrame:
    """The bars with ``p_value`` and ``significant``, each field tested on its own. The
    universal null is that of Rips complexes: witness bars are listed untested (empty)."""
    if options.method != "rips":
        out = pairs.copy()
        out["p_value"] = np.nan
        out["significant"] = pd.array([pd.NA] * len(out), dtype="boolean")
        return out
    tested = [sig.rips_significance(pairs[pairs["field"] == f], options.significance)
              for f in options.fields]
    return pd.concat(tested).loc[pairs.index]


def _loop_stability(images_or_scans, options: PatchOptions, report, mask) -> dict | None:
    """:func:`voxtopo.significance.dominant_loop_stability` over ``options.resamples``
    samplings with other seeds, over the first field."""
    if options.resamples == 0 or options.method != "rips":
        return None
    first_field = options.fields[0]

    def loops_of(seed):
        report(f"resample with seed {seed}", 0.0)
        rerun = _sample_and_sweep(images_or_scans, replace(options, seed=seed),
                                  lambda phase, fraction: None, mask)[3].pairs
        return rerun[rerun["field"] == first_field]

    seeds = range(options.seed + 1, options.seed + 1 + options.resamples)
    stability = sig.dominant_loop_stability(loops_of, seeds, options.significance)
    return {**stability, "field": first_field,
            "what": "resamples of the patch positions (sampling seeds) in which the loop "
                    "of largest death / birth is significant"}


def write(result: PatchesResult, out, force: bool = False) -> Path:
    """Write ``cloud.npy`` (DCT coordinates of every high-contrast patch), ``cloud.json``
    (parameters and source images), ``cloud_patches.npy``, ``cloud_origin.npy``,
    ``core.npy`` and ``landmarks.npy`` (indices into the cloud), ``pairs.csv`` (``dim,
    birth, death, persistence, field, p_value, significant``), ``summary.json`` (with
    ``significance`` and ``dominant_loop_stability``), ``barcode.png``,
    ``diagram.png``, ``projection.png``, ``loop_gallery.png`` and ``report.html``. The
    folder appears only when complete.

    Parameters
    ----------
    result : PatchesResult
        What :func:`run` returned.
    out : str or Path
        The result folder to create; it may not be nor hold the source images.
    force : bool
        Replace ``out`` when it is a result folder voxtopo wrote.

    Returns
    -------
    Path
        ``out``.
    """
    from ..report.html import write_report
    from ..report.patches import save_patch_plots

    bars = result.persistence
    with result_folder(out, force=force, inputs=result.sources) as folder:
        result.cloud.save(folder)
        np.save(folder / "core.npy", result.core_index)
        np.save(folder / "landmarks.npy", result.core_index[bars.landmarks])
        result.tested.to_csv(folder / "pairs.csv", index=False, float_format="%.10g")
        save_patch_plots(folder, result.cloud, result.dense, bars)
        summary = _summary(result.cloud, result.dense, bars, result.options,
                           result.k_neighbour, result.seconds)
        summary.update(_verdict(result))
        write_summary(folder, summary)
        write_report(folder)
    return Path(out)


def describe(result: PatchesResult) -> str:
    """What was found, in the words of the CLI line and the plugin's status.

    Parameters
    ----------
    result : PatchesResult
        What :func:`run` returned.

    Returns
    -------
    str
        Per coefficient field, the Betti numbers at the middle scale and how far the
        longest loop stands out; the numbers of core patches and landmarks; for a Rips
        complex the significant loops (universal null, Bonferroni, alpha); and the
        dominant loop's stability over resamples when it was measured; joined by "; ".
    """
    bars = result.persistence
    lines = []
    for f in bars.fields:
        margin = bars.margin(f)
        lines.append(f"Z/{f}: Betti numbers {bars.betti[f]} at scale "
                     f"{bars.middle_scale:.3g}; longest loop {margin['longest']:.3g}, "
                     f"{margin['ratio']:.2f} times the second")
    lines.append(f"{len(result.dense)} core patches, {len(bars.landmarks)} landmarks")
    if result.options.method == "rips":
        tested = result.tested
        for f in bars.fields:
            loops = tested[(tested["field"] == f) & (tested["dim"] == 1)]
            lines.append(f"{int(loops['significant'].sum())} significant loop of "
                         f"{len(loops)} over Z/{f} (universal null, Bonferroni, alpha "
                         f"{result.options.significance:g})")
    if result.stability is not None:
        lines.append(f"the dominant loop is significant in {result.stability['dominant']} of "
                     f"{result.stability['reruns']} resamples")
    return "; ".join(lines)


def _verdict(result: PatchesResult) -> dict:
    """summary.json entries: the test of the bars and the dominant loop's stability."""
    tested = result.tested
    verdict = {"significance": {
        "method": sig.UNIVERSAL_NULL if result.options.method == "rips" else
        "not tested (the universal null is that of Rips complexes)",
        "alpha": result.options.significance,
        "tested": "bars of dimension 1 and up that are born after 0 and die; each field "
                  "and dimension on its own",
        "significant": {str(f): {str(d): int(tested[(tested["field"] == f)
                                                    & (tested["dim"] == d)]
                                             ["significant"].sum())
                                 for d in range(1, result.options.max_dimension + 1)}
                        for f in result.persistence.fields}}}
    if result.stability is not None:
        verdict["dominant_loop_stability"] = json_ready(result.stability)
    return verdict


def analyse(images_or_scans, out, options: PatchOptions | None = None, force: bool = False,
            progress=None, mask=None):
    """:func:`run` then :func:`write`; returns the core Patches and the PatchPersistence.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from skimage import data
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "gravel"
    >>> options = PatchOptions(positions=4000, landmarks=40, max_dimension=1)
    >>> dense, bars = analyse([data.gravel()], out, options)
    >>> sorted(bars.pairs["dim"].unique().tolist())
    [0, 1]
    """
    check_target(out, force, inputs=[getattr(i, "source", None) for i in
                                     _items(images_or_scans)])
    result = run(images_or_scans, options, progress, mask)
    report = progress or (lambda phase, fraction: None)
    report("writing results", 0.0)
    write(result, out, force)
    report("writing results", 1.0)
    return result.dense, result.persistence


def _core_indices(cloud, dense) -> np.ndarray:
    """Where each core point sits in the cloud (origins are unique per patch)."""
    keys = {tuple(row): i for i, row in enumerate(cloud.origin.tolist())}
    return np.array([keys[tuple(row)] for row in dense.origin.tolist()], dtype=np.int64)


#: Column -> unit of pairs.csv: births and deaths are Rips scales, Euclidean distances
#: between points of the cloud in DCT coordinates, which are unitless (unit sphere).
PAIRS_UNITS = {"dim": "", "birth": "distance in DCT coordinates (unitless)",
               "death": "distance in DCT coordinates (unitless)",
               "persistence": "distance in DCT coordinates (unitless)",
               "field": "", "p_value": "", "significant": ""}


def _summary(cloud, dense, result, options, k_neighbour, seconds) -> dict:
    from .. import __version__

    options_json = asdict(options)
    options_json["fields"] = list(options.fields)
    options_json["k_neighbour"] = k_neighbour
    cautions = list(result.cautions)
    if k_neighbour != options.k_neighbour:
        cautions.append(f"The cloud has only {len(cloud)} points, so k_neighbour was lowered "
                        f"from {options.k_neighbour} to {k_neighbour}.")
    return {
        "tool": "voxtopo patches",
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "sources": list(cloud.sources),
        "options": options_json,
        "counts": {**cloud.counts, "core": len(dense), "landmarks": len(result.landmarks)},
        "persistence": result.summary(),
        "loop": {"landmarks_on_cycle": int(max(len(result.loop) - 1, 0)),
                 "how": "shortest path between the ends of the longest loop's birth edge "
                        "through shorter landmark edges, closed by that edge"},
        "files": {"cloud.npy": "DCT coordinates of the high-contrast patches (unit sphere)",
                  "cloud_patches.npy": "the normalised patches (zero mean, unit D-norm)",
                  "cloud_origin.npy": "source, slice, row, column of each patch",
                  "core.npy": "indices of the dense core in cloud.npy",
                  "landmarks.npy": "indices of the landmarks in cloud.npy",
                  "pairs.csv": "dim, birth, death, persistence, field, p_value, "
                               "significant"},
        "columns": {"pairs.csv": PAIRS_UNITS},
        "seconds": round(seconds, 3),
        "software": {"voxtopo": __version__, "python": platform.python_version()},
        "cautions": cautions if RESEARCH_CAUTION in cautions else [RESEARCH_CAUTION] + cautions,
    }
