"""Plots and report.html of a periodicity result: score map, period histogram, the top
signals, the whole-field barcode, and the report drawn with the house templates."""

from __future__ import annotations

import base64
from pathlib import Path

import numpy as np
import pandas as pd

from .html import Table, render

__all__ = ["CAPTIONS", "RHYTHM", "plot_bars", "plot_trace", "save_periodicity_plots",
           "write_periodicity_report"]

#: What each plot of a periodicity folder shows, under it in the report.
CAPTIONS = {
    "score_map.png": "Score (0: no loop, 1: a round loop) over the mean frame; bright = "
                     "strongly periodic.",
    "period_histogram.png": "Periods of all measured signals (light) and of the significant "
                            "ones (dark).",
    "top_regions.png": "The highest-scoring signals: trace over time, sliding-window cloud "
                       "projected on its first two principal axes, and H1 barcode over Z/2.",
    "whole_field.png": "Whole-field rhythm: H1 and H2 barcodes of the sliding windows of the "
                       "frames after PCA.",
}

#: Our own colours: bars and traces, significant signals, the rest.
INK = "#2b2d42"
RHYTHM = "#c8553d"
QUIET = "#9aa0b4"


def _flat_view(image):
    """A 2D view of a map: itself, or the maximum over z of a 3D map."""
    image = np.asarray(image, dtype=np.float64)
    return np.nanmax(image, axis=0) if image.ndim == 3 and np.isfinite(image).any() \
        else (image.mean(axis=0) if image.ndim == 3 else image)


def plot_score_map(result, ax):
    mean = result.mean_frame
    mean = mean.mean(axis=0) if mean.ndim == 3 else mean
    score = result.signals.paint(result.table["score"].to_numpy())
    with np.errstate(all="ignore"):
        score = _flat_view(score)
    ny, nx = mean.shape
    dy, dx = result.spacing[-2:]
    extent = (0, nx * dx, ny * dy, 0)
    ax.imshow(mean, cmap="gray", extent=extent, interpolation="nearest")
    shown = ax.imshow(np.ma.masked_invalid(score), cmap="inferno", vmin=0, vmax=1, alpha=0.65,
                      extent=extent, interpolation="nearest")
    ax.set_xlabel(f"x ({result.unit})")
    ax.set_ylabel(f"y ({result.unit})")
    title = "Periodicity score over the mean frame"
    if result.mean_frame.ndim == 3:
        title += " (maximum over z)"
    ax.set_title(title, fontsize=10)
    return shown


def plot_period_histogram(result, ax):
    table = result.table
    periods = table["period"].to_numpy()
    finite = np.isfinite(periods)
    if not finite.any():
        ax.text(0.5, 0.5, "no signal varies over time", ha="center", transform=ax.transAxes)
        return
    bins = np.histogram_bin_edges(periods[finite], bins=30)
    ax.hist(periods[finite], bins=bins, color=QUIET, label="all measured")
    significant = finite & table["significant"].to_numpy()
    if significant.any():
        ax.hist(periods[significant], bins=bins, color=RHYTHM,
                label=f"significant at alpha {result.method.alpha:g}")
    ax.set_xlabel(f"period ({result.time_unit})")
    ax.set_ylabel("signals")
    ax.legend(frameon=False, fontsize=8)
    ax.set_title("Periods", fontsize=10)


def plot_bars(bars, ax, title: str, colour=INK):
    """Horizontal bars from birth to death, longest at the top."""
    bars = np.asarray(bars).reshape(-1, 2)
    for k, (birth, death) in enumerate(bars[:40]):
        ax.plot([birth, death], [k, k], color=colour, lw=2.2, solid_capstyle="butt")
    ax.set_ylim(max(len(bars[:40]), 1), -1)
    ax.set_yticks([])
    ax.set_xlabel("scale (distance on the unit sphere)")
    ax.set_title(title, fontsize=9)


def plot_trace(trace, frame_interval: float, time_unit: str, ax, title: str):
    """One signal's mean intensity over time."""
    time = np.arange(len(trace)) * frame_interval
    ax.plot(time, trace, color=INK, lw=1)
    ax.set_xlabel(f"time ({time_unit})")
    ax.set_ylabel("mean intensity")
    ax.set_title(title, fontsize=9)


