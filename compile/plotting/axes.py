"""The age axis every age-based figure shares: older to the left, with the stage strip.

Why one direction: a reader comparing the curve, the excursion ages, an age model and the
coverage of one compilation should never have to turn one of them round. Time reads left
to right (older on the left, age in Ma decreasing to the right), as a stratigraphic column
laid on its side. The stage strip sits under the plot, in its own axes, so stage names
never cover a point; a name wider than its box is left out rather than overlapped.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure, SubFigure
    from matplotlib.gridspec import SubplotSpec

AGE_LABEL = "Age (Ma)"
OLDER_ON_LEFT = True
TIME_DIRECTION = "older to the left: age (Ma) decreases from left to right"
STAGE_SHADE = ("#f2f2f2", "#fafafa")  # alternating stage bands in a plot
STAGE_STRIP = ("#d6d6d6", "#efefef")  # alternating boxes in the name strip
STRIP_IN = 0.2  # height of the stage strip in inches

Stage = tuple[str, float, float]  # name, base (older) Ma, top (younger) Ma


def set_age_axis(
    ax: Axes, old: float, young: float, label: bool = True, width: str = "double"
) -> None:
    """Age from ``old`` (left) to ``young`` (right) on the x axis of ``ax``, with round
    ticks (1, 2 or 5 × a power of ten) spaced for the column ``width``."""
    from matplotlib.ticker import MaxNLocator

    ax.set_xlim((old, young) if OLDER_ON_LEFT else (young, old))
    ax.xaxis.set_major_locator(
        MaxNLocator(nbins=6 if width == "single" else 9, steps=[1, 2, 5, 10])
    )
    if label:
        ax.set_xlabel(AGE_LABEL)


def older_on_left(ax: Axes) -> bool:
    """Whether the x axis of ``ax`` runs from older (left) to younger (right)."""
    left, right = ax.get_xlim()
    return bool(left > right)


def chart_stages(scale: str) -> list[Stage]:
    """The stages of a time-scale chart as (name, base, top), oldest first."""
    from strata13.schemas import timescales

    units = timescales.load(scale).units_of("stage")
    return sorted(((u.name, u.base_ma, u.top_ma) for u in units), key=lambda s: -s[1])


def stages_in(stages: Sequence[Stage] | None, old: float, young: float) -> list[Stage]:
    """The stages overlapping [young, old], clipped to it, oldest first."""
    out = []
    for name, base, top in stages or ():
        b, t = min(float(base), old), max(float(top), young)
        if b > t:
            out.append((str(name), b, t))
    return sorted(out, key=lambda s: -s[1])


def age_axes(
    fig: Figure | SubFigure, cell: SubplotSpec, stages: Sequence[Stage], height_in: float
) -> tuple[Axes, Axes | None]:
    """A plot and, when there are ``stages``, a stage strip under it sharing its age axis,
    both in ``cell``; ``height_in`` is the cell's height (for the strip's share)."""
    if not stages:
        return fig.add_subplot(cell), None
    grid = cell.subgridspec(2, 1, height_ratios=[max(height_in - STRIP_IN, 0.5), STRIP_IN])
    ax = fig.add_subplot(grid[0])
    strip = fig.add_subplot(grid[1], sharex=ax)
    return ax, strip


def shade_stages(ax: Axes, stages: Sequence[Stage]) -> None:
    """Alternating light bands behind the data, one per stage."""
    for i, (_, base, top) in enumerate(stages):
        ax.axvspan(base, top, color=STAGE_SHADE[i % 2], linewidth=0, zorder=0)


def stage_strip(fig: Figure, ax: Axes, strip: Axes, stages: Sequence[Stage]) -> None:
    """Fill the strip under ``ax`` with the stage names (call last: the names are
    measured against the final layout). The age label and ticks move to the strip."""
    ax.tick_params(labelbottom=False)
    xlabel = ax.get_xlabel()
    ax.set_xlabel("")
    strip.set_xlabel(xlabel)
    strip.set_ylim(0, 1)
    strip.set_yticks([])
    for side in ("top", "left", "right"):
        strip.spines[side].set_visible(False)
    texts: list[tuple[Any, float, float]] = []
    for i, (name, base, top) in enumerate(stages):
        strip.axvspan(base, top, color=STAGE_STRIP[i % 2], linewidth=0)
        t = strip.text(
            (base + top) / 2, 0.5, name, ha="center", va="center", clip_on=True, fontsize="small"
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
