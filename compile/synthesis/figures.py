"""Synthesis figures: the composite δ13C curve against age, and sections aligned on their
excursion onset.

Direction of time: on the curve figure age grows to the **left** (older on the left, the
x axis runs from old to young), so time reads left to right (``OLDER_ON_LEFT``).

Groups are told apart by colour *and* marker. The palette (``PALETTE``) is our own: six
colours chosen to differ in lightness as well as on the blue–yellow axis, so that they stay
apart under simulated deutan, protan and tritan vision (checked in the tests). Legends sit
outside the axes, where they can hide nothing; stage names sit in a strip of their own
under the plot, never over the points.

matplotlib is imported inside the functions, through its object API with the Agg canvas (no
pyplot state, no display). ``save_figure`` writes PNG at ``DPI`` without software metadata
and SVG with a fixed hash salt, a fixed creator and no date, so the same input gives the same
bytes.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from strata13.compile.synthesis.excursion import _value_column

from strata13.errors import DomainError

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

DPI = 150
OLDER_ON_LEFT = True
TIME_DIRECTION = "older to the left: age (Ma) decreases from left to right"
CARB_LABEL = "δ13C carb (‰ VPDB)"
ORG_LABEL = "δ13C org (‰ VPDB)"
AGE_LABEL = "Age (Ma)"
MERGED_NOTE = "carbonate and organic δ13C merged on request"
# ink blue, amber, orchid, sky, umber, teal: lightness 26–73 with blue/yellow contrast
PALETTE = ("#173f7a", "#e69519", "#b55aa8", "#74c0e8", "#5e4208", "#2f8f7f")
MARKERS = ("o", "s", "^", "D", "v", "P")
STAGE_SHADE = ("#ececec", "#f7f7f7")  # alternating stage bands in the plot
STAGE_STRIP = ("#d6d6d6", "#efefef")  # alternating boxes in the name strip
ROBUST_COLOUR = "0.55"
SVG_SALT = "strata13"
SVG_CREATOR = "strata13"

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
    stages: Sequence[tuple[str, float, float]] | None = None,
    group_label: str = "group",
    title: str = "",
    size: tuple[float, float] = (8.0, 5.0),
    value_label: str = CARB_LABEL,
    merged: bool = False,
    note: str = "",
) -> Figure:
    """δ13C against age: points by group, the LOESS curve of each group and its band.

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
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    samples = _frame(samples, SAMPLE_COLUMNS, "samples")
    curve = _frame(_age_alias(curve), CURVE_COLUMNS[:3], "curve")
    robustness = (
        None if robustness is None else _frame(_age_alias(robustness), ROBUST_COLUMNS, "robustness")
    )
    bin_table = _bins_frame(bins) if isinstance(bins, pd.DataFrame) else None
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

    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    stage_list = _stages_in(stages, old, young)
    if stage_list:
        strip_h = 0.32 / max(size[1] - 1.3, 1.0)  # about a third of an inch
        ax, strip = fig.subplots(2, 1, sharex=True, height_ratios=[1.0, strip_h])
    else:
        ax, strip = fig.add_subplot(), None
    styles = group_style(list(pts["group"]) + list(fit["group"]))
    handles: list[Any] = []

    for i, (_, base, top) in enumerate(stage_list):
        ax.axvspan(base, top, color=STAGE_SHADE[i % 2], linewidth=0, zorder=0)
    if bin_edges is not None:
        for e in bin_edges[np.isfinite(bin_edges)]:
            ax.axvline(e, color="0.75", linestyle=":", linewidth=0.7, zorder=1)
        handles.append(
            Line2D([], [], color="0.75", linestyle=":", linewidth=0.7, label="bin edges")
        )

    band_drawn = False
    for g, (colour, marker) in styles.items():
        p = pts[pts["group"] == g]
        c = fit[fit["group"] == g].sort_values("age_ma", kind="stable")
        if len(p):
            ax.scatter(
                p["age_ma"],
                p["value"],
                s=14,
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
                markersize=5,
                linewidth=2.0 if len(c) else 0.0,
                label=f"{g} (n = {len(p)})",
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
                part["age_ma"], part["fit"], color=ROBUST_COLOUR, linewidth=0.6, alpha=0.7, zorder=3
            )
        handles.append(
            Line2D([], [], color=ROBUST_COLOUR, linewidth=0.6, label="refits, one left out each")
        )

    from matplotlib import patheffects

    halo = [patheffects.Stroke(linewidth=3.4, foreground="white"), patheffects.Normal()]
    for g, (colour, _) in styles.items():
        c = fit[fit["group"] == g].sort_values("age_ma", kind="stable")
        if len(c):
            ax.plot(c["age_ma"], c["fit"], color=colour, linewidth=2.0, zorder=4, path_effects=halo)
    if band_drawn:
        handles.append(Patch(color="0.5", alpha=0.3, linewidth=0, label="curve band (lo–hi)"))
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
                markersize=5,
                markerfacecolor="white",
                markeredgecolor=colour,
                ecolor=colour,
                elinewidth=1.0,
                capsize=2,
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
                label="bin summaries",
            )
        )

    ax.set_xlim((old, young) if OLDER_ON_LEFT else (young, old))
    ax.set_ylabel(value_label)
    ax.grid(True, color="0.88", linewidth=0.5)
    ax.set_axisbelow(True)
    bottom = strip if strip is not None else ax
    bottom.set_xlabel(AGE_LABEL)
    notes = ([MERGED_NOTE] if merged else []) + ([note] if note else [])
    if notes:
        import textwrap

        width = max(40, int(11 * size[0]))  # characters that fit above the plot, about
        lines = [w for n in notes for w in textwrap.wrap(n, width)]
        ax.set_title("\n".join(lines), fontsize="small", style="italic", loc="left")
    if title:
        fig.suptitle(title)
    fig.legend(
        handles=handles,
        loc="outside right upper",
        title=group_label,
        fontsize="small",
        title_fontsize="small",
        frameon=False,
    )
    if strip is not None:  # last: names are measured against the final layout
        ax.tick_params(labelbottom=False)
        _stage_strip(fig, strip, stage_list)
    return fig


