"""Plots of persistence results (matplotlib, Agg backend, no display needed).

Every function takes a :class:`voxtopo.Diagram` (or a DataFrame with ``dim, birth, death``
columns, as the patch-space tables have) and an optional matplotlib Axes, and returns the
Axes. ``save_standard_plots`` writes the four standard figures of a result folder.
"""

from __future__ import annotations

import math
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from ._text import literal  # noqa: E402

#: Our colours for homological dimensions 0, 1, 2 (teal, rose, amber) and their names.
DIM_COLOURS = ("#1f7a8c", "#c8553d", "#e0a458")
DIM_NAMES = {0: "components", 1: "loops", 2: "cavities"}
_INK = "#2b2d42"

#: Values beyond this magnitude are drawn divided by a power of ten: matplotlib's axis
#: transforms overflow when an axis spans nearly the largest float64 (about 1.8e308).
_LARGEST_DRAWN = 1e300


def _unpack(diagram):
    if isinstance(diagram, pd.DataFrame):
        return diagram, None
    return diagram.pairs, diagram


def value_label(diagram) -> str:
    """Axis label for filtration values: the physical unit for distance filtrations."""
    if diagram is None:
        return "scale"
    if diagram.values == "distance":
        return f"signed distance ({literal(diagram.unit)})"
    return "gray value"


def _display_scale(values) -> float:
    """1, or the power of ten that brings the finite ``values`` into matplotlib's range."""
    values = np.asarray(values, dtype=np.float64)
    finite = values[np.isfinite(values)]
    largest = float(np.abs(finite).max()) if finite.size else 0.0
    return 1.0 if largest <= _LARGEST_DRAWN else 10.0 ** math.floor(math.log10(largest))


def _scaled(label: str, scale: float) -> str:
    return label if scale == 1.0 else f"{label} (x {scale:.0e})"


def _columns(pairs: pd.DataFrame, *names) -> pd.DataFrame:
    """The columns ``names`` of ``pairs`` that it has: a plot's copies of a table of
    millions of pairs then hold only what it draws."""
    return pairs[[name for name in names if name in pairs.columns]]


def _scaled_pairs(pairs: pd.DataFrame) -> tuple[pd.DataFrame, float]:
    """``pairs`` with birth and death divided by their display scale, and the scale."""
    scale = _display_scale(pairs[["birth", "death"]].to_numpy(dtype=np.float64))
    if scale == 1.0:
        return pairs, scale
    return pairs.assign(birth=pairs["birth"].astype(float) / scale,
                        death=pairs["death"].astype(float) / scale), scale


def _new_axes(ax, size=(5.2, 5.0)):
    if ax is None:
        _, ax = plt.subplots(figsize=size, constrained_layout=True)
    return ax


def _style(ax):
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(colors=_INK)
    ax.grid(True, color="#e5e5e5", linewidth=0.6)
    ax.set_axisbelow(True)


#: At most this many pairs that fail the test are drawn (a seeded random choice); the
#: features that pass are always all drawn.
MOST_FAILING_DRAWN = 100_000


