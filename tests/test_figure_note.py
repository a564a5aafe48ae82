"""Figures drawn from the demo's invented data say so; figures of a user's store do not."""

from __future__ import annotations

from pathlib import Path

from strata13.compile import api
from strata13.compile.plotting.save import INVENTED_NOTE, caption


def test_a_demo_store_marks_its_figures_and_a_users_store_does_not(tmp_path: Path) -> None:
    demo = api.init_store(tmp_path / "demo", made_by="demo")
    mine = api.init_store(tmp_path / "mine")
    assert api.figure_note(demo) == INVENTED_NOTE and "invented demo data" in INVENTED_NOTE
    assert api.figure_note(mine) is None


def test_caption_writes_the_note_under_everything_and_nothing_without_one() -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3.35, 3.0), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.set_xlabel("Age (Ma)")
    fig.legend(handles=ax.plot([0, 1], label="line"), loc="outside lower center")
    caption(fig, None)
    assert fig.texts == []
    caption(fig, INVENTED_NOTE)
    assert [t.get_text() for t in fig.texts] == [INVENTED_NOTE]
    # Source: matplotlib's rendered extents: the caption is below the axes, their label and
    # the legend, and overlaps none of them
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    note = fig.texts[0].get_window_extent(r)
    for box in (ax.get_tightbbox(r), fig.legends[0].get_window_extent(r)):
        assert not note.overlaps(box) and note.y1 <= box.y0