def excursion_figure(
    df: pd.DataFrame,
    per_section: pd.DataFrame,
    size: tuple[float, float] | None = None,
    group_col: str | None = None,
    value_col: str | None = None,
    value_label: str = CARB_LABEL,
    title: str = "",
) -> Figure:
    """Each section's δ13C against its position relative to the onset, one panel per
    section side by side, sharing that vertical axis (0 = onset, up = younger: height −
    onset height, or onset depth − depth). The baseline is a dashed vertical line, the
    onset a solid and the recovery a dotted horizontal line.

    ``df`` holds the records (source_id, section_id, position_m, the value column —
    ``value_col``, else value, else d13c_carb — and ``group_col`` when per_section was
    made with one); ``per_section`` is excursion.per_section()'s table. Sections without
    an onset cannot be aligned: they are named in the figure title instead. ``size``
    defaults to 1.9 in per panel (at least 4 in) by 6 in. DomainError when no section has
    an onset."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

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
    n = len(shown)
    size = size if size is not None else (max(4.0, 1.9 * n + 1.2), 6.0)
    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, n, sharey=True, squeeze=False)[0]
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
        y = (onset - pos[keep]) if depth else (pos[keep] - onset)
        order = np.argsort(y, kind="stable")
        ax.plot(
            val[keep][order],
            y[order],
            color=PALETTE[0],
            linewidth=0.9,
            marker="o",
            markersize=3,
            zorder=3,
        )
        ax.axvline(float(row["baseline"]), color="0.35", linestyle="--", linewidth=1.0)
        ax.axhline(0.0, color=PALETTE[1], linewidth=1.3)
        rec = float(row["recovery_position_m"])
        if np.isfinite(rec):
            ax.axhline(
                (onset - rec) if depth else (rec - onset),
                color=PALETTE[1],
                linestyle=":",
                linewidth=1.3,
            )
        label = str(row["section_id"]) + "\n" + str(row["source_id"])
        if group_col and row["group"] is not None:
            label += f"\n{row['group']}"
        ax.set_title(label, fontsize="small")
        ax.grid(True, color="0.9", linewidth=0.5)
        ax.set_axisbelow(True)
        ax.tick_params(labelsize="small")
    axes[0].set_ylabel(
        "Position above onset (m)" + ("; depths: onset − depth" if any_depth else "")
    )
    fig.supxlabel(value_label, fontsize="medium")
    lines = [title] if title else []
    if len(skipped):
        lines.append(
            "not shown, no onset to align on: " + ", ".join(map(str, skipped["section_id"]))
        )
    if lines:
        fig.suptitle("\n".join(lines), fontsize="medium")
    handles = [
        Line2D([], [], color=PALETTE[0], marker="o", markersize=3, linewidth=0.9, label="samples"),
        Line2D([], [], color="0.35", linestyle="--", label="baseline"),
        Line2D([], [], color=PALETTE[1], linewidth=1.3, label="onset"),
        Line2D([], [], color=PALETTE[1], linestyle=":", linewidth=1.3, label="recovery"),
    ]
    fig.legend(handles=handles, loc="outside right upper", fontsize="small", frameon=False)
    return fig


# printed on every figure drawn from a store the demo made
INVENTED_NOTE = "Invented data (strata13 demo)"


def mark(fig: Figure, note: str | None, top: bool = False) -> None:
    """Write ``note`` in small type in the figure's bottom right corner (``top``: the top
    right corner, for figures whose legend sits below the axes); nothing for None."""
    if note:
        y, va = (0.996, "top") if top else (0.004, "bottom")
        fig.text(0.995, y, note, ha="right", va=va, fontsize="x-small", color="0.3")


def save_figure(
    fig: Figure,
    path_png: str | Path | None,
    path_svg: str | Path | None,
    note: str | None = None,
) -> tuple[Path | None, Path | None]:
    """Write ``fig`` as PNG (``DPI``, no software tag: PNG from Agg carries no date) and as
    SVG (hash salt ``SVG_SALT``, creator ``SVG_CREATOR``, no date), either may be None.
    ``note`` goes in small type in the bottom right corner (``INVENTED_NOTE`` for demo data).
    The same figure inputs give the same bytes. Returns the two paths."""
    import matplotlib

    mark(fig, note)

    png = None if path_png is None else Path(path_png)
    svg = None if path_svg is None else Path(path_svg)
    with matplotlib.rc_context(
        {"svg.hashsalt": SVG_SALT, "svg.id": "strata13-figure", "svg.fonttype": "path"}
    ):
        if png is not None:
            fig.savefig(png, format="png", dpi=DPI, metadata={"Software": None})
        if svg is not None:
            fig.savefig(svg, format="svg", metadata={"Date": None, "Creator": SVG_CREATOR})
    return png, svg


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


def _stages_in(
    stages: Sequence[tuple[str, float, float]] | None, old: float, young: float
) -> list[tuple[str, float, float]]:
    """The stages overlapping [young, old], clipped to it, oldest first."""
    out = []
    for name, base, top in stages or ():
        b, t = min(float(base), old), max(float(top), young)
        if b > t:
            out.append((str(name), b, t))
    return sorted(out, key=lambda s: -s[1])


def _stage_strip(fig: Figure, strip: Axes, stages: list[tuple[str, float, float]]) -> None:
    """Alternating boxes with the stage names; a name wider than its box is dropped."""
    strip.set_ylim(0, 1)
    strip.set_yticks([])
    for side in ("top", "left", "right"):
        strip.spines[side].set_visible(False)
    texts = []
    for i, (name, base, top) in enumerate(stages):
        strip.axvspan(base, top, color=STAGE_STRIP[i % 2], linewidth=0)
        t = strip.text(
            (base + top) / 2, 0.5, name, ha="center", va="center", fontsize="small", clip_on=True
        )
        t.set_in_layout(False)
        texts.append((t, base, top))
    fig.canvas.draw()  # lay the figure out, so text and box widths are final
    # the Agg canvas the figures draw on has get_renderer; matplotlib's stubs type the canvas
    # as FigureCanvasBase, which does not declare it
    renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]
    for t, base, top in texts:
        x0, x1 = strip.transData.transform([(base, 0.5), (top, 0.5)])[:, 0]
        if t.get_window_extent(renderer).width > abs(x1 - x0) - 4:
            t.set_visible(False)
