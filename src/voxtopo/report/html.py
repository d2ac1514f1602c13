"""HTML reports: one per result folder, one per batch, one per comparison.

Pages are rendered with jinja2 from ``report/templates`` and carry everything inside
them (plots as base64 PNG, styles inline), so they open offline from a copied folder
or an e-mail attachment. Every page states the cautions of the house: results support
research; they are not a medical diagnosis nor a certification of a part or structure.
"""

from __future__ import annotations

import base64
import math
from dataclasses import dataclass
from datetime import datetime, timezone
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd

from ..io.results import read_summary, software_versions, write_summary
from ._text import literal

__all__ = ["write_report", "write_batch_report", "write_comparison", "render",
           "plot_distance_heatmap", "plot_embedding", "plot_betti_curves",
           "plot_persistence_images", "CAUTIONS", "software_versions"]

TEMPLATES = Path(__file__).parent / "templates"

#: Printed on every page unless the result carries its own (identical in spirit) text.
CAUTIONS = (
    "These results support research. They are not a medical diagnosis, nor a certification "
    "of a part, a material or a structure; defer to local codes and licensed practice.",
)

#: Our own colours for groups in comparison plots.
GROUP_COLOURS = ("#1f7a8c", "#c8553d", "#e0a458", "#5b8e7d", "#7b5ea7", "#3d5a80",
                 "#b5838d", "#6d6875")

#: Keys of summary.json that the result page lays out itself; any other key is shown
#: in a section of its own, so the numbers of other jobs (pores, patches) appear too.
_KNOWN_KEYS = {"voxtopo_version", "created", "scan", "analysed", "options", "counts",
               "essential", "most_persistent", "timings_seconds", "preparation", "software",
               "cautions", "plots", "diagram", "notes", "significance", "robustness",
               "counted", "pairs_computed", "timings_note"}

_DIM_WORDS = {"0": "components (dimension 0)", "1": "loops (dimension 1)",
              "2": "cavities (dimension 2)"}


@dataclass
class Table:
    """Columns and rows of plain values, what the templates draw as a table."""

    columns: list
    rows: list

    @classmethod
    def of(cls, frame: pd.DataFrame) -> "Table":
        frame = frame.astype(object).where(frame.notna(), None)
        return cls([str(c) for c in frame.columns], frame.values.tolist())


def _show(value) -> str:
    """One cell: numbers to 6 significant digits, missing values as a dash."""
    if value is None:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if math.isnan(value):
            return "–"
        if math.isinf(value):
            return "never" if value > 0 else "never (superlevel)"
        return f"{value:.6g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_show(v) for v in value) if value else "–"
    if isinstance(value, dict):
        return "; ".join(f"{k}: {_show(v)}" for k, v in value.items()) if value else "–"
    return str(value)


def _environment():
    import jinja2

    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(TEMPLATES)),
                             autoescape=jinja2.select_autoescape(["html"]),
                             undefined=jinja2.StrictUndefined)
    env.filters["show"] = _show
    return env


def render(template: str, **context) -> str:
    """Render one of the templates (``result.html``, ``batch.html``, ``compare.html``,
    ``periodicity.html``).

    Parameters
    ----------
    template : str
        The template's file name in ``report/templates``.
    **context
        The template's values; ``cautions``, ``software``, ``created`` and ``subtitle``
        get the house defaults when not given.

    Returns
    -------
    str
        The page's HTML.
    """
    context.setdefault("cautions", list(CAUTIONS))
    context.setdefault("software", software_versions())
    context.setdefault("created", datetime.now(timezone.utc).isoformat(timespec="seconds"))
    context.setdefault("subtitle", "")
    return _environment().get_template(template).render(**context)


def _png(path: Path) -> str:
    return base64.b64encode(path.read_bytes()).decode("ascii")


def _figure_png(figure) -> str:
    import io

    import matplotlib.pyplot as plt

    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=110)
    plt.close(figure)
    return base64.b64encode(buffer.getvalue()).decode("ascii")


