"""The periodicity job: a time-lapse in, a result folder out (what `voxtopo periodicity`
runs, and what the plugin and the batch runner call).

``PeriodicityOptions`` holds the settings in the user's words, ``run`` computes a
``PeriodicityResult``, ``write`` fills a result folder through ``io.result_folder``.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from ..diagram import VOXEL_INDEX
from ..errors import InputError
from ..options import BOOLEAN, COUNT, NUMBER, POSITIVE, TEXT, WHOLE, Rule, check, optional
from ..io import result_folder, save_tiff
from ..io.results import write_summary
from ..memory import ensure_fits
from ..scan import FRAME, Scan, TimeLapse
from ..periodicity import (COLUMNS, FieldRhythm, Method, Signals, band_in_frames, detrend,
                           field_rhythm, measure, normalise, pixel_signals, region_signals,
                           rips_bars, sliding_windows, tile_signals)

#: Said in every summary and report of this job.
RESEARCH_CAUTION = ("Results support research on rhythms in time-lapse images; they are not a "
                    "medical diagnosis nor a certification of a part, material or structure; "
                    "defer to local codes and licensed practice for such decisions.")

#: Points per sliding-window cloud: small clouds keep per-pixel maps fast; tiles and
#: regions are few, so they get clouds twice as dense (a finer score).
PIXEL_POINTS = 30
REGION_POINTS = 60

#: Bytes per trace value held at once while measuring (traces, detrended, normalised,
#: spectra of a batch; generous).
BYTES_PER_VALUE = 48


@dataclass(frozen=True)
class PeriodicityOptions:
    """Settings of a periodicity run; the defaults are those of `voxtopo periodicity`.

    Attributes
    ----------
    periods : (float, float) or None
        Shortest and longest period searched, in seconds (in frames when the time-lapse
        has no frame interval). None: from 2 frames to half the duration.
    bin : int
        Per-pixel maps of ``bin`` x ``bin`` pixel blocks (1: every pixel).
    tiles : int or None
        Instead of pixels: the frame cut into ``tiles`` parts along each axis.
    regions : path, ndarray or None
        Instead of pixels: a label image of the frame's shape (0 background).
    surrogates : int
        Surrogates per p-value (random phases, smoothed spectrum) (0: no p-values).
    significance : float
        Level alpha at which a p-value is significant.
    points : int or None
        Points per sliding-window cloud (None: 30 for pixels, 60 for tiles and regions).
    whole_field : bool
        Also measure the rhythm of the whole field (PCA of the frames, H1 and H2).
    top : int
        Regions (tiles, pixels) with the highest score shown with trace, cloud, barcode.
    seed : int
        Seed of the surrogates.
    """

    periods: tuple[float, float] | None = None
    bin: int = 1
    tiles: int | None = None
    regions: str | Path | np.ndarray | None = None
    surrogates: int = 99
    significance: float = 0.05
    points: int | None = None
    whole_field: bool = True
    top: int = 3
    seed: int = 0

    def __post_init__(self):
        check(asdict(self) | {"regions": self.regions}, PERIODICITY_RULES,
              "the periodicity options")
        _check_options(self)

    def described(self) -> dict:
        """The options as JSON values (a regions array by its shape)."""
        values = asdict(self)
        if isinstance(self.regions, np.ndarray):
            values["regions"] = f"label array of shape {list(self.regions.shape)}"
        elif self.regions is not None:
            values["regions"] = str(self.regions)
        values["periods"] = list(self.periods) if self.periods else None
        return values


@dataclass(frozen=True)
class PeriodicityResult:
    """What ``run`` computed; ``write`` puts it into a folder."""

    lapse: dict
    options: PeriodicityOptions
    method: Method
    signals: Signals
    table: pd.DataFrame
    mean_frame: np.ndarray
    spacing: tuple[float, ...]
    unit: str
    time_unit: str
    frame_interval: float
    whole_field: FieldRhythm | None
    top: list[dict]
    seconds: dict
    notes: list[str] = field(default_factory=list)

    @property
    def counts(self) -> dict:
        """How many signals were measured, significant, flat; with the sentence that says
        what the count counts."""
        measured = int((~self.table["flat"]).sum())
        significant = int(self.table["significant"].sum())
        ndim = self.signals.owner.ndim
        cell = "pixel" if ndim == 2 else "voxel"
        word = {"pixel": f"{cell}s" if self.signals.bin == 1 else
                " x ".join([str(self.signals.bin)] * ndim) + f" {cell} bins",
                "tile": "tiles", "region": "regions"}[self.signals.kind]
        if self.method.surrogates > 0:
            null = ("surrogates pooled over the signals, each made from a randomly chosen "
                    "one" if self.method.pooled else "surrogates of each signal")
            statement = (f"{significant} significant of {len(self.table)} {word} at alpha "
                         f"{self.method.alpha:g} (surrogate test: random phases, smoothed "
                         f"spectrum, {self.method.surrogates} {null}, per signal, not "
                         f"corrected for multiple testing)")
        else:
            statement = (f"{len(self.table)} {word} scored; no p-values (0 surrogates), so "
                         f"none is called significant")
        return {"signals": len(self.table), "measured": measured,
                "flat": int(self.table["flat"].sum()), "significant": significant,
                "alpha": self.method.alpha, "statement": statement}


def _check_options(options: PeriodicityOptions) -> None:
    chosen = [name for name, on in (("bin", options.bin != 1), ("tiles", options.tiles),
                                    ("regions", options.regions is not None)) if on]
    if len(chosen) > 1:
        raise InputError(f"{' and '.join(chosen)} were both given but choose the same thing "
                         f"(what a signal averages over); give only one of --bin, --tiles "
                         f"and --regions.")
    if not isinstance(options.top, int) or options.top < 0:
        raise InputError(f"top must be a whole number, 0 or more, got {options.top!r}.")


def _check_frames(lapse: TimeLapse) -> None:
    data = lapse.data
    if data.dtype.kind not in "biuf":
        raise InputError(f"{lapse.source or 'The time-lapse'} holds {data.dtype} values; it "
                         f"needs numbers.")
    if data.dtype.kind == "f":
        bad = np.flatnonzero(~np.isfinite(data.reshape(lapse.frames, -1)).all(axis=1))
        if len(bad):
            listed = ", ".join(map(str, bad[:5])) + (" ..." if len(bad) > 5 else "")
            raise InputError(f"{lapse.source or 'The time-lapse'} has NaN or infinite values "
                             f"in frame{'s' if len(bad) > 1 else ''} {listed} (of "
                             f"{lapse.frames}, numbered from 0); drop or fill those frames "
                             f"first.")


def _signals(lapse: TimeLapse, options: PeriodicityOptions) -> Signals:
    if options.regions is not None:
        if isinstance(options.regions, np.ndarray):
            labels, where = options.regions, "The regions array"
        else:
            from ..io import load
            labels, where = load(options.regions).data, f"The regions image {options.regions}"
        return region_signals(lapse.data, labels, source=where)
    if options.tiles is not None:
        return tile_signals(lapse.data, options.tiles)
    return pixel_signals(lapse.data, options.bin)


def _period_range(value) -> bool:
    return (isinstance(value, (list, tuple)) and len(value) == 2
            and all(POSITIVE.accepts(v) for v in value) and value[0] < value[1])


#: What each field of PeriodicityOptions accepts (settings files are checked against it).
PERIODICITY_RULES = {
    "periods": optional(Rule(_period_range, "two positive numbers, the shorter first")),
    "bin": COUNT, "tiles": optional(COUNT),
    "regions": Rule(lambda v: v is None or TEXT.accepts(v) or isinstance(v, (Path, np.ndarray)),
                    "a label image file"),
    "surrogates": WHOLE,
    "significance": Rule(lambda v: NUMBER.accepts(v) and 0 < v < 1,
                         "a level between 0 and 1, such as 0.05"),
    "points": optional(COUNT), "whole_field": BOOLEAN, "top": WHOLE, "seed": WHOLE,
    "workers": optional(COUNT),
}

#: The settings class of this job, under the name every job uses.
Options = PeriodicityOptions


def run(lapse: TimeLapse, options: PeriodicityOptions | None = None,
        progress=None) -> PeriodicityResult:
    """Measure the rhythms of a time-lapse.

    Parameters
    ----------
    lapse : TimeLapse
        From :func:`voxtopo.io.load_timelapse`.
    options : PeriodicityOptions, optional
        The settings; the defaults of ``voxtopo periodicity`` without one.
    progress : callable, optional
        ``progress(phase, fraction)``; may raise :class:`~voxtopo.Cancelled`.

    Returns
    -------
    PeriodicityResult
        The signals and their table (score, period, p_value, significant, ... per
        signal), the mean frame, the whole-field rhythm (or None), the top signals'
        traces and bars, the units and the timings.

    Raises
    ------
    InputError
        One frame, fewer frames than two periods, NaN frames, a regions image of another
        shape, options that contradict each other.
    """
    options = options or PeriodicityOptions()
    _check_options(options)
    report = progress or (lambda phase, fraction: None)
    started = time.perf_counter()
    band_in_frames(options.periods, lapse.frames, lapse.frame_interval, lapse.time_unit)
    _check_frames(lapse)
    if options.regions is None:
        spatial = lapse.spatial_shape
        count = (options.tiles ** len(spatial) if options.tiles else
                 int(np.prod([-(-n // max(int(options.bin), 1)) for n in spatial])))
        ensure_fits(count * lapse.frames * BYTES_PER_VALUE,
                    f"Measuring {count} signals of {lapse.frames} frames",
                    "bin the pixels (--bin N), use tiles or regions, or crop the frames")
    signals = _signals(lapse, options)
    report("signals", 1.0)
    pixels = signals.kind == "pixel"
    method = Method(periods=options.periods,
                    points=options.points or (PIXEL_POINTS if pixels else REGION_POINTS),
                    surrogates=options.surrogates, alpha=options.significance,
                    pooled=pixels, seed=options.seed)
    timings = {"signals": time.perf_counter() - started}
    table = measure(signals.traces, lapse.frame_interval, method, lapse.time_unit, report)
    timings["scores and p-values"] = time.perf_counter() - started - timings["signals"]
    table = pd.concat([_positions(signals, lapse), table], axis=1)
    notes = []
    rhythm = None
    if options.whole_field:
        mark = time.perf_counter()
        report("whole-field rhythm", 0.0)
        try:
            rhythm = field_rhythm(lapse.data, lapse.frame_interval, options.periods,
                                  time_unit=lapse.time_unit, seed=options.seed)
        except InputError as error:
            notes.append(f"Whole-field rhythm not measured: {error}")
        report("whole-field rhythm", 1.0)
        timings["whole-field rhythm"] = time.perf_counter() - mark
    top = _top(signals, table, method, options.top, lapse.frame_interval)
    if lapse.time_unit == FRAME:
        notes.append("The time-lapse gives no frame interval, so periods are in frames and "
                     "damping in 1/frame; give --frame-interval SECONDS for seconds.")
    timings["total"] = time.perf_counter() - started
    return PeriodicityResult(
        lapse=lapse.describe(), options=options, method=method, signals=signals,
        table=table, mean_frame=lapse.data.mean(axis=0, dtype=np.float64).astype(np.float32),
        spacing=lapse.spacing, unit=lapse.unit, time_unit=lapse.time_unit,
        frame_interval=lapse.frame_interval, whole_field=rhythm, top=top,
        seconds={k: round(v, 3) for k, v in timings.items()}, notes=notes)


def _positions(signals: Signals, lapse: TimeLapse) -> pd.DataFrame:
    """Label, centre in the scan's unit and as a (fractional) voxel index, and size of
    every signal."""
    names = "zyx"[3 - signals.centres.shape[1]:]
    columns = {"region": signals.labels}
    for k, name in enumerate(names):
        columns[f"centre_{name}"] = signals.centres[:, k] * lapse.spacing[k]
    for k, name in enumerate(names):
        columns[f"centre_voxel_{name}"] = signals.centres[:, k]
    columns["pixels"] = signals.sizes
    return pd.DataFrame(columns)


def _top(signals: Signals, table: pd.DataFrame, method: Method, count: int,
         frame_interval: float) -> list[dict]:
    """The highest-scoring signals with their trace, cloud and H1 bars, for the plots."""
    if count == 0:
        return []
    order = table["score"].fillna(-1).to_numpy().argsort(kind="stable")[::-1]
    chosen = [i for i in order[:count] if not table["flat"].iloc[i]]
    out = []
    for i in chosen:
        trace = signals.traces[i]
        cloud, bars = _cloud_and_bars(trace, table["period"].iloc[i], method, frame_interval)
        out.append({"row": int(i), "region": int(table["region"].iloc[i]), "trace": trace,
                    "cloud": cloud, "bars": bars, "score": float(table["score"].iloc[i]),
                    "period": float(table["period"].iloc[i]),
                    "p_value": float(table["p_value"].iloc[i])})
    return out


def _cloud_and_bars(trace: np.ndarray, period: float, method: Method,
                    frame_interval: float) -> tuple[np.ndarray, np.ndarray]:
    """The sliding-window cloud of one trace at its period, and its H1 bars over Z/2."""
    z, _ = normalise(detrend(trace[None], method.detrend_degree))
    period_frames = np.array([period / frame_interval])
    cloud = sliding_windows(z, period_frames, method.points, method.dimension)[0]
    return cloud, rips_bars(cloud, fields=(2,))[(2, 1)]


def signal_bars(result: PeriodicityResult, row: int) -> np.ndarray:
    """The H1 bars over Z/2 of one signal's sliding-window cloud, as the plots of the top
    signals draw them.

    Parameters
    ----------
    result : PeriodicityResult
        What :func:`run` returned.
    row : int
        The signal's row in ``result.table``.

    Returns
    -------
    ndarray, shape (n, 2)
        Birth and death of each bar; none for a flat signal (no period to embed at).
    """
    table = result.table
    if table["flat"].iloc[row]:
        return np.zeros((0, 2))
    return _cloud_and_bars(result.signals.traces[row], table["period"].iloc[row],
                           result.method, result.frame_interval)[1]


def describe(result: PeriodicityResult) -> str:
    """What was found, in the words of the CLI line and the plugin's status.

    Parameters
    ----------
    result : PeriodicityResult
        What :func:`run` returned.

    Returns
    -------
    str
        The count of significant regions with the test and level, and the whole field's
        score and period (in the time unit) when it was measured.
    """
    line = result.counts["statement"]
    if result.whole_field is not None:
        line += (f"; whole field: score {result.whole_field.score:.3f}, period "
                 f"{result.whole_field.period:.4g} {result.time_unit}")
    return line


def write(result: PeriodicityResult, out, force: bool = False) -> Path:
    """Fill the result folder ``out``: score.tif, period.tif, regions.csv, summary.json,
    plots and report.html. The folder appears whole or not at all.

    Parameters
    ----------
    result : PeriodicityResult
        What :func:`run` returned.
    out : str or Path
        The result folder to create.
    force : bool
        Replace ``out`` when it is a result folder voxtopo wrote.

    Returns
    -------
    Path
        ``out``.
    """
    from ..report.periodicity import save_periodicity_plots, write_periodicity_report

    with result_folder(out, force=force) as folder:
        signals, table = result.signals, result.table
        for name, column in (("score", "score"), ("period", "period")):
            painted = signals.paint(table[column].to_numpy())
            save_tiff(Scan(painted, spacing=result.spacing, unit=result.unit,
                           source=f"{name} map"), folder / f"{name}.tif")
        table.to_csv(folder / "regions.csv", index=False, float_format="%.8g")
        plots = save_periodicity_plots(folder, result)
        summary = _summary(result, plots)
        write_summary(folder, summary)
        write_periodicity_report(folder, summary)
    return Path(out)


def _summary(result: PeriodicityResult, plots: list[str]) -> dict:
    from .. import __version__
    from ..io.results import software_versions

    time_unit, unit = result.time_unit, result.unit
    value_unit = "gray value (mean intensity)"
    meanings = {"region": {"pixel": "number of the pixel (bin) in row-major order",
                           "tile": "number of the tile in row-major order",
                           "region": "label in the regions image"}[result.signals.kind]}
    units = {"region": ""}
    names = "zyx"[3 - result.signals.centres.shape[1]:]
    for name in names:
        meanings[f"centre_{name}"] = f"centre along {name}"
        units[f"centre_{name}"] = unit
    for name in names:
        meanings[f"centre_voxel_{name}"] = f"centre along {name}, a (fractional) voxel index"
        units[f"centre_voxel_{name}"] = VOXEL_INDEX
    meanings["pixels"], units["pixels"] = "pixels averaged into the signal", ""
    for name, text in COLUMNS.items():
        meanings[name] = text.format(time=time_unit, value=value_unit)
        units[name] = COLUMN_UNITS.get(name, "").format(time=time_unit, value=value_unit)
    meanings["period"] = f"{time_unit} (highest periodogram peak in the period range)"
    table = result.table
    top_rows = [{k: row[k] for k in ("region", "score", "period", "p_value")}
                for row in result.top]
    period_range = result.method.periods or ("2 frames", "half the duration")
    return {
        "tool": "voxtopo periodicity",
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "scan": result.lapse,
        "options": result.options.described(),
        "counts": result.counts,
        "columns": {"regions.csv": units},
        "column_meanings": {"regions.csv": meanings},
        "maps": {"score.tif": f"score of the signal each pixel belongs to, spacing in {unit}; "
                              f"NaN outside every region and where the trace is flat",
                 "period.tif": f"period in {time_unit}, same layout"},
        "method": {"signals": result.signals.kind, "bin": result.signals.bin,
                   "period_range": list(period_range), "time_unit": time_unit,
                   "frame_interval": result.frame_interval,
                   "detrend": f"least-squares polynomial of degree "
                              f"{result.method.detrend_degree}, then unit standard deviation",
                   "embedding": f"sliding windows of {result.method.dimension + 1} samples "
                                f"spanning period x {result.method.dimension}/"
                                f"{result.method.dimension + 1}, centred and normalised; "
                                f"{result.method.points} max-min points per cloud",
                   "persistence": "Vietoris-Rips H1 (gudhi) over Z/2 (score) and Z/3 "
                                  "(score_z3)",
                   "score": "longest H1 bar / sqrt(3) (SW1PerS)",
                   "p_value": "(1 + #{surrogate >= observed}) / (1 + N), surrogates with the "
                              "signal's periodogram smoothed by a running median and random "
                              "phases",
                   "surrogates": result.method.surrogates,
                   "null": "pooled over the signals" if result.method.pooled else
                           "per signal",
                   "alpha": result.method.alpha},
        "summary_of_signals": {
            "median_score": _number(table["score"].median()),
            "median_period_of_significant": _number(
                table.loc[table["significant"], "period"].median()),
        },
        "top_regions": top_rows,
        "whole_field": result.whole_field.summary() if result.whole_field else None,
        "plots": plots,
        "timings_seconds": result.seconds,
        "notes": result.notes,
        "software": {"voxtopo": __version__, **software_versions()},
        "cautions": [RESEARCH_CAUTION],
    }


#: Unit of each measured column of regions.csv ("" for scores, p-values and flags).
COLUMN_UNITS = {"period": "{time}", "amplitude": "{value}", "damping": "1/{time}"}


def _number(value):
    value = float(value)
    return value if np.isfinite(value) else None
