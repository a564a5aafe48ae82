"""The picture of one section's age model: median age against position, its 95 % band,
every sample at its median age, the ties (kind by marker, with 2σ error bars), hiatus
levels dashed.

Age runs along the horizontal axis older to the left, as in every figure of the tool
(``plotting.axes``), with the stage strip under it; position is on the vertical axis the
way the rock lies: height grows upward, depth grows downward. The band edges and the
median are drawn through their values at the samples with a monotone cubic (PCHIP,
``smooth``): the curve passes through every computed percentile and never overshoots, so
the edges are smooth without being invented; a hiatus breaks them. The legend sits below
the axes, outside them, so it can never hide a tie or the curve. matplotlib is imported
here only, inside the functions (the Agg canvas, no pyplot state).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from strata13.compile.ages.agemodel import BASES, EXTRAPOLATED, POSITION_KINDS, Summary, Tie
from strata13.compile.plotting.style import DEFAULT_WIDTH

from strata13.errors import DomainError

if TYPE_CHECKING:
    from matplotlib.figure import Figure
    from strata13.compile.plotting.axes import Stage

MARKERS = dict(zip(BASES, ("s", "D", "o", "^", "v"), strict=True))
COLOURS = dict(zip(BASES, ("#1b6ca8", "#6a4c93", "#c0392b", "#2e8b57", "#b8860b"), strict=True))
HEIGHT_IN = {"single": 3.9, "double": 4.2}
SMOOTH_POINTS = 400  # points of a smoothed edge over the section's whole span


def plot_section(
    ties: Sequence[Tie],
    positions: Sequence[float] | np.ndarray,
    summary: Summary,
    position_kind: str,
    title: str,
    path: str | Path,
    width: str = DEFAULT_WIDTH,
    flags: np.ndarray | None = None,
    note: str | None = None,
    stages: Sequence[Stage] | None = None,
) -> list[Path]:
    """Write the section's age-model figure (PNG, SVG and PDF beside ``path``, see
    ``plotting.save``) at a journal column ``width``; return the three files.

    ``flags`` (from ``draw_section``) draws extrapolated stretches of the median dotted;
    ``note`` is the caption line (that demo data are invented); ``stages`` the chart's
    stages for the strip under the age axis."""
    from strata13.compile.plotting.save import save

    fig = figure(ties, positions, summary, position_kind, title, width, flags, stages)
    return save(fig, path, note)


def figure(
    ties: Sequence[Tie],
    positions: Sequence[float] | np.ndarray,
    summary: Summary,
    position_kind: str,
    title: str,
    width: str = DEFAULT_WIDTH,
    flags: np.ndarray | None = None,
    stages: Sequence[Stage] | None = None,
) -> Figure:
    """The figure itself (an Agg canvas is attached), for callers that want to adjust it."""
    from strata13.compile.plotting.style import journal

    if position_kind not in POSITION_KINDS:
        raise DomainError(
            f"position kind {position_kind!r} is neither 'height' nor 'depth'.",
            "Give the section's position kind: height or depth.",
        )
    with journal(width):
        return _figure(ties, positions, summary, position_kind, title, width, flags, stages)


def _figure(
    ties: Sequence[Tie],
    positions: Sequence[float] | np.ndarray,
    summary: Summary,
    position_kind: str,
    title: str,
    width: str,
    flags: np.ndarray | None,
    stages: Sequence[Stage] | None,
) -> Figure:
    from strata13.compile.plotting import axes as age
    from strata13.compile.plotting.style import new_figure, plain

    pos = np.asarray(positions, dtype=float)
    order = np.argsort(pos, kind="stable")
    pos = pos[order]
    med, lo, hi = summary.median[order], summary.lo95[order], summary.hi95[order]
    dated = np.isfinite(med) & np.isfinite(lo) & np.isfinite(hi) & np.isfinite(pos)
    extra = (
        np.zeros(len(pos), bool)
        if flags is None
        else np.asarray(flags, dtype=object)[order] == EXTRAPOLATED
    )
    levels = sorted(
        {t.position_m for t in ties if sum(u.position_m == t.position_m for u in ties) == 2}
    )

    height = HEIGHT_IN[width]
    fig = new_figure(width, height)
    tie_ages = [
        a for t in ties for a in (t.age_ma - 2 * t.age_sigma_ma, t.age_ma + 2 * t.age_sigma_ma)
    ]
    span = np.concatenate([lo[dated], hi[dated], np.asarray(tie_ages, dtype=float)])
    span = span[np.isfinite(span)]
    old, young = (float(span.max()), float(span.min())) if span.size else (1.0, 0.0)
    pad = 0.03 * (old - young) if old > young else 0.5
    old, young = old + pad, young - pad
    stage_list = age.stages_in(stages, old, young)
    ax, strip = age.age_axes(fig, fig.add_gridspec(1, 1)[0], stage_list, height)

    if dated.any():
        pieces = smooth(pos[dated], lo[dated], hi[dated], med[dated], levels)
        shown_extra = False
        for k, (y, a, b, m) in enumerate(pieces):
            ax.fill_betweenx(
                y,
                a,
                b,
                color="#9ecae1",
                alpha=0.6,
                linewidth=0,
                label="95 % interval of the draws" if k == 0 else None,
            )
            # beyond the outermost ties the median is extrapolated: dotted there
            out = np.interp(y, pos[dated], extra[dated].astype(float)) > 0.5
            ax.plot(
                np.where(out, np.nan, m),
                y,
                color="#08306b",
                linewidth=1.1,
                label="median age" if k == 0 else None,
            )
            if out.any():
                ax.plot(
                    np.where(out, m, np.nan),
                    y,
                    color="#08306b",
                    linewidth=1.1,
                    linestyle=":",
                    label=None if shown_extra else "median age, extrapolated",
                )
                shown_extra = True
        ax.plot(
            med[dated],
            pos[dated],
            linestyle="none",
            marker="o",
            markersize=2.6,
            markerfacecolor="white",
            markeredgecolor="#08306b",
            markeredgewidth=0.6,
            label=f"sample at its median age (n = {int(dated.sum())})",
            zorder=2.8,
        )
    for i, level in enumerate(levels):
        ax.axhline(
            level, color="0.35", linestyle="--", linewidth=0.8, label="hiatus" if i == 0 else None
        )
    for basis in BASES:
        group = [t for t in ties if t.basis == basis]
        if not group:
            continue
        yerr = [2 * (t.position_sigma_m or 0.0) for t in group]
        ax.errorbar(
            [t.age_ma for t in group],
            [t.position_m for t in group],
            xerr=[2 * t.age_sigma_ma for t in group],
            yerr=yerr if any(yerr) else None,
            fmt=MARKERS[basis],
            color=COLOURS[basis],
            markersize=4,
            markeredgecolor="white",
            markeredgewidth=0.4,
            capsize=2,
            linewidth=0.8,
            label=f"{basis} tie (±2σ)",
            zorder=3,
        )
    age.set_age_axis(ax, old, young, width=width)
    ax.set_ylabel("Height (m)" if position_kind == "height" else "Depth (m)")
    if position_kind == "depth":
        ax.invert_yaxis()
    ax.set_title(plain(title))
    ax.grid(True, color="0.9", linewidth=0.4)
    ax.set_axisbelow(True)
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False)
    if strip is not None:
        age.stage_strip(fig, ax, strip, stage_list)
    return fig


def smooth(
    pos: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    med: np.ndarray,
    breaks: Sequence[float] = (),
) -> list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """The band edges and the median on a fine grid of positions, one piece per stretch
    between ``breaks`` (hiatus levels): a monotone cubic through the values at the samples
    (scipy's PchipInterpolator, Fritsch & Carlson 1980), which passes through every value
    and adds no extremum between two; a stretch of one or two samples stays straight.
    ``pos`` ascending, all inputs finite."""
    from scipy.interpolate import PchipInterpolator

    cuts = np.searchsorted(pos, np.asarray(sorted(breaks), dtype=float), side="right")
    pieces = []
    total = float(pos[-1] - pos[0]) if pos.size > 1 else 0.0
    for idx in np.split(np.arange(pos.size), cuts):
        p = pos[idx]
        if p.size == 0:
            continue
        p, first = np.unique(p, return_index=True)  # one value per position
        a, b, m = (v[idx][first] for v in (lo, hi, med))
        if p.size < 3:
            pieces.append((p, a, b, m))
            continue
        n = max(int(SMOOTH_POINTS * (p[-1] - p[0]) / total) if total else 0, 3 * p.size)
        grid = np.union1d(np.linspace(p[0], p[-1], n), p)

        def fine(v: np.ndarray, p: np.ndarray = p, grid: np.ndarray = grid) -> np.ndarray:
            return np.asarray(PchipInterpolator(p, v)(grid), dtype=float)

        pieces.append((grid, fine(a), fine(b), fine(m)))
    return pieces
