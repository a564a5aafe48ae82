"""δ13C–δ18O cross-plots, one figure per section, marking failed and warned records.

Why: a cross-plot is how a geochemist judges covariance and outliers before trusting a
flag. Each plot tells components apart by colour and the worst screening outcome of each
record by marker (failed and warned stand out), draws the least-squares line of δ13C on
δ18O through the section's points, and heads it with each covariance rule's name, its
outcome and its numbers (r, r², n, n_eff, p; r to the digits that keep 0.996 from reading
as 1.00). Drawn at a journal column's width and saved as PNG, SVG and PDF through
``plotting``; matplotlib is imported inside the functions (Agg canvas, no pyplot state).
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from strata13.compile.plotting.style import CARB_LABEL, DEFAULT_WIDTH

if TYPE_CHECKING:
    import pyarrow as pa
    from matplotlib.figure import Figure

Y_LABEL = CARB_LABEL
NO_COMPONENT = "component not stated"
HEIGHT_IN = {"single": 3.6, "double": 4.2}
# marker, marker area (pt²), edge colour — failed and warned stand out from the rest
STYLES = {
    "pass": ("o", 20.0, "white"),
    "untested": ("o", 20.0, "0.45"),
    "warn": ("^", 30.0, "#3d2300"),
    "fail": ("X", 40.0, "#2b0000"),
}
OUTCOME_WORDS = {
    "pass": "passed",
    "warn": "warned (kept)",
    "fail": "failed",
    "untested": "untested / not applicable",
}


def safe_name(*parts: str) -> str:
    """A file name from free text: letters, digits, '-', '_' only, plus a short hash so two
    sections whose names differ only in punctuation do not collide."""
    text = "__".join(parts)
    stem = re.sub(r"[^A-Za-z0-9_-]+", "-", text).strip("-_")[:80] or "section"
    tag = hashlib.sha256(text.encode("utf-8")).hexdigest()[:8]
    return f"{stem}-{tag}.png"


RANKS = ("not applicable", "untested", "pass", "warn", "fail")
SHOWN = ("untested", "untested", "pass", "warn", "fail")


def _marks(rid: pa.Array, results: pa.Table) -> np.ndarray:
    """The worst outcome of each record (fail > warn > pass > untested), vectorised."""
    import pyarrow as pa
    import pyarrow.compute as pc

    rank = pc.index_in(results.column("outcome"), value_set=pa.array(RANKS))
    worst = (
        pa.table({"record_id": results.column("record_id"), "rank": rank})
        .group_by("record_id")
        .aggregate([("rank", "max")])
    )
    at = pc.index_in(rid, value_set=worst.column("record_id"))
    r = pc.fill_null(pc.take(worst.column("rank_max"), at), 1).to_numpy(zero_copy_only=False)
    return np.asarray(SHOWN, dtype=object)[np.asarray(r, dtype=np.int64)]


def cross_plots(
    records: Any,
    results: pa.Table,
    group_stats: pa.Table,
    out_dir: str | Path,
    note: str | None = None,
    width: str = DEFAULT_WIDTH,
) -> list[Path]:
    """Write one cross-plot per (source, section) to ``out_dir``, each as PNG, SVG and PDF
    (``plotting.save``) one journal column ``width`` wide; returns the files. ``note`` is
    each figure's caption line (that demo data are invented)."""
    from strata13.compile.plotting.save import save
    from strata13.compile.plotting.style import journal
    from strata13.compile.screening.evaluate import _as_table, _Columns

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    cols = _Columns(_as_table(records))
    x, y = cols.num("d18o_carb"), cols.num("d13c_carb")
    mark = _marks(cols.text("record_id"), results)
    comp, comp_vals = cols.codes("component")
    components = np.asarray([str(v) for v in comp_vals.to_pylist()] + [NO_COMPONENT], dtype=object)[
        np.where(comp >= 0, comp, len(comp_vals))
    ]
    stats = _stats_by_section(group_stats)
    src, src_vals = cols.codes("source_id")
    sec, sec_vals = cols.codes("section_id")
    ok = (sec >= 0) & np.isfinite(x) & np.isfinite(y)
    idx = np.flatnonzero(ok)
    pair = (src[idx] + 1) * (int(sec.max(initial=0)) + 1) + sec[idx]
    uniq, first, inverse = np.unique(pair, return_index=True, return_inverse=True)
    order = np.argsort(inverse, kind="stable")
    bounds = np.r_[0, np.cumsum(np.bincount(inverse, minlength=uniq.size))]
    names = [
        (str(src_vals[int(src[i])]) if src[i] >= 0 else "", str(sec_vals[int(sec[i])]))
        for i in idx[first]
    ]
    styles = _component_styles(sorted(set(components[idx])))

    written: list[Path] = []
    for k in sorted(range(uniq.size), key=lambda k: names[k]):
        s, t = names[k]
        rows = idx[order[bounds[k] : bounds[k + 1]]]
        lines = stats.get((s, t)) or [f"n = {rows.size}: no covariance rule applied"]
        with journal(width):
            fig = _one(x[rows], y[rows], mark[rows], components[rows], styles, s, t, lines, width)
        written += save(fig, out / safe_name(s, t), note)
    return written


def _component_styles(components: list[str]) -> dict[str, str]:
    """One colour per component, in sorted order (the same in every section's plot)."""
    from strata13.compile.synthesis.figures import PALETTE

    return {c: PALETTE[i % len(PALETTE)] for i, c in enumerate(components)}