_CAPTIONS = {"diagram.png": "Persistence diagram: each point is one feature, born at its "
                            "x and dead at its y value.",
             "barcode.png": "Barcode: one bar per feature, from birth to death.",
             "betti_curves.png": "Betti numbers of the swept set at every level.",
             "euler_curve.png": "Euler characteristic of the swept set at every level.",
             "lifetimes.png": "Persistence of every finite pair, per dimension, with the "
                              "threshold of the test (dashed): only pairs to its right "
                              "pass."}




def column_sections(columns: dict) -> list[dict]:
    """One report section per file of summary.json's ``columns`` (file -> column ->
    unit): "Columns of X and their units"."""
    return [{"title": f"Columns of {name} and their units",
             "mapping": {c: u or "(no unit)" for c, u in units.items()}, "table": None}
            for name, units in columns.items()]


def _sections(summary: dict) -> list[dict]:
    """Sections for the keys the page does not lay out itself (other jobs' numbers)."""
    sections = []
    for key, value in summary.items():
        if key in _KNOWN_KEYS or value is None:   # no region of interest, say
            continue
        if key == "columns":                      # file -> column -> unit
            sections += column_sections(value)
            continue
        title = key.replace("_", " ").capitalize()
        if isinstance(value, dict):
            flat = {k: v for k, v in value.items()
                    if not (isinstance(v, list) and v and isinstance(v[0], dict))}
            sections.append({"title": title, "mapping": flat, "table": None})
            for k, v in value.items():
                if isinstance(v, list) and v and isinstance(v[0], dict):
                    sections.append({"title": f"{title}: {k.replace('_', ' ')}",
                                     "mapping": None, "table": Table.of(pd.DataFrame(v))})
        elif isinstance(value, list) and value and isinstance(value[0], dict):
            sections.append({"title": title, "mapping": None,
                             "table": Table.of(pd.DataFrame(value))})
        else:
            sections.append({"title": title, "mapping": {key: value}, "table": None})
    return sections


def _final_name(folder: Path) -> str:
    """The name a result folder will have: the analyse job writes the report inside the
    temporary ``.NAME.partial-XXXX`` folder that is renamed to NAME at the end."""
    name = folder.name
    if name.startswith(".") and ".partial-" in name:
        return name[1:].rsplit(".partial-", 1)[0]
    return name


def _verdict_section(summary: dict) -> dict | None:
    """The test behind the counts, as key-value pairs for the page (None without one)."""
    if summary.get("significance"):
        entry = summary["significance"]
        noise = entry.get("noise", {})
        unit = noise.get("correlation_length_unit", "")
        return {"title": "Which features are significant", "mapping": {
            "method": entry.get("method"), "alpha (family-wise)": entry.get("alpha"),
            "noise model": noise.get("model"), "noise level": noise.get("level"),
            "noise level unit": noise.get("level_unit"), "level found by": noise.get("method"),
            f"correlation length ({unit})": noise.get("correlation_length"),
            "simulations": entry.get("simulations"),
            "p-value": (entry.get("null") or {}).get("p_value"),
            f"threshold per dimension ({entry.get('threshold_unit')})": entry.get("threshold"),
            "significant per dimension": entry.get("significant"),
            "classes that never die": entry.get("essential_classes"),
            "notes": noise.get("notes")}}
    if summary.get("robustness"):
        entry = summary["robustness"]
        unit = entry.get("unit", "")
        return {"title": "Which features are robust", "mapping": {
            "method": entry.get("method"), f"boundary tolerance ({unit})":
            entry.get("boundary_tolerance"), f"threshold per dimension ({unit})":
            entry.get("threshold"), "robust per dimension": entry.get("robust"),
            "classes that never die": entry.get("essential_classes")}}
    return None


