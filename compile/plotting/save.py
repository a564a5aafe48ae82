"""The one function that writes a figure: PNG at 300 dpi, SVG and PDF, with its caption.

Why one function: every figure the tool writes (curve, excursion, age model, cross-plots,
coverage) must reach a journal in the same three forms — a raster for review, two vector
files for print — and carry the same caption line when its data are invented. The files
carry no date and a fixed creator, so the same figure gives the same bytes.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from strata13.compile.plotting.style import DPI, body_pt, figure_width, journal

if TYPE_CHECKING:
    from matplotlib.figure import Figure

FORMATS = ("png", "svg", "pdf")
CREATOR = "strata13"
# the caption line of every figure drawn from a store the demo made
INVENTED_NOTE = "strata13 demo store: invented demo data, not a real record"
CAPTION_COLOUR = "0.25"


def paths_for(path: str | Path) -> dict[str, Path]:
    """The three files of one figure: ``x.png`` (or ``x``) → x.png, x.svg, x.pdf."""
    p = Path(path)
    stem = p.with_suffix("") if p.suffix.lower() in {f".{f}" for f in FORMATS} else p
    return {f: stem.with_name(f"{stem.name}.{f}") for f in FORMATS}


def caption(fig: Figure, text: str | None) -> None:
    """Write ``text`` as the figure's caption line, bottom left, in small italic type; the
    constrained layout keeps a strip free for it, so it never overlaps a label. Nothing for
    None or an empty text."""
    if not text:
        return
    from matplotlib.layout_engine import ConstrainedLayoutEngine

    pt = body_pt(figure_width(fig)) - 1.0
    frac = (pt * 2.0 / 72.0) / fig.get_figheight()  # two lines of type, as a fraction
    engine = fig.get_layout_engine()
    if isinstance(engine, ConstrainedLayoutEngine):
        # a legend "outside lower" sits at the figure's foot whatever the layout's rect: lift
        # it above the caption and keep the axes above it
        bottom = frac
        with journal(figure_width(fig)):
            fig.canvas.draw()
        renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]
        pad = 4.0 / 72.0 / fig.get_figheight()
        for leg in fig.legends:
            if getattr(leg, "_outside_loc", None) != "lower":
                continue
            box = leg.get_window_extent(renderer).transformed(fig.transFigure.inverted())
            leg.set_bbox_to_anchor((0.0, frac, 1.0, 1.0 - frac), transform=fig.transFigure)
            bottom = max(bottom, frac + box.height + pad)
        engine.set(rect=(0.0, bottom, 1.0, 1.0 - bottom))
    fig.text(
        0.01,
        frac * 0.25,
        text,
        ha="left",
        va="bottom",
        fontsize=pt,
        style="italic",
        color=CAPTION_COLOUR,
        gid="caption",
    )


def save(fig: Figure, path: str | Path, note: str | None = None) -> list[Path]:
    """Write ``fig`` as ``path``'s PNG (``DPI``), SVG and PDF (``paths_for``), with ``note``
    as its caption line (``INVENTED_NOTE`` for demo data); returns the three paths."""
    caption(fig, note)
    out = paths_for(path)
    with journal(figure_width(fig)):
        fig.savefig(out["png"], format="png", dpi=DPI, metadata={"Software": None})
        fig.savefig(out["svg"], format="svg", metadata={"Date": None, "Creator": CREATOR})
        fig.savefig(
            out["pdf"],
            format="pdf",
            metadata={"CreationDate": None, "ModDate": None, "Creator": CREATOR, "Producer": None},
        )
    return [out[f] for f in FORMATS]
