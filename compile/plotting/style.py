"""Column widths, type sizes and the matplotlib settings every figure is drawn with.

Why: a journal prints a figure one column or the whole page wide and asks for type that
stays readable at that size. Common practice (most earth-science journals' author
guidelines) is about 85 mm for a single column and about 175 mm for a double one, lettering
of 6–8 pt at print size and raster art at 300 dpi or more; these are rules of thumb, not one
journal's requirement. A figure is therefore drawn at its print width, so what the PNG
shows is what the page shows.

Isotope labels use mathtext (``math``): δ¹³C with a true superscript and the component as a
subscript, "‰ VPDB" after it, in the body font.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING, Any

from strata13.errors import OptionError

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

MM_PER_INCH = 25.4
# print widths, common practice (not one journal's rule): single and double column
WIDTHS_MM = {"single": 85.0, "double": 175.0}
# body type at print size: 7 pt fits a single column, 8 pt a double one (6–8 pt is usual)
BODY_PT = {"single": 7.0, "double": 8.0}
DEFAULT_WIDTH = "double"
DPI = 300  # raster art: 300 dpi at print size is the usual minimum
WIDTH_ATTR = "strata13_width"  # the figure remembers its column width for saving

CARB_LABEL = "δ13C carb (‰ VPDB)"
ORG_LABEL = "δ13C org (‰ VPDB)"
D18O_LABEL = "δ18O carb (‰ VPDB)"

_ISOTOPE = re.compile(r"δ(13|18)([CO])(?: (carb|org)\b(?! and))?")


def check_width(width: str) -> str:
    """The width name, or OptionError naming the two there are."""
    if width not in WIDTHS_MM:
        raise OptionError(
            f"--width {width!r} is neither single nor double.",
            "Give --width single (about 85 mm) or --width double (about 175 mm).",
        )
    return width


def width_in(width: str) -> float:
    """The print width in inches."""
    return WIDTHS_MM[check_width(width)] / MM_PER_INCH


def body_pt(width: str) -> float:
    """The body type size in points for a width."""
    return BODY_PT[check_width(width)]


def math(label: str) -> str:
    """A label with every δ13C / δ18O as mathtext: superscript mass number, component as a
    subscript (δ13C carb → $\\delta^{13}\\mathrm{C}_{\\mathrm{carb}}$). A dollar sign of
    the caller's text is escaped, so it is never read as mathtext."""

    def one(m: re.Match[str]) -> str:
        text = rf"\delta^{{{m[1]}}}\mathrm{{{m[2]}}}"
        if m[3]:
            text += rf"_{{\mathrm{{{m[3]}}}}}"
        return f"${text}$"

    return _ISOTOPE.sub(one, plain(label))


def plain(text: str) -> str:
    """Free text (a section name, a title) drawn as it is: dollar signs escaped."""
    return text.replace("$", r"\$")


def rc(width: str) -> dict[str, Any]:
    """matplotlib settings for a figure of this column width."""
    pt = body_pt(width)
    small = pt - 1.0
    return {
        "font.family": "DejaVu Sans",
        "font.size": pt,
        "axes.titlesize": pt,
        "axes.labelsize": pt,
        "xtick.labelsize": small,
        "ytick.labelsize": small,
        "legend.fontsize": small,
        "legend.title_fontsize": small,
        "figure.titlesize": pt + 1.0,
        "mathtext.fontset": "dejavusans",
        "mathtext.default": "regular",
        "axes.linewidth": 0.6,
        "xtick.major.width": 0.6,
        "ytick.major.width": 0.6,
        "xtick.major.size": 3.0,
        "ytick.major.size": 3.0,
        "lines.linewidth": 1.0,
        "lines.markersize": 4.0,
        "patch.linewidth": 0.6,
        "hatch.linewidth": 0.5,
        "grid.linewidth": 0.4,
        "axes.formatter.useoffset": False,  # ages read as ages, never "+1.83e2"
        "figure.facecolor": "white",
        "axes.facecolor": "white",
        "savefig.facecolor": "white",
        "savefig.edgecolor": "white",
        "savefig.transparent": False,
        "figure.dpi": DPI,
        "savefig.dpi": DPI,
        "pdf.fonttype": 42,  # TrueType embedded: text stays text in the PDF
        "svg.fonttype": "path",  # the SVG looks the same wherever it is opened
        "svg.hashsalt": "strata13",
        "svg.id": "strata13-figure",
    }


@contextmanager
def journal(width: str) -> Iterator[None]:
    """Draw (and save) inside this block to get the column width's look."""
    import matplotlib

    settings: Any = rc(width)  # matplotlib's stubs list the keys as literals
    with matplotlib.rc_context(settings):
        yield


def new_figure(width: str, height_in: float) -> Figure:
    """A white figure at the column's print width, ``height_in`` inches tall, on the Agg
    canvas (no pyplot, no display). Call inside ``journal(width)``."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in(width), height_in), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    setattr(fig, WIDTH_ATTR, width)
    return fig


def wrap(text: str, width: str, share: float = 1.0, size_pt: float | None = None) -> str:
    """``text`` broken into lines that fit ``share`` of the column's print width in type of
    ``size_pt`` (the body size by default); a DejaVu Sans character averages about 0.55 em."""
    import textwrap

    pt = size_pt if size_pt is not None else body_pt(width)
    chars = max(20, int(width_in(width) * share * 72.0 / (0.55 * pt)))
    return "\n".join(w for line in text.split("\n") for w in textwrap.wrap(line, chars) or [""])


def tidy_ticks(ax: Axes) -> None:
    """Ticks at 1, 2 or 5 times a power of ten on both axes (−3.5, −3.0 …, never −3.25),
    so tick labels carry no more digits than the data need."""
    from matplotlib.ticker import MaxNLocator

    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(MaxNLocator(nbins="auto", steps=[1, 2, 5, 10]))


def figure_width(fig: Figure) -> str:
    """The column width a figure was made for (``DEFAULT_WIDTH`` if made elsewhere)."""
    width = getattr(fig, WIDTH_ATTR, DEFAULT_WIDTH)
    return width if width in WIDTHS_MM else DEFAULT_WIDTH