def write_report(folder) -> Path:
    """Write ``report.html`` into a result folder from its summary.json and PNG plots.

    Parameters
    ----------
    folder : path
        A result folder (or the temporary folder a job is filling).

    Returns
    -------
    Path of the report.

    Examples
    --------
    >>> import numpy as np, voxtopo, tempfile, pathlib
    >>> from voxtopo.jobs.analyse import AnalysisOptions, analyse
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "ring"
    >>> _ = analyse(voxtopo.Scan(np.eye(6)), out, AnalysisOptions(min_persistence=0))
    >>> write_report(out).name
    'report.html'
    """
    folder = Path(folder)
    summary = read_summary(folder)
    counts = summary.get("counts", {})
    essential = summary.get("essential", {})
    skipped = ((summary.get("preparation") or {}).get("out_of_core") or {}).get(
        "dimensions_not_computed", [])
    computed = summary.get("pairs_computed") or {}
    count_rows = [[_DIM_WORDS.get(str(d), f"dimension {d}"),
                   "not computed" if int(d) in skipped else n,
                   "not computed" if int(d) in skipped else essential.get(str(d), 0)]
                  + ([computed.get(str(d), "–")] if computed else [])
                  for d, n in counts.items() if str(d).isdigit()]
    counted = summary.get("counted") or "pairs"
    count_columns = ["feature", counted, "of which never die"] + (
        ["pairs computed (all)"] if computed else [])
    verdict = _verdict_section(summary)
    images = [{"data": _png(folder / name), "caption": _CAPTIONS.get(name, name)}
              for name in summary.get("plots", sorted(p.name for p in folder.glob("*.png")))
              if (folder / name).is_file()]
    most = {}
    for dim, rows in (summary.get("most_persistent") or {}).items():
        if rows:
            most[_DIM_WORDS.get(str(dim), f"dimension {dim}")] = Table.of(pd.DataFrame(rows))
    diagram = summary.get("diagram") or {}
    notes = (list((summary.get("scan") or {}).get("notes", []))
             + list(diagram.get("notes", [])) + list(summary.get("notes", [])))
    for key, value in (summary.get("preparation") or {}).items():
        notes.append(f"{key}: {_show(value)}")
    sections = _sections(summary)
    named_counts = {k: v for k, v in counts.items() if not str(k).isdigit()}
    if named_counts:   # other jobs count their own features (pores, grains, ...)
        sections.insert(0, {"title": "Counts", "mapping": named_counts, "table": None})
    scan = summary.get("scan") or {}
    name = _final_name(folder)
    title = Path(str(scan.get("source") or name)).name or name
    html = render("result.html", title=f"Topology of {title}",
                  subtitle=f"Result folder {name} · cubical persistent homology",
                  scan=scan, analysed=summary.get("analysed") if summary.get("analysed")
                  != scan else None,
                  counts=Table(count_columns, count_rows), verdict=verdict,
                  images=images, most_persistent=most, extra_sections=sections,
                  settings=summary.get("options") or {}, diagram=diagram,
                  timings=summary.get("timings_seconds") or {}, notes=notes,
                  cautions=summary.get("cautions") or list(CAUTIONS),
                  software=summary.get("software") or software_versions(),
                  created=summary.get("created", ""))
    target = folder / "report.html"
    target.write_text(html, encoding="utf-8")
    return target


#: Prefixes of the per-dimension count columns of an analyse scan in a batch's summary.csv,
#: by what they count: significant or robust features (--min-persistence auto), or the
#: pairs listed (every pair, those above a number, or untested ones).
COUNT_PREFIXES = ("significant_dim", "robust_dim", "pairs_dim")


def _plot_numeric_columns(summary: pd.DataFrame):
    """A bar chart of the per-dimension counts of every scan (significant / robust
    features, or pairs), when the summary has them."""
    import matplotlib.pyplot as plt


    count_columns = [c for c in summary.columns if c.startswith(COUNT_PREFIXES)]
    if summary.empty or not count_columns:
        return None
    figure, ax = plt.subplots(figsize=(max(5.0, 0.35 * len(summary) + 2), 3.6),
                              constrained_layout=True)
    x = np.arange(len(summary))
    width = 0.8 / len(count_columns)
    for k, column in enumerate(count_columns):
        ax.bar(x + k * width, summary[column].fillna(0), width,
               color=GROUP_COLOURS[k % len(GROUP_COLOURS)], label=column.replace("_", " "))
    ax.set_xticks(x + 0.4 - width / 2, summary["name"].astype(str).map(literal), rotation=60,
                  ha="right", fontsize=8)
    ax.set_ylabel("count (see what each column counts)")
    ax.legend(frameon=False, fontsize=8)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return figure


