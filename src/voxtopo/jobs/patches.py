"""The patches job: the whole patch-space workflow into one result folder (what
`voxtopo patches`, the plugin and the batch runner run)."""

from __future__ import annotations

import platform
import time
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from ..io import result_folder
from ..io.results import check_target, write_summary
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
}


#: The settings class of this job, under the name every job uses.
Options = PatchOptions


@dataclass
class PatchesResult:
    """What :func:`run` computed: the cloud, its core and the landmark persistence."""

    cloud: object
    dense: object
    core_index: np.ndarray
    persistence: object
    options: PatchOptions
    k_neighbour: int
    seconds: float
    sources: list = field(default_factory=list)


def _items(images_or_scans) -> list:
    return (list(images_or_scans) if isinstance(images_or_scans, (list, tuple))
            else [images_or_scans])


def run(images_or_scans, options: PatchOptions | None = None, progress=None,
        mask=None) -> PatchesResult:
    """Sample the high-contrast patches of one or more images, keep the dense core and
    compute the persistence of its landmarks."""
    options = options or PatchOptions()
    items = _items(images_or_scans)
    report = progress or (lambda phase, fraction: None)
    started = time.perf_counter()
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
    return PatchesResult(cloud, dense, core_index, bars, options, keep_n,
                         time.perf_counter() - started,
                         [getattr(item, "source", None) for item in items])


def write(result: PatchesResult, out, force: bool = False) -> Path:
    """Write ``cloud.npy`` (DCT coordinates of every high-contrast patch), ``cloud.json``
    (parameters and source images), ``cloud_patches.npy``, ``cloud_origin.npy``,
    ``core.npy`` and ``landmarks.npy`` (indices into the cloud), ``pairs.csv`` (``dim,
    birth, death, persistence, field``), ``summary.json``, ``barcode.png``,
    ``diagram.png``, ``projection.png``, ``loop_gallery.png`` and ``report.html``. The
    folder appears only when complete."""
    from ..report.html import write_report

    bars = result.persistence
    with result_folder(out, force=force, inputs=result.sources) as folder:
        result.cloud.save(folder)
        np.save(folder / "core.npy", result.core_index)
        np.save(folder / "landmarks.npy", result.core_index[bars.landmarks])
        bars.pairs.to_csv(folder / "pairs.csv", index=False, float_format="%.10g")
        _figures(folder, result.cloud, result.dense, bars)
        summary = _summary(result.cloud, result.dense, bars, result.options,
                           result.k_neighbour, result.seconds)
        write_summary(folder, summary)
        write_report(folder)
    return Path(out)


def describe(result: PatchesResult) -> str:
    """What was found, in the words of the CLI line and the plugin's status."""
    bars = result.persistence
    lines = []
    for f in bars.fields:
        margin = bars.margin(f)
        lines.append(f"Z/{f}: Betti numbers {bars.betti[f]} at scale "
                     f"{bars.middle_scale:.3g}; longest loop {margin['longest']:.3g}, "
                     f"{margin['ratio']:.2f} times the second")
    lines.append(f"{len(result.dense)} core patches, {len(bars.landmarks)} landmarks")
    return "; ".join(lines)


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


def _figures(folder, cloud, dense, result) -> None:
    import matplotlib.pyplot as plt

    from ..report.plots import plot_barcode, plot_diagram
    from ..patches._plots import gallery_indices, plot_gallery, plot_projection

    for name, draw, width in (("barcode", plot_barcode, 6.4), ("diagram", plot_diagram, 5.2)):
        fig, axes = plt.subplots(1, len(result.fields), squeeze=False,
                                 figsize=(width * len(result.fields), 5.0),
                                 constrained_layout=True)
        for ax, f in zip(axes[0], result.fields):
            rows = result.pairs[result.pairs["field"] == f]
            title = f"{'Barcode' if name == 'barcode' else 'Persistence diagram'}, " \
                    f"{result.method} over Z/{f} (max edge {result.max_edge:.3g})"
            draw(rows, ax=ax, title=title)
            ax.set_xlabel("scale (distance in DCT coordinates)") if name == "barcode" else None
        fig.savefig(folder / f"{name}.png", dpi=110)
        plt.close(fig)
    fig, ax = plt.subplots(figsize=(5.6, 5.6), constrained_layout=True)
    plot_projection(cloud.coordinates, dense.coordinates, result, ax=ax)
    fig.savefig(folder / "projection.png", dpi=110)
    plt.close(fig)
    along = gallery_indices(result.loop)
    picked = result.landmarks[along]
    coords = dense.coordinates[picked]
    labels = [f"{np.degrees(np.arctan2(c[1], c[0])) % 360:.0f} deg" for c in coords]
    fig = plot_gallery(dense.patches[picked], labels,
                       "Patches along the longest loop (landmarks on its cycle; angle in "
                       "DCT coordinates 1-2)")
    fig.savefig(folder / "loop_gallery.png", dpi=110)
    plt.close(fig)


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
                  "pairs.csv": "dim, birth, death, persistence, field"},
        "seconds": round(seconds, 3),
        "software": {"voxtopo": __version__, "python": platform.python_version()},
        "cautions": cautions if RESEARCH_CAUTION in cautions else [RESEARCH_CAUTION] + cautions,
    }
