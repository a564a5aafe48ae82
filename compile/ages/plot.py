"""The picture of one section's age model: median age against position, its 95 % band, the
ties with their 2σ error bars, hiatus levels dashed.

Position is on the vertical axis the way the rock lies: height grows upward, depth grows
downward. The legend sits below the axes, outside them, so it can never hide a tie or the
curve. matplotlib is imported here only, through its object API and the Agg canvas (no
pyplot state, no display); the PNG carries no software or date metadata, so the same input
gives the same bytes.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from strata13.compile.ages.agemodel import BASES, EXTRAPOLATED, POSITION_KINDS, Summary, Tie

from strata13.errors import DomainError

if TYPE_CHECKING:
    from matplotlib.figure import Figure

DPI = 150
MARKERS = dict(zip(BASES, ("s", "D", "o", "^", "v"), strict=True))
COLOURS = dict(zip(BASES, ("#1b6ca8", "#6a4c93", "#c0392b", "#2e8b57", "#b8860b"), strict=True))


def plot_section(
    ties: Sequence[Tie],
    positions: Sequence[float] | np.ndarray,
    summary: Summary,
    position_kind: str,
    title: str,
    path: str | Path,
    size: tuple[float, float] = (6.0, 7.0),
    flags: np.ndarray | None = None,
    note: str | None = None,
) -> Path:
    """Write the section's age-model figure as PNG to ``path`` (inches ``size``); return it.

    ``flags`` (from ``draw_section``) draws extrapolated stretches of the median dotted;
    ``note`` goes in small type in the top right corner (that demo data are invented)."""
    from strata13.compile.synthesis.figures import mark

    fig = figure(ties, positions, summary, position_kind, title, size, flags)
    mark(fig, note, top=True)  # the legend sits below the axes
    out = Path(path)
    fig.savefig(out, format="png", dpi=DPI, metadata={"Software": None})
    return out


def figure(
    ties: Sequence[Tie],
    positions: Sequence[float] | np.ndarray,
    summary: Summary,
    position_kind: str,
    title: str,
    size: tuple[float, float] = (6.0, 7.0),
    flags: np.ndarray | None = None,
) -> Figure:
    """The figure itself (an Agg canvas is attached), for callers that want to adjust it."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    if position_kind not in POSITION_KINDS:
        raise DomainError(
            f"position kind {position_kind!r} is neither 'height' nor 'depth'.",
            "Give the section's position kind: height or depth.",
        )
    pos = np.asarray(positions, dtype=float)
    order = np.argsort(pos, kind="stable")
    pos = pos[order]
    med, lo, hi = summary.median[order], summary.lo95[order], summary.hi95[order]
    dated = np.isfinite(med) & np.isfinite(pos)
    extra = (
        np.zeros(len(pos), bool)
        if flags is None
        else np.asarray(flags, dtype=object)[order] == EXTRAPOLATED
    )

    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    if dated.any():
        ax.fill_betweenx(
            pos,
            lo,
            hi,
            where=dated,
            color="#9ecae1",
            alpha=0.6,
            linewidth=0,
            label="95 % interval of the draws",
        )
        ax.plot(
            np.where(dated & ~extra, med, np.nan),
            pos,
            color="#08306b",
            linewidth=1.4,
            label="median age",
        )
        if extra.any():
            ax.plot(
                np.where(dated & extra, med, np.nan),
                pos,
                color="#08306b",
                linewidth=1.4,
                linestyle=":",
                label="median age, extrapolated",
            )
    levels = sorted(
        {t.position_m for t in ties if sum(u.position_m == t.position_m for u in ties) == 2}
    )
    for i, level in enumerate(levels):
        ax.axhline(
            level, color="0.35", linestyle="--", linewidth=0.9, label="hiatus" if i == 0 else None
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
            markersize=5,
            capsize=3,
            linewidth=1,
            label=f"{basis} tie (±2σ)",
            zorder=3,
        )
    ax.set_xlabel("Age (Ma)")
    ax.set_ylabel("Height (m)" if position_kind == "height" else "Depth (m)")
    if position_kind == "depth":
        ax.invert_yaxis()
    ax.set_title(title)
    ax.grid(True, color="0.9", linewidth=0.6)
    ax.set_axisbelow(True)
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(
        handles, labels, loc="outside lower center", ncols=2, fontsize="small", frameon=False
    )
    return fig