def write_batch_report(folder, settings: dict | None = None) -> Path:
    """Write ``report.html`` of a batch folder from summary.csv and failures.csv.

    Each scan's own report is linked by a relative path (scans/<name>/report.html), so
    the folder can be moved as a whole.

    Parameters
    ----------
    folder : str or Path
        The batch folder.
    settings : dict, optional
        The batch's settings tables, shown on the page; without them, the name of the
        folder's settings file.

    Returns
    -------
    Path
        The report.
    """
    folder = Path(folder)
    summary_path = folder / "summary.csv"
    summary = pd.read_csv(summary_path) if summary_path.is_file() else pd.DataFrame()
    failures_path = folder / "failures.csv"
    failures = pd.read_csv(failures_path) if failures_path.is_file() else pd.DataFrame()
    if settings is None:
        settings_path = next((p for p in (folder / "settings.toml", folder / "settings.yaml")
                              if p.is_file()), None)
        settings = {"file": settings_path.name if settings_path else "none (defaults)"}
    links = []
    for name in summary.get("name", pd.Series(dtype=str)).astype(str):
        if (folder / "scans" / name / "report.html").is_file():
            links.append({"name": name, "href": f"scans/{name}/report.html"})
    complete = int((summary["status"] == "done").sum()) if "status" in summary else 0
    overview = {"scans in the batch": len(summary), "complete": complete,
                "failed": len(failures), "folder": folder.name}
    if "counted" in summary:
        # the method and level of each scan's counts (the noise level is the scan's own)
        overview["what the counts per dimension count"] = "; ".join(
            summary["counted"].dropna().astype(str).unique())
    # The page shows what tells scans apart; summary.csv keeps every column.
    shown = [c for c in summary.columns
             if not c.startswith(("scan_", "analysed_", "timings_")) and c != "message"]
    figure = _plot_numeric_columns(summary)
    images = ([{"data": _figure_png(figure),
                "caption": "Counts per dimension in each scan: significant_dim / robust_dim "
                           "count the features that passed the test, pairs_dim every pair "
                           "listed (see what the counts count above)."}]
              if figure is not None else [])
    html = render("batch.html", title=f"Batch {folder.name}",
                  subtitle="Many scans, one set of settings", overview=overview,
                  images=images, summary=Table.of(summary[shown]), links=links,
                  failures=Table.of(failures) if not failures.empty else None,
                  settings=_flatten(settings))
    from ..io.results import write_atomically

    return write_atomically(folder / "report.html",
                            lambda path: path.write_text(html, encoding="utf-8"))


def _flatten(mapping: dict, prefix: str = "") -> dict:
    out = {}
    for key, value in mapping.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            out.update(_flatten(value, f"{name}."))
        else:
            out[name] = value
    return out


# --- comparison pages -------------------------------------------------------------------
def _group_order(names, groups) -> np.ndarray:
    return np.array(sorted(range(len(names)), key=lambda i: (str(groups[i]), str(names[i]))))


def _colours(groups) -> dict:
    return {g: GROUP_COLOURS[k % len(GROUP_COLOURS)]
            for k, g in enumerate(sorted(set(map(str, groups))))}


