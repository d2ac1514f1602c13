"""Figures of a periodicity result: score map, period histogram, the top signals, and the
whole-field barcode."""

from __future__ import annotations

import numpy as np

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


def plot_barcode(bars, ax, title: str, colour=INK):
    """Horizontal bars from birth to death, longest at the top."""
    bars = np.asarray(bars).reshape(-1, 2)
    for k, (birth, death) in enumerate(bars[:40]):
        ax.plot([birth, death], [k, k], color=colour, lw=2.2, solid_capstyle="butt")
    ax.set_ylim(max(len(bars[:40]), 1), -1)
    ax.set_yticks([])
    ax.set_xlabel("scale (distance on the unit sphere)")
    ax.set_title(title, fontsize=9)


def save_plots(result, folder) -> list[str]:
    """Draw every figure into ``folder``; the names written, in the report's order."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

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
            time = np.arange(len(item["trace"])) * result.frame_interval
            row[0].plot(time, item["trace"], color=INK, lw=1)
            row[0].set_xlabel(f"time ({result.time_unit})")
            row[0].set_ylabel("mean intensity")
            row[0].set_title(f"{result.signals.kind} {item['region']}: period "
                             f"{item['period']:.3g} {result.time_unit}", fontsize=9)
            cloud = item["cloud"] - item["cloud"].mean(axis=0)
            axes_2d = np.linalg.svd(cloud, full_matrices=False)[2][:2]
            flat = cloud @ axes_2d.T
            row[1].scatter(flat[:, 0], flat[:, 1], s=10, color=RHYTHM)
            row[1].set_aspect("equal")
            row[1].set_title("sliding-window cloud (first two principal axes)", fontsize=9)
            p_text = "no p-value" if not np.isfinite(item["p_value"]) else \
                f"p = {item['p_value']:.3g}"
            plot_barcode(item["bars"], row[2], f"H1 over Z/2: score {item['score']:.3f}, "
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
            plot_barcode(rows[["birth", "death"]].to_numpy(), ax, title)
        fig.savefig(folder / "whole_field.png", dpi=100)
        plt.close(fig)
        names.append("whole_field.png")
    return names
