"""Synthesis figures: the composite δ13C curve against age, and sections aligned on their
excursion onset.

Both are drawn at a journal column's print width (``width``: single or double, see
``plotting.style``) with the shared look of ``strata13.compile.plotting``: mathtext isotope
labels, white background, the age axis older to the left with the stage strip under it
(``plotting.axes``), and written by the one save function (``plotting.save``: PNG at 300
dpi, SVG and PDF, with the caption line).

Groups are told apart by colour *and* marker. The palette (``PALETTE``) is our own: six
colours chosen to differ in lightness as well as on the blue–yellow axis, so that they stay
apart under simulated deutan, protan and tritan vision (checked in the tests). Legends sit
outside the axes (at the right on a double column, below on a single one), where they can
hide nothing.

matplotlib is imported inside the functions, through its object API with the Agg canvas (no
pyplot state, no display).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from strata13.compile.plotting.axes import AGE_LABEL, OLDER_ON_LEFT, Stage
from strata13.compile.plotting.style import CARB_LABEL, DEFAULT_WIDTH, ORG_LABEL, math, plain
from strata13.compile.synthesis.excursion import _value_column

from strata13.errors import DomainError

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["AGE_LABEL", "CARB_LABEL", "ORG_LABEL", "OLDER_ON_LEFT"]

MERGED_NOTE = "carbonate and organic δ13C merged on request"
# ink blue, amber, orchid, sky, umber, teal: lightness 26–73 with blue/yellow contrast
PALETTE = ("#173f7a", "#e69519", "#b55aa8", "#74c0e8", "#5e4208", "#2f8f7f")
MARKERS = ("o", "s", "^", "D", "v", "P")
ROBUST_COLOUR = "0.55"
# figure heights (inches) at each column width: the plot, and the excursion's panels
CURVE_HEIGHT_IN = {"single": 3.6, "double": 3.8}

SAMPLE_COLUMNS = ("group", "age_ma", "value")
CURVE_COLUMNS = ("group", "age_ma", "fit", "lo", "hi", "band_shown")
ROBUST_COLUMNS = ("left_out", "age_ma", "fit")  # group optional
BIN_COLUMNS = ("group", "age_ma", "value")  # lo, hi optional
BIN_STATS_COLUMNS = ("age_old", "age_young", "median", "q25", "q75")  # curve.bin_stats


def group_style(groups: Sequence[Any]) -> dict[Any, tuple[str, str]]:
    """Colour and marker of each group, in sorted order of the groups' text (the same
    group gets the same style whatever else is plotted with it in one figure)."""
    ordered = sorted({g for g in groups}, key=str)
    return {
        g: (PALETTE[i % len(PALETTE)], MARKERS[(i + i // len(PALETTE)) % len(MARKERS)])
        for i, g in enumerate(ordered)
    }


def curve_figure(
    samples: pd.DataFrame,
    curve: pd.DataFrame,
    bins: pd.DataFrame | Sequence[float] | None = None,
    robustness: pd.DataFrame | None = None,
    stages: Sequence[Stage] | None = None,
    group_label: str = "group",
    title: str = "",
    width: str = DEFAULT_WIDTH,
    value_label: str = CARB_LABEL,
    merged: bool = False,
    note: str = "",
    band_label: str = "curve band (lo–hi)",
    robust_label: str = "refits, one left out each",
) -> Figure:
    """δ13C against age: points by group, the LOESS curve of each group and its band
    (``band_label`` says what the band is in the legend), at a column ``width``.

    Inputs (pandas DataFrames):

    * ``samples``: group, age_ma, value — one row per record (NaN rows are skipped);
    * ``curve``: group, age_ma, fit, lo, hi, band_shown — the band (lo–hi) is drawn only
      where band_shown is True (a missing column means shown everywhere);
    * ``robustness`` (optional): [group,] left_out, age_ma, fit — one thin grey line per
      (group, left_out) refit;
    * ``bins`` (optional): a sequence of bin edges in Ma (drawn as faint dotted lines),
      or a DataFrame of per-bin summaries drawn as open squares with bars from lo to hi:
      group, age_ma, value [, lo, hi], or the bin-statistics table (age_old, age_young,
      median, q25, q75 [, group]: the median at the bin's middle, bars interquartile);
    * ``stages`` (optional): (name, base_ma, top_ma) triples; alternating light bands in
      the plot and a strip of names under it, names dropped where they do not fit.

    A column ``age`` stands for ``age_ma`` where the latter is absent (the curve
    tables' name). Age runs older to the left (``OLDER_ON_LEFT``). ``value_label`` labels the δ axis
    (``CARB_LABEL``, ``ORG_LABEL`` or the caller's); ``merged=True`` adds ``MERGED_NOTE``
    above the plot, ``note`` any further line. DomainError when there is nothing to plot
    or a column is missing."""
    from strata13.compile.plotting import axes as age
    from strata13.compile.plotting.style import journal

    with journal(width):
        return _curve_figure(
            samples,
            curve,
            bins,
            robustness,
            stages,
            group_label,
            title,
            width,
            value_label,
            merged,
            note,
            band_label,
            robust_label,
            age,
        )


def _curve_figure(
    samples: pd.DataFrame,
    curve: pd.DataFrame,
    bins: pd.DataFrame | Sequence[float] | None,
    robustness: pd.DataFrame | None,
    stages: Sequence[Stage] | None,
    group_label: str,
    title: str,
    width: str,
    value_label: str,
    merged: bool,
    note: str,
    band_label: str,
    robust_label: str,
    age: Any,
) -> Figure:
    from matplotlib import patheffects
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from strata13.compile.plotting.style import new_figure, wrap

    samples = _frame(samples, SAMPLE_COLUMNS, "samples")
    curve = _frame(_age_alias(curve), CURVE_COLUMNS[:3], "curve")
    robustness = (
        None if robustness is None else _frame(_age_alias(robustness), ROBUST_COLUMNS, "robustness")
    )
    bin_table = _bins_frame(bins) if isinstance(bins, pd.DataFrame) else None
    stats_form = isinstance(bins, pd.DataFrame) and "age_ma" not in bins.columns
    bin_label = "bin median (bar: interquartile range)" if stats_form else "bin summaries (lo–hi)"
    bin_edges = (
        None
        if bins is None or bin_table is not None
        else np.asarray([float(b) for b in bins], dtype=float)
    )
    pts = samples.dropna(subset=["age_ma", "value"])
    fit = curve.dropna(subset=["age_ma", "fit"])
    if pts.empty and fit.empty:
        raise DomainError(
            "There is nothing to plot: no dated samples and no curve.",
            "Widen the interval or loosen the filters.",
        )

    ages = [pts["age_ma"].to_numpy(float), fit["age_ma"].to_numpy(float)]
    if robustness is not None:
        ages.append(robustness["age_ma"].to_numpy(float))
    if bin_table is not None:
        ages.append(bin_table["age_ma"].to_numpy(float))
    allages = np.concatenate(ages)
    allages = allages[np.isfinite(allages)]
    young, old = float(allages.min()), float(allages.max())
    pad = 0.02 * (old - young) if old > young else 0.5
    old, young = old + pad, young - pad

    styles = group_style(list(pts["group"]) + list(fit["group"]))
    below = width == "single"  # a single column has no room for a legend at the side
    height = CURVE_HEIGHT_IN[width] + (0.16 * (len(styles) + 3) / 2 if below else 0.0)
    fig = new_figure(width, height)
    stage_list = age.stages_in(stages, old, young)
    ax, strip = age.age_axes(fig, fig.add_gridspec(1, 1)[0], stage_list, height)
    handles: list[Any] = []

    age.shade_stages(ax, stage_list)
    if bin_edges is not None:
        for e in bin_edges[np.isfinite(bin_edges)]:
            ax.axvline(e, color="0.75", linestyle=":", linewidth=0.6, zorder=1)
        handles.append(
            Line2D([], [], color="0.75", linestyle=":", linewidth=0.6, label="bin edges")
        )

    band_drawn = False
    for g, (colour, marker) in styles.items():
        p = pts[pts["group"] == g]
        c = fit[fit["group"] == g].sort_values("age_ma", kind="stable")
        if len(p):
            ax.scatter(
                p["age_ma"],
                p["value"],
                s=6 if below else 9,
                marker=marker,
                color=colour,
                alpha=0.7,
                linewidths=0,
                zorder=2,
            )
        if len(c):
            x = c["age_ma"].to_numpy(float)
            lo = pd.to_numeric(c["lo"], errors="coerce").to_numpy(float)
            hi = pd.to_numeric(c["hi"], errors="coerce").to_numpy(float)
            shown = (
                c["band_shown"].fillna(False).astype(bool).to_numpy()
                if "band_shown" in c.columns
                else np.ones(len(c), bool)
            )
            shown = shown & np.isfinite(lo) & np.isfinite(hi)
            if shown.any():
                ax.fill_between(
                    x, lo, hi, where=shown, color=colour, alpha=0.22, linewidth=0, zorder=1.5
                )
                band_drawn = True
        handles.append(
            Line2D(
                [],
                [],
                color=colour,
                marker=marker,
                markersize=3.5,
                linewidth=1.4 if len(c) else 0.0,
                label=plain(f"{g} (n = {len(p)})"),
            )
        )

    if robustness is not None and len(robustness):
        r = robustness.dropna(subset=["age_ma", "fit"])
        if "group" not in r.columns:
            r = r.assign(group="")
        for _, part in sorted(
            r.groupby(["group", "left_out"], sort=False),
            key=lambda kv: (str(kv[0][0]), str(kv[0][1])),
        ):
            part = part.sort_values("age_ma", kind="stable")
            ax.plot(
                part["age_ma"], part["fit"], color=ROBUST_COLOUR, linewidth=0.5, alpha=0.7, zorder=3
            )
        handles.append(Line2D([], [], color=ROBUST_COLOUR, linewidth=0.5, label=robust_label))

    halo = [patheffects.Stroke(linewidth=2.6, foreground="white"), patheffects.Normal()]
    for g, (colour, _) in styles.items():
        c = fit[fit["group"] == g].sort_values("age_ma", kind="stable")
        if len(c):
            ax.plot(c["age_ma"], c["fit"], color=colour, linewidth=1.4, zorder=4, path_effects=halo)
    if band_drawn:
        handles.append(Patch(color="0.5", alpha=0.3, linewidth=0, label=band_label))
    if bin_table is not None and len(bin_table):
        for g, part in sorted(
            bin_table.dropna(subset=["age_ma", "value"]).groupby("group", sort=False, dropna=False),
            key=lambda kv: str(kv[0]),
        ):
            colour = styles.get(g, ("0.3", "o"))[0]
            yerr = None
            if {"lo", "hi"} <= set(part.columns):
                v = part["value"].to_numpy(float)
                yerr = np.vstack(
                    [
                        np.clip(v - part["lo"].to_numpy(float), 0, None),
                        np.clip(part["hi"].to_numpy(float) - v, 0, None),
                    ]
                )
                yerr = np.nan_to_num(yerr)
            ax.errorbar(
                part["age_ma"],
                part["value"],
                yerr=yerr,
                fmt="s",
                markersize=3.5,
                markerfacecolor="white",
                markeredgecolor=colour,
                ecolor=colour,
                elinewidth=0.8,
                capsize=1.5,
                zorder=5,
            )
        handles.append(
            Line2D(
                [],
                [],
                marker="s",
                markerfacecolor="white",
                markeredgecolor="0.3",
                linewidth=0,
                label=bin_label,
            )
        )

    age.set_age_axis(ax, old, young, width=width)
    ax.set_ylabel(math(value_label))
    ax.grid(True, color="0.88", linewidth=0.4)
    ax.set_axisbelow(True)
    notes = ([MERGED_NOTE] if merged else []) + ([note] if note else [])
    if notes:
        share = 0.8 if below else 0.6  # the plot's share of the width (legend at the side)
        ax.set_title(math(wrap("\n".join(notes), width, share)), style="italic", loc="left")
    if title:
        fig.suptitle(math(title))
    fig.legend(
        handles=handles,
        loc="outside lower center" if below else "outside right upper",
        ncols=2 if below else 1,
        title=plain(group_label),
        frameon=False,
    )
    if strip is not None:  # last: names are measured against the final layout
        age.stage_strip(fig, ax, strip, stage_list)
    return fig


EXCURSION_STYLE = {  # metric -> (colour, marker, label): one look in both panels
    "onset": (PALETTE[1], "s", "onset"),
    "peak": (PALETTE[0], "o", "peak"),
    "recovery": (PALETTE[2], "D", "recovery"),
}
RANGE_ALPHA = 0.22  # shading of a 95 % range


def excursion_figure(
    df: pd.DataFrame,
    per_section: pd.DataFrame,
    width: str = DEFAULT_WIDTH,
    group_col: str | None = None,
    value_col: str | None = None,
    value_label: str = CARB_LABEL,
    title: str = "",
    summary: pd.DataFrame | None = None,
    ranges_note: str = "",
    shared_axis: bool = True,
    stages: Sequence[Stage] | None = None,
) -> Figure:
    """Two parts at a column ``width``. Above, each section's δ13C against its position
    relative to the onset, one panel per section (in rows of ``PANELS_PER_ROW``), all
    sharing that vertical axis (0 = onset, up = younger: height − onset height, or onset
    depth − depth) and, with ``shared_axis`` (the default: the panels compare magnitudes),
    one δ axis too: the baseline a dashed vertical line, the onset a solid and the recovery
    a dotted horizontal line, each with its 95 % range of positions shaded when the table
    has one. Below, across the figure, the onset, peak and recovery ages of every section
    (centre marker, 95 % range as a bar; older to the left, the ``stages`` in a strip under
    it), then the group means of ``summary`` (rows of scope "group", when given).

    ``df`` holds the records (source_id, section_id, position_m, the value column —
    ``value_col``, else value, else d13c_carb — and ``group_col`` when per_section was
    made with one); ``per_section`` is excursion.per_section()'s table, with the columns of
    excursion_draws.with_uncertainty() for the ranges (without them only centres are drawn).
    Sections without an onset cannot be aligned: they are named in the figure title
    instead (and still have a row of ages). ``ranges_note`` says what the ranges are made of.
    DomainError when no section has an onset."""
    from strata13.compile.plotting.style import journal

    with journal(width):
        return _excursion_figure(
            df,
            per_section,
            width,
            group_col,
            value_col,
            value_label,
            title,
            summary,
            ranges_note,
            shared_axis,
            stages,
        )


PANELS_PER_ROW = {"single": 4, "double": 6}
PANEL_HEIGHT_IN = {"single": 1.45, "double": 1.8}


def _excursion_figure(
    df: pd.DataFrame,
    per_section: pd.DataFrame,
    width: str,
    group_col: str | None,
    value_col: str | None,
    value_label: str,
    title: str,
    summary: pd.DataFrame | None,
    ranges_note: str,
    shared_axis: bool,
    stages: Sequence[Stage] | None,
) -> Figure:
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from strata13.compile.plotting import axes as age
    from strata13.compile.plotting.style import new_figure

    vcol = _value_column(df, value_col)
    for col in ("source_id", "section_id", "position_m", *([group_col] if group_col else [])):
        if col not in df.columns:
            raise DomainError(
                f"The records have no {col!r} column.",
                "Pass the records the per-section table was made from.",
            )
    ok = np.isfinite(pd.to_numeric(per_section["onset_position_m"], errors="coerce"))
    shown, skipped = per_section[ok.to_numpy()], per_section[~ok.to_numpy()]
    if shown.empty:
        raise DomainError(
            "No section has an onset to align on.",
            "Check the flags of the per-section table (starts_in_excursion, too_few_samples …).",
        )
    age_rows = _age_rows(per_section, summary)
    n = len(shown)
    rows = -(-n // PANELS_PER_ROW[width])
    cols = -(-n // rows)  # rows as even as they come: 7 panels in 4 + 3, not 5 + 2
    panels_h = PANEL_HEIGHT_IN[width] * rows
    ages_h = 0.6 + 0.16 * len(age_rows) + age.STRIP_IN
    legend_h = 0.55 if width == "double" else 0.85
    fig = new_figure(width, panels_h + ages_h + legend_h + 0.5)
    # two subfigures, so the panels carry one δ label and one position label between them
    outer = fig.add_gridspec(2, 1, height_ratios=(panels_h, ages_h))
    top, bottom = fig.add_subfigure(outer[0]), fig.add_subfigure(outer[1])
    grid = top.add_gridspec(rows, cols)
    axes: list[Axes] = []
    for i in range(n):
        share = {"sharey": axes[0]} if axes else {}
        if axes and shared_axis:
            share["sharex"] = axes[0]
        axes.append(top.add_subplot(grid[i // cols, i % cols], **share))
    any_depth = False
    for ax, (_, row) in zip(axes, shown.iterrows(), strict=True):
        sel = (df["source_id"] == row["source_id"]) & (df["section_id"] == row["section_id"])
        if group_col:
            sel &= df[group_col] == row["group"]
        part = df[sel]
        depth = str(row.get("position_kind", "height")) == "depth"
        any_depth |= depth
        pos = pd.to_numeric(part["position_m"], errors="coerce").to_numpy(float)
        val = pd.to_numeric(part[vcol], errors="coerce").to_numpy(float)
        keep = np.isfinite(pos) & np.isfinite(val)
        onset = float(row["onset_position_m"])

        def rel(x: float, onset: float = onset, depth: bool = depth) -> float:
            return (onset - x) if depth else (x - onset)

        y = np.array([rel(v) for v in pos[keep]])
        order = np.argsort(y, kind="stable")
        ax.plot(
            val[keep][order],
            y[order],
            color=PALETTE[0],
            linewidth=0.7,
            marker="o",
            markersize=2,
            zorder=3,
        )
        ax.axvline(float(row["baseline"]), color="0.35", linestyle="--", linewidth=0.7)
        for metric, style in (("onset", "-"), ("recovery", ":")):
            colour = EXCURSION_STYLE[metric][0]
            centre = _num(row, f"{metric}_position_m")
            if np.isfinite(centre):
                ax.axhline(rel(centre), color=colour, linestyle=style, linewidth=1.0)
            lo, hi = _num(row, f"{metric}_position_p2_5_m"), _num(row, f"{metric}_position_p97_5_m")
            if np.isfinite(lo) and np.isfinite(hi):
                ax.axhspan(rel(lo), rel(hi), color=colour, alpha=RANGE_ALPHA, linewidth=0)
        # the source only where a section id alone is ambiguous in this figure
        label = str(row["section_id"])
        if ambiguous(shown, row["section_id"]):
            label += f"\n{row['source_id']}"
        if group_col and row["group"] is not None:
            label += f"\n{row['group']}"
        ax.set_title(plain(label), fontsize="small", linespacing=1.1)
        ax.grid(True, color="0.9", linewidth=0.4)
        ax.set_axisbelow(True)
    for i, ax in enumerate(axes):
        if i % cols:
            ax.tick_params(labelleft=False)
        if i + cols < n and shared_axis:  # a panel below shows the same δ axis
            ax.tick_params(labelbottom=False)
    top.supxlabel(math(value_label), fontsize=None)
    top.supylabel("Above onset (m)", fontsize=None)
    age_stages = age.stages_in(stages, *_age_span(age_rows))
    age_ax, strip = age.age_axes(bottom, bottom.add_gridspec(1, 1)[0], age_stages, ages_h)
    _age_panel(age_ax, age_rows, age, width)
    lines = [math(title)] if title else []
    if len(skipped):
        lines.append(plain("not aligned, no onset: " + ", ".join(map(str, skipped["section_id"]))))
    if any_depth:
        lines.append("cores: position above onset = onset depth − depth")
    if lines:
        fig.suptitle("\n".join(lines))
    handles = [
        Line2D([], [], color=PALETTE[0], marker="o", markersize=2, linewidth=0.7, label="samples"),
        Line2D([], [], color="0.35", linestyle="--", linewidth=0.7, label="baseline"),
        Line2D([], [], color=EXCURSION_STYLE["onset"][0], linewidth=1.0, label="onset"),
        Line2D(
            [],
            [],
            color=EXCURSION_STYLE["recovery"][0],
            linestyle=":",
            linewidth=1.0,
            label="recovery",
        ),
        Patch(color="0.5", alpha=RANGE_ALPHA * 2, linewidth=0, label="95 % range of position"),
    ]
    handles += [
        Line2D(
            [],
            [],
            color=c,
            marker=m,
            linestyle="-",
            linewidth=1.2,
            markersize=3.5,
            label=f"{lab} age (bar: 95 % range)",
        )
        for c, m, lab in EXCURSION_STYLE.values()
    ]
    legend = fig.legend(
        handles=handles,
        loc="outside lower center",
        ncols=4 if width == "double" else 2,
        frameon=False,
    )
    if ranges_note:
        legend.set_title(ranges_note.replace("\n", " "))
    if strip is not None:
        age.stage_strip(fig, age_ax, strip, age_stages)
    return fig


def _num(row: Any, col: str) -> float:
    """A numeric cell of a table row, NaN when the column is absent or blank."""
    try:
        v = float(row[col])
    except (KeyError, TypeError, ValueError):
        return float("nan")
    return v


def ambiguous(shown: pd.DataFrame, section_id: Any) -> bool:
    """Whether two sources in ``shown`` have a section of this id."""
    return bool(shown.loc[shown["section_id"] == section_id, "source_id"].nunique() > 1)


def _age_span(rows: list[dict[str, Any]]) -> tuple[float, float]:
    """The oldest and youngest age of the age panel, padded by 3 % (old, young)."""
    vals = [v for r in rows for cell in r["cells"].values() for v in cell if np.isfinite(v)]
    if not vals:
        return 1.0, 0.0
    old, young = max(vals), min(vals)
    pad = 0.03 * (old - young) if old > young else 0.5
    return old + pad, young - pad


def _age_rows(per_section: pd.DataFrame, summary: pd.DataFrame | None) -> list[dict[str, Any]]:
    """The rows of the age panel: each section with an age, then each group mean."""
    out: list[dict[str, Any]] = []
    for _, r in per_section.iterrows():
        label = f"{r['section_id']}"
        if r.get("group") is not None and not pd.isna(r.get("group")):
            label += f" · {r['group']}"
        cells = {}
        for m in EXCURSION_STYLE:
            cells[m] = (
                _num(r, f"{m}_age_ma"),
                _num(r, f"{m}_age_p2_5_ma"),
                _num(r, f"{m}_age_p97_5_ma"),
            )
        if any(np.isfinite(c[0]) for c in cells.values()):
            out.append({"label": label, "cells": cells, "mean": False})
    if summary is not None and "scope" in summary.columns:
        for _, r in summary[summary["scope"] == "group"].iterrows():
            cells = {
                m: (
                    _num(r, f"{m}_age_ma_mean"),
                    _num(r, f"{m}_age_ma_mean_p2_5"),
                    _num(r, f"{m}_age_ma_mean_p97_5"),
                )
                for m in EXCURSION_STYLE
            }
            if any(np.isfinite(c[0]) for c in cells.values()):
                out.append({"label": f"mean · {r['group']}", "cells": cells, "mean": True})
    return out


def _age_panel(ax: Axes, rows: list[dict[str, Any]], age: Any, width: str) -> None:
    """Onset, peak and recovery ages per row: the centre as a marker, the 95 % range as a
    bar through it; group means below a rule, in bold; older to the left."""
    offsets = {"onset": -0.22, "peak": 0.0, "recovery": 0.22}
    for y, row in enumerate(rows):
        for m, (centre, lo, hi) in row["cells"].items():
            colour, marker, _ = EXCURSION_STYLE[m]
            yy = y + offsets[m]
            if np.isfinite(lo) and np.isfinite(hi):
                ax.plot(
                    [lo, hi],
                    [yy, yy],
                    color=colour,
                    linewidth=1.2,
                    solid_capstyle="butt",
                    gid=f"{m} age 95 % range",
                )
            if np.isfinite(centre):
                ax.plot(
                    [centre],
                    [yy],
                    marker=marker,
                    color=colour,
                    markersize=3.5,
                    markeredgecolor="white",
                    markeredgewidth=0.4,
                    linestyle="none",
                    zorder=3,
                )
    first_mean = next((i for i, r in enumerate(rows) if r["mean"]), None)
    if first_mean is not None:
        ax.axhline(first_mean - 0.5, color="0.6", linewidth=0.5)
    ax.set_yticks(range(len(rows)), [plain(r["label"]) for r in rows])
    for tick, r in zip(ax.get_yticklabels(), rows, strict=True):
        if r["mean"]:
            tick.set_fontweight("bold")
    ax.set_ylim(len(rows) - 0.5, -0.5)  # first row on top
    age.set_age_axis(ax, *_age_span(rows), width=width)
    ax.grid(True, axis="x", color="0.9", linewidth=0.4)
    ax.set_axisbelow(True)


# --- helpers --------------------------------------------------------------------------


def _frame(df: Any, columns: Sequence[str], what: str) -> pd.DataFrame:
    if not isinstance(df, pd.DataFrame):
        raise DomainError(
            f"The {what} table is not a pandas DataFrame.",
            f"Pass a DataFrame with columns {', '.join(columns)}.",
        )
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise DomainError(
            f"The {what} table has no {', '.join(missing)} column.",
            f"Its columns are {', '.join(columns)}.",
        )
    return df


def _age_alias(df: Any) -> Any:
    if isinstance(df, pd.DataFrame) and "age_ma" not in df.columns and "age" in df.columns:
        return df.rename(columns={"age": "age_ma"})
    return df


def _bins_frame(df: pd.DataFrame) -> pd.DataFrame:
    """Per-bin summaries as group, age_ma, value, lo, hi (from either documented form)."""
    if "age_ma" not in df.columns and {"age_old", "age_young"} <= set(df.columns):
        df = _frame(df, BIN_STATS_COLUMNS, "bins")
        return pd.DataFrame(
            {
                "group": df["group"] if "group" in df.columns else None,
                "age_ma": (df["age_old"].astype(float) + df["age_young"].astype(float)) / 2,
                "value": df["median"],
                "lo": df["q25"],
                "hi": df["q75"],
            }
        )
    return _frame(df, BIN_COLUMNS, "bins")