def plot_distance_heatmap(matrix, names, groups, title: str = "distance"):
    """Heatmap of a distance matrix with rows and columns ordered by group, group borders
    drawn as lines.

    Parameters
    ----------
    matrix : array_like, shape (n, n)
        The distances.
    names, groups : sequence of str
        One name and one group label ("" for none) per diagram.
    title : str
        The colour bar's label.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt


    order = _group_order(names, groups)
    ordered = np.asarray(matrix)[np.ix_(order, order)]
    size = min(10.0, 3.5 + 0.25 * len(names))
    figure, ax = plt.subplots(figsize=(size + 1.2, size), constrained_layout=True)
    shown = ax.imshow(ordered, cmap="magma_r", interpolation="nearest")
    labels = [literal(f"{names[i]} ({groups[i]})" if groups[i] else names[i]) for i in order]
    ax.set_xticks(range(len(order)), labels, rotation=70, ha="right", fontsize=7)
    ax.set_yticks(range(len(order)), labels, fontsize=7)
    sorted_groups = [str(groups[i]) for i in order]
    for k in range(1, len(order)):
        if sorted_groups[k] != sorted_groups[k - 1]:
            ax.axhline(k - 0.5, color="#ffffff", linewidth=2)
            ax.axvline(k - 0.5, color="#ffffff", linewidth=2)
    figure.colorbar(shown, ax=ax, label=title, shrink=0.8)
    return figure


def plot_embedding(embedding, names, groups):
    """Scatter plot of a 2D embedding, one colour per group.

    Parameters
    ----------
    embedding : ndarray, shape (n, 2)
        The points (:func:`voxtopo.compare.embed_mds`).
    names, groups : sequence of str
        One name and one group label per point; names are written beside the points
        when there are at most 40.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt


    figure, ax = plt.subplots(figsize=(5.6, 4.8), constrained_layout=True)
    colours = _colours(groups)
    for group, colour in colours.items():
        members = [i for i, g in enumerate(groups) if str(g) == group]
        ax.scatter(embedding[members, 0], embedding[members, 1], s=46, color=colour,
                   label=literal(group) if group else "no group", edgecolor="white",
                   linewidth=0.8)
    if len(names) <= 40:
        for i, name in enumerate(names):
            ax.annotate(literal(name), embedding[i], fontsize=7, xytext=(4, 3),
                        textcoords="offset points", color="#4a4e69")
    ax.set_xlabel("MDS axis 1")
    ax.set_ylabel("MDS axis 2")
    ax.legend(frameon=False, fontsize=8)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return figure


def _group_legend(ax, colours: dict) -> None:
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=colour, linewidth=2) for colour in colours.values()]
    ax.legend(handles, [group or "no group" for group in colours], frameon=False, fontsize=8)


def plot_betti_curves(comparison):
    """Betti curves of a comparison: one panel per dimension compared, one line per
    diagram coloured by its group.

    Parameters
    ----------
    comparison : Comparison
        What :func:`voxtopo.compare.compare_diagrams` returned.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    dims = comparison.dims
    figure, axes = plt.subplots(1, len(dims), figsize=(4.2 * len(dims) + 0.8, 3.6),
                                constrained_layout=True, squeeze=False)
    colours = _colours(comparison.groups)
    curves = comparison.curves
    for ax, dim in zip(axes[0], dims):
        for name, group in zip(comparison.names, comparison.groups):
            rows = curves[curves["name"] == name]
            ax.plot(rows["level"].to_numpy(), rows[f"betti_{dim}"].to_numpy(),
                    color=colours[str(group)], linewidth=1.1, alpha=0.85)
        levels = curves["level"].to_numpy()
        if len(levels) > 1 and levels[1] < levels[0]:
            ax.invert_xaxis()      # a superlevel sweep reads from high to low values
        ax.set_title(_DIM_WORDS.get(str(dim), f"dimension {dim}"), fontsize=10)
        ax.set_xlabel(f"level ({comparison.unit})")
        ax.set_ylabel("Betti number")
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    _group_legend(axes[0][-1], colours)
    return figure


def plot_persistence_images(comparison):
    """Mean persistence image of each group (rows) in each dimension compared (columns),
    on the comparison's common grid with real birth values.

    Parameters
    ----------
    comparison : Comparison
        What :func:`voxtopo.compare.compare_diagrams` returned.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib.pyplot as plt

    groups = sorted(set(map(str, comparison.groups)))
    dims = comparison.dims
    figure, axes = plt.subplots(len(groups), len(dims),
                                figsize=(3.8 * len(dims) + 0.8, 3.0 * len(groups) + 0.4),
                                constrained_layout=True, squeeze=False)
    for row, group in enumerate(groups):
        members = [i for i, g in enumerate(comparison.groups) if str(g) == group]
        for col, dim in enumerate(dims):
            ax, grid = axes[row][col], comparison.grids[dim]
            mean = comparison.images[dim][members].mean(axis=0)
            shown = ax.imshow(mean, origin="lower", aspect="auto", cmap="cividis",
                              extent=(grid.birth_edges[0], grid.birth_edges[-1],
                                      grid.persistence_edges[0], grid.persistence_edges[-1]))
            figure.colorbar(shown, ax=ax, shrink=0.85)
            ax.set_title(f"{group or 'all diagrams'} ({len(members)}) · "
                         f"{_DIM_WORDS.get(str(dim), f'dimension {dim}')}", fontsize=9)
            ax.set_xlabel(f"birth ({comparison.unit})")
            ax.set_ylabel(f"persistence ({comparison.unit})")
    return figure