def _drawn(pairs: pd.DataFrame, flag: str | None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(pairs that pass, pairs that fail but are drawn) under ``flag``."""
    if flag is None or flag not in pairs:
        return pairs, pairs.iloc[:0]
    passing = pairs[flag].to_numpy(dtype=bool)
    failing = pairs[~passing]
    if len(failing) > MOST_FAILING_DRAWN:
        failing = failing.sample(MOST_FAILING_DRAWN, random_state=0)
    return pairs[passing], failing


def _threshold_band(ax, thresholds: dict, dims, lo, hi, superlevel: bool):
    """Shade, per dimension, the strip along the diagonal where persistence is at most
    the threshold: points inside it fail the test."""
    xs = np.array([lo, hi])
    for d in dims:
        width = thresholds.get(int(d))
        if width is None or not np.isfinite(width):
            continue
        edge = xs - width if superlevel else xs + width
        ax.fill_between(xs, xs, edge, color=DIM_COLOURS[int(d) % 3], alpha=0.12, linewidth=0,
                        zorder=0.5)
        ax.plot(xs, edge, color=DIM_COLOURS[int(d) % 3], linewidth=0.8, linestyle="--",
                zorder=0.6, label=f"dim {d} threshold {width:.3g}")


def plot_diagram(diagram, ax=None, title: str | None = None, dims=None, *,
                 thresholds: dict | None = None, flag: str | None = None):
    """Persistence diagram: death against birth, the diagonal, essential classes on a band
    marked "never dies".

    With ``thresholds`` (persistence per dimension) the strip along the diagonal where
    pairs fail the test is shaded; with ``flag`` ("significant" or "robust") the pairs
    that fail it are drawn small and grey, those that pass in their dimension's colour."""
    pairs, diag = _unpack(diagram)
    pairs, scale = _scaled_pairs(_columns(pairs, "dim", "birth", "death", flag))
    ax = _new_axes(ax)
    dims = sorted(pairs["dim"].unique()) if dims is None else dims
    finite_vals = pairs[["birth", "death"]].to_numpy(dtype=float).ravel()
    finite_vals = finite_vals[np.isfinite(finite_vals)]
    lo, hi = (finite_vals.min(), finite_vals.max()) if len(finite_vals) else (0.0, 1.0)
    span = (hi - lo) or 1.0
    superlevel = bool(diag.superlevel) if diag is not None else False
    band = (lo - 0.08 * span) if superlevel else (hi + 0.08 * span)
    ax.plot([lo - 0.1 * span, hi + 0.1 * span], [lo - 0.1 * span, hi + 0.1 * span],
            color="#8d99ae", linewidth=1, zorder=1)
    if thresholds:
        _threshold_band(ax, thresholds, dims, lo - 0.1 * span, hi + 0.1 * span, superlevel)
    passing, failing = _drawn(pairs, flag)
    if len(failing):
        ax.scatter(failing["birth"], failing["death"], s=4, color="#b8bcc8", alpha=0.5,
                   edgecolors="none", zorder=2, label=f"not {flag}")
    for d in dims:
        rows = passing[passing["dim"] == d]
        death = rows["death"].to_numpy(dtype=float)
        essential = ~np.isfinite(death)
        colour = DIM_COLOURS[int(d) % 3]
        ax.scatter(rows["birth"][~essential], death[~essential], s=14, color=colour,
                   alpha=0.75, edgecolors="none",
                   label=f"dim {d} ({DIM_NAMES.get(int(d), '')}"
                         f"{', ' + flag if flag else ''})", zorder=3)
        if essential.any():
            ax.scatter(rows["birth"][essential], np.full(essential.sum(), band), s=36,
                       marker="D", color=colour, edgecolors=_INK, linewidths=0.6, zorder=4)
    ax.axhline(band, color="#8d99ae", linestyle=":", linewidth=1)
    ax.annotate("never dies", (lo - 0.1 * span, band), textcoords="offset points",
                xytext=(2, 3), fontsize=8, color=_INK)
    label = _scaled(value_label(diag), scale)
    ax.set_xlabel(f"birth: {label}")
    ax.set_ylabel(f"death: {label}")
    ax.set_title(title or "Persistence diagram", color=_INK)
    _style(ax)
    if len(pairs):
        ax.legend(frameon=False, fontsize=8, loc="lower right" if not superlevel else "upper left")
    return ax


def plot_barcode(diagram, ax=None, title: str | None = None, max_bars: int = 60):
    """Barcode: the ``max_bars`` longest bars per dimension, grouped by dimension."""
    pairs, diag = _unpack(diagram)
    pairs, scale = _scaled_pairs(_columns(pairs, "dim", "birth", "death", "persistence"))
    ax = _new_axes(ax, size=(6.4, 5.0))
    finite = pairs[np.isfinite(pairs["death"].to_numpy(dtype=float))]
    vals = finite[["birth", "death"]].to_numpy(dtype=float).ravel()
    vals = np.concatenate([vals, pairs["birth"].to_numpy(dtype=float)])
    lo, hi = (vals.min(), vals.max()) if len(vals) else (0.0, 1.0)
    superlevel = bool(diag.superlevel) if diag is not None else False
    far_end = lo if superlevel else hi
    row = 0
    ticks, names = [], []
    for d in sorted(pairs["dim"].unique()):
        rows = pairs[pairs["dim"] == d].sort_values("persistence", ascending=False).head(max_bars)
        start = row
        for b, dth in zip(rows["birth"], rows["death"]):
            end = dth if np.isfinite(dth) else far_end
            ax.plot([b, end], [row, row], color=DIM_COLOURS[int(d) % 3], linewidth=2.2,
                    solid_capstyle="butt")
            if not np.isfinite(dth):
                ax.plot([end], [row], marker="<" if superlevel else ">",
                        color=DIM_COLOURS[int(d) % 3], markersize=5)
            row += 1
        if row > start:
            ticks.append((start + row - 1) / 2)
            names.append(f"dim {d}")
        row += 2
    ax.set_yticks(ticks, names)
    ax.invert_yaxis()
    ax.set_xlabel(_scaled(value_label(diag), scale))
    ax.set_title(title or f"Barcode (longest {max_bars} per dimension)", color=_INK)
    _style(ax)
    return ax


def plot_betti_curves(diagram, ax=None, levels=None, title: str | None = None):
    """Betti numbers of the swept set against the filtration level."""
    ax = _new_axes(ax, size=(6.4, 4.2))
    levels = diagram.level_grid() if levels is None else levels
    curve = diagram.betti_curve(levels)
    scale = _display_scale(curve["level"])
    for k in range(diagram.ndim):
        ax.step(curve["level"] / scale, curve[f"betti_{k}"], where="post",
                color=DIM_COLOURS[k], label=f"Betti {k} ({DIM_NAMES[k]})")
    ax.set_xlabel(_scaled(value_label(diagram), scale))
    ax.set_ylabel("count")
    ax.set_title(title or "Betti curves", color=_INK)
    ax.legend(frameon=False, fontsize=8)
    _style(ax)
    return ax


def plot_euler_curve(diagram, ax=None, levels=None, title: str | None = None):
    """Euler characteristic of the swept set against the filtration level."""
    ax = _new_axes(ax, size=(6.4, 4.2))
    levels = diagram.level_grid() if levels is None else levels
    curve = diagram.euler_curve(levels)
    scale = _display_scale(curve["level"])
    ax.step(curve["level"] / scale, curve["euler_characteristic"], where="post", color=_INK)
    ax.axhline(0, color="#8d99ae", linewidth=0.8)
    ax.set_xlabel(_scaled(value_label(diagram), scale))
    ax.set_ylabel("Euler characteristic")
    ax.set_title(title or "Euler characteristic curve", color=_INK)
    _style(ax)
    return ax


def plot_lifetimes(diagram, thresholds: dict, flag: str = "significant", title=None):
    """Histogram of the persistence of finite pairs, one panel per dimension, with the
    threshold of the test marked. Returns the Figure."""
    pairs, diag = _unpack(diagram)
    ndim = diag.ndim if diag is not None else int(pairs["dim"].max()) + 1
    figure, axes = plt.subplots(1, ndim, figsize=(3.4 * ndim, 3.4), constrained_layout=True,
                                squeeze=False)
    unit = value_label(diag)
    for d, ax in enumerate(axes[0]):
        lifetimes = pairs.loc[pairs["dim"] == d, "persistence"].to_numpy(dtype=float)
        lifetimes = lifetimes[np.isfinite(lifetimes)]
        limit = thresholds.get(d)
        if len(lifetimes):
            top = max(lifetimes.max(), limit if limit is not None and np.isfinite(limit)
                      else 0.0)
            ax.hist(lifetimes, bins=np.linspace(0, top * 1.02 or 1.0, 60),
                    color=DIM_COLOURS[d % 3], alpha=0.85, log=True)
        if limit is not None and np.isfinite(limit):
            ax.axvline(limit, color=_INK, linestyle="--", linewidth=1.1)
            ax.annotate(f"{flag} above {limit:.3g}", (limit, 0.96), xycoords=("data",
                        "axes fraction"), xytext=(3, 0), textcoords="offset points",
                        fontsize=7, color=_INK, va="top")
        ax.set_title(f"dim {d} ({DIM_NAMES.get(d, '')})", color=_INK, fontsize=9)
        ax.set_xlabel(f"persistence ({unit})")
        ax.set_ylabel("pairs (log scale)")
        _style(ax)
    figure.suptitle(title or "Lifetimes of the finite pairs", color=_INK)
    return figure


STANDARD_PLOTS = {
    "diagram.png": plot_diagram,
    "barcode.png": plot_barcode,
    "betti_curves.png": plot_betti_curves,
    "euler_curve.png": plot_euler_curve,
}


def save_standard_plots(diagram, folder, *, thresholds: dict | None = None,
                        flag: str | None = None) -> list[str]:
    """Write diagram.png, barcode.png, betti_curves.png and euler_curve.png into
    ``folder``; with ``thresholds`` also lifetimes.png, and the diagram shows the
    threshold band and greys the pairs that fail ``flag``."""
    folder = Path(folder)
    written = []
    for name, plot in STANDARD_PLOTS.items():
        ax = plot(diagram, thresholds=thresholds, flag=flag) if plot is plot_diagram \
            else plot(diagram)
        ax.figure.savefig(folder / name, dpi=110)
        plt.close(ax.figure)
        written.append(name)
    if thresholds is not None:
        figure = plot_lifetimes(diagram, thresholds, flag or "significant")
        figure.savefig(folder / "lifetimes.png", dpi=110)
        plt.close(figure)
        written.append("lifetimes.png")
    return written