def _one(
    x: np.ndarray,
    y: np.ndarray,
    mark: np.ndarray,
    components: np.ndarray,
    styles: dict[str, str],
    source: str,
    section: str,
    lines: list[str],
    width: str,
) -> Figure:
    """One section's cross-plot: colour = component, marker = worst screening outcome,
    the least-squares line of δ13C on δ18O through all its points, the rules' lines above."""
    from matplotlib.lines import Line2D
    from strata13.compile.plotting.style import (
        D18O_LABEL,
        math,
        new_figure,
        plain,
        tidy_ticks,
        wrap,
    )

    text_lines = sum(line.count("\n") + 1 for line in lines)
    fig = new_figure(width, HEIGHT_IN[width] + 0.13 * text_lines)
    ax = fig.add_subplot()
    for kind in ("untested", "pass", "warn", "fail"):
        for comp in sorted(set(components[mark == kind])):
            m = (mark == kind) & (components == comp)
            marker, size, edge = STYLES[kind]
            colour = styles[comp]
            ax.scatter(
                x[m],
                y[m],
                marker=marker,
                facecolors="none" if kind == "untested" else colour,
                edgecolors=colour if kind == "untested" else edge,
                s=size,
                linewidths=0.8 if kind in ("warn", "fail") else 0.5,
                zorder=3,
            )
    handles: list[Any] = [
        Line2D([], [], linestyle="none", marker="s", color=styles[c], markersize=4, label=plain(c))
        for c in sorted(set(components))
    ]
    fit = regression(x, y)
    if fit is not None:
        slope, intercept = fit
        xs = np.array([np.min(x), np.max(x)])
        ax.plot(xs, slope * xs + intercept, color="0.2", linewidth=0.9, zorder=2)
        handles.append(
            Line2D(
                [],
                [],
                color="0.2",
                linewidth=0.9,
                label=math(f"least squares, δ13C on δ18O: slope {_signed(slope, '.2f')}"),
            )
        )
    counts = {k: int((mark == k).sum()) for k in ("pass", "warn", "fail", "untested")}
    handles += [
        Line2D(
            [],
            [],
            linestyle="none",
            marker=STYLES[k][0],
            markerfacecolor="none" if k == "untested" else "0.6",
            markeredgecolor="0.3" if k == "untested" else STYLES[k][2],
            markersize=4,
            label=f"{OUTCOME_WORDS[k]} ({counts[k]})",
        )
        for k in ("pass", "warn", "fail", "untested")
        if counts[k]
    ]
    tidy_ticks(ax)
    ax.set_xlabel(math(D18O_LABEL))
    ax.set_ylabel(math(Y_LABEL))
    title = "\n".join([f"{section} ({source})", *lines])
    ax.set_title(plain(wrap(title, width, 0.95 if width == "single" else 0.7)), loc="left")
    ax.grid(True, color="0.9", linewidth=0.4)
    ax.set_axisbelow(True)
    fig.legend(
        handles=handles,
        loc="outside right upper" if width == "double" else "outside lower center",
        ncols=1 if width == "double" else 2,
        title="component · outcome",
        frameon=False,
    )
    return fig


def regression(x: np.ndarray, y: np.ndarray) -> tuple[float, float] | None:
    """Slope and intercept of the ordinary least-squares line of y on x (None with fewer
    than 3 points or no spread in x)."""
    if x.size < 3 or float(np.ptp(x)) == 0.0:
        return None
    slope, intercept = np.polyfit(x, y, 1)
    return float(slope), float(intercept)


def _stats_by_section(groups: pa.Table | None) -> dict[tuple[str, str], list[str]]:
    """Text-box lines per section from the covariance table: the statistics of a whole
    section; unit groups and moving windows summarised by how many were flagged."""
    out: dict[tuple[str, str], list[str]] = {}
    if groups is None or groups.num_rows == 0:
        return out
    parts: dict[tuple[str, str, str], list[int]] = {}
    for g in groups.to_pylist():
        key = (str(g["source_id"]), str(g["section_id"]))
        if g.get("lithostrat_unit") is None and g.get("centre_m") is None:
            out.setdefault(key, []).append(_line(g))
        else:
            c = parts.setdefault((*key, str(g["rule"])), [0, 0])
            c[0] += 1
            c[1] += g["outcome"] in ("warn", "fail")
    for (s, t, rule), (count, flagged) in parts.items():
        out.setdefault((s, t), []).append(f"{rule}: {count} groups or windows, {flagged} flagged")
    return out


def _line(g: dict[str, Any]) -> str:
    def f(v: Any, spec: str) -> str:
        if v is None or (isinstance(v, float) and not np.isfinite(v)):
            return "–"
        return _signed(v, spec)

    outcome = OUTCOME_WORDS.get(str(g["outcome"]), str(g["outcome"]))
    return (
        f"rule {g['rule']}: {outcome}\n"
        f"r = {f(g['r'], _near_one(g['r']))}, r² = {f(g['r2'], _digits(g['r2']))}, "
        f"n = {g['n']}, n_eff = {f(g['n_eff'], '.1f')}, p = {f(g['p'], '.2g')}"
    )


def _digits(v: Any) -> str:
    """Decimals for r²: those near 1 as ``_near_one``, one significant digit below 0.01
    (0.005, not 0.00)."""
    if isinstance(v, float) and np.isfinite(v) and 0.0 < abs(v) < 0.005:
        return ".1g"
    return _near_one(v)


def _near_one(v: Any) -> str:
    """Decimals that keep a correlation near ±1 from reading as exactly 1 (0.996, not 1.00)."""
    d = 2
    if isinstance(v, float) and np.isfinite(v):
        while d < 6 and abs(v) != 1.0 and round(abs(v), d) == 1.0:
            d += 1
    return f".{d}f"


def _signed(v: float, spec: str) -> str:
    """A number with a true minus sign (−0.45, not -0.45), as the axes print theirs."""
    return format(v, spec).replace("-", "−")