def _words(mapping: dict) -> dict:
    """summary.json keys as the report shows them: "dimensions_compared" ->
    "dimensions compared"."""
    return {str(key).replace("_", " "): value for key, value in mapping.items()}


def write_comparison(comparison, out, *, force: bool = False, inputs=()) -> Path:
    """Write a comparison folder: tables (see ``Comparison.save``), heatmap.png, mds.png,
    betti_curves.png, persistence_images.png and report.html, atomically (nothing is left
    behind on an error).

    Parameters
    ----------
    comparison : Comparison
        What :func:`voxtopo.compare.compare_diagrams` returned.
    out : str or Path
        The folder to create.
    force : bool
        Replace ``out`` when it is a folder voxtopo wrote.
    inputs : sequence of paths
        The result folders compared, which ``out`` may not be nor contain.

    Returns
    -------
    Path
        ``out``.
    """
    import matplotlib.pyplot as plt

    from ..io import result_folder

    dims = ", ".join(map(str, comparison.dims))
    heatmap_caption = (f"{comparison.distance.capitalize()} distances over dimensions {dims}, "
                       f"ordered by group ({comparison.features}).")
    curves_caption = (f"Betti curves of every diagram on one common grid of levels, coloured "
                      f"by group ({comparison.features}).")
    images_caption = ("Mean persistence image of each group, per dimension: where the "
                      "features are born (across) and how long they live (up).")
    plots = [("heatmap.png", partial(plot_distance_heatmap, comparison.matrix, comparison.names,
                                     comparison.groups, title=f"{comparison.distance} distance"),
              heatmap_caption)]
    if comparison.embedding is not None:
        plots.append(("mds.png", partial(plot_embedding, comparison.embedding, comparison.names,
                                         comparison.groups),
                      "Metric MDS of the distance matrix, coloured by group."))
    plots.append(("betti_curves.png", partial(plot_betti_curves, comparison), curves_caption))
    plots.append(("persistence_images.png", partial(plot_persistence_images, comparison),
                  images_caption))
    with result_folder(out, force=force, inputs=inputs) as tmp:
        comparison.save(tmp)
        images = []
        for name, draw, caption in plots:
            figure = draw()
            figure.savefig(tmp / name, dpi=110)
            plt.close(figure)
            images.append({"data": _png(tmp / name), "caption": caption})
        summary = comparison.summary()
        summary["cautions"] = list(CAUTIONS)
        write_summary(tmp, summary)
        test = _words(comparison.test.description()) if comparison.test else None
        reason = "; ".join(comparison.notes) or "no groups were given"
        members = pd.DataFrame({"name": comparison.names, "group": comparison.groups,
                                **{f"pairs compared, dimension {dim}":
                                   [pairs[dim] for pairs in comparison.pairs_compared]
                                   for dim in comparison.dims}})
        settings = _words(comparison.settings())
        for dim, grid in comparison.grids.items():
            settings[f"persistence image, dimension {dim}"] = _words(grid.description())
        html = render("compare.html", title="Comparison of persistence diagrams",
                      subtitle=f"{len(comparison.names)} diagrams · {comparison.distance} "
                               f"distance · {comparison.features}",
                      features=comparison.features, members=Table.of(members), images=images,
                      test=test, no_test_reason=reason,
                      distances=Table.of(comparison.distance_table()), settings=settings,
                      notes=comparison.notes,
                      column_sections=column_sections(summary["columns"]))
        (tmp / "report.html").write_text(html, encoding="utf-8")
    return Path(out)