def save_periodicity_plots(folder, result) -> list[str]:
    """Draw the plots of a periodicity result into ``folder``.

    Parameters
    ----------
    folder : Path
        The result folder being filled.
    result : PeriodicityResult
        What :func:`voxtopo.jobs.periodicity.run` returned.

    Returns
    -------
    list of str
        The files written, in the report's order: ``score_map.png``,
        ``period_histogram.png``, ``top_regions.png`` (when there are top signals) and
        ``whole_field.png`` (when the whole field was measured); :data:`CAPTIONS` says
        what each shows.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    folder = Path(folder)
    names = []
    fig, ax = plt.subplots(figsize=(6.0, 5.2), constrained_layout=True)
    shown = plot_score_map(result, ax)
    fig.colorbar(shown, ax=ax, label="score (longest H1 bar / sqrt 3)")
    fig.savefig(folder / "score_map.png", dpi=110)
    plt.close(fig)
    names.append("score_map.png")

    fig, ax = plt.subplots(figsize=(5.6, 4.0), constrained_layout=True)
    plot_period_histogram(result, ax)
    fig.savefig(folder / "period_histogram.png", dpi=110)
    plt.close(fig)
    names.append("period_histogram.png")

    if result.top:
        fig, axes = plt.subplots(len(result.top), 3, figsize=(12, 3.0 * len(result.top)),
                                 squeeze=False, constrained_layout=True)
        for row, item in zip(axes, result.top):
            plot_trace(item["trace"], result.frame_interval, result.time_unit, row[0],
                       f"{result.signals.kind} {item['region']}: period "
                       f"{item['period']:.3g} {result.time_unit}")
            cloud = item["cloud"] - item["cloud"].mean(axis=0)
            axes_2d = np.linalg.svd(cloud, full_matrices=False)[2][:2]
            flat = cloud @ axes_2d.T
            row[1].scatter(flat[:, 0], flat[:, 1], s=10, color=RHYTHM)
            row[1].set_aspect("equal")
            row[1].set_title("sliding-window cloud (first two principal axes)", fontsize=9)
            p_text = "no p-value" if not np.isfinite(item["p_value"]) else \
                f"p = {item['p_value']:.3g}"
            plot_bars(item["bars"], row[2], f"H1 over Z/2: score {item['score']:.3f}, "
                                            f"{p_text}")
        fig.savefig(folder / "top_regions.png", dpi=100)
        plt.close(fig)
        names.append("top_regions.png")

    rhythm = result.whole_field
    if rhythm is not None:
        fig, axes = plt.subplots(1, 2, figsize=(10, 3.8), constrained_layout=True)
        pairs = rhythm.pairs[rhythm.pairs["field"] == rhythm.pairs["field"].min()]
        loops = pairs[(pairs["dim"] == 1) & (pairs["max_edge"] == pairs["max_edge"].max())]
        shells = pairs[pairs["dim"] == 2]
        for ax, rows, title in ((axes[0], loops, "whole field: H1 over Z/2"),
                                (axes[1], shells, "whole field: H2 over Z/2")):
            rows = rows.sort_values("persistence", ascending=False)
            plot_bars(rows[["birth", "death"]].to_numpy(), ax, title)
        fig.savefig(folder / "whole_field.png", dpi=100)
        plt.close(fig)
        names.append("whole_field.png")
    return names


def write_periodicity_report(folder, summary: dict) -> Path:
    """Write ``report.html`` into a periodicity result folder.

    Parameters
    ----------
    folder : str or Path
        The folder being filled (or a finished one): it holds ``regions.csv`` and the PNG
        plots named in ``summary["plots"]``.
    summary : dict
        The folder's summary (what ``voxtopo.jobs.periodicity.write`` puts in
        summary.json): ``scan``, ``counts`` with its ``statement``, ``plots``,
        ``columns``, ``column_meanings``, ``method``, ``options``, ``timings_seconds``,
        ``notes``, ``cautions``, ``software``, ``created`` and, optionally, ``whole_field``.

    Returns
    -------
    Path
        The report: the 20 highest-scoring regions, every plot with its caption, the
        counts, settings, units, notes and cautions.
    """
    folder = Path(folder)
    images = [{"data": base64.b64encode((folder / name).read_bytes()).decode("ascii"),
               "caption": CAPTIONS.get(name, name)} for name in summary["plots"]]
    table = pd.read_csv(folder / "regions.csv")
    highest = table.sort_values("score", ascending=False, na_position="last").head(20)
    counts = dict(summary["counts"])
    statement = counts.pop("statement")
    source = Path(str(summary["scan"].get("source") or "time-lapse")).name
    units = summary["columns"]["regions.csv"]
    columns = {name: f"{meaning} (unit: {units[name]})" if units.get(name) else meaning
               for name, meaning in summary["column_meanings"]["regions.csv"].items()}
    html = render("periodicity.html", title=f"Rhythms in {source}",
                  subtitle="Sliding-window persistence (SW1PerS score) of mean-intensity "
                           "signals", scan=summary["scan"], statement=statement,
                  counts=counts, images=images, highest=Table.of(highest),
                  whole_field=summary.get("whole_field"), columns=columns,
                  method=summary["method"], settings=summary["options"],
                  timings=summary["timings_seconds"], notes=summary["notes"],
                  cautions=summary["cautions"], software=summary["software"],
                  created=summary["created"])
    target = folder / "report.html"
    target.write_text(html, encoding="utf-8")
    return target
