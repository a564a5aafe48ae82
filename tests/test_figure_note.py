"""Figures drawn from the demo's invented data say so; figures of a user's store do not."""

from __future__ import annotations

from pathlib import Path

from strata13.compile import api
from strata13.compile.synthesis.figures import INVENTED_NOTE, mark


def test_a_demo_store_marks_its_figures_and_a_users_store_does_not(tmp_path: Path) -> None:
    demo = api.init_store(tmp_path / "demo", made_by="demo")
    mine = api.init_store(tmp_path / "mine")
    assert api.figure_note(demo) == INVENTED_NOTE and "Invented" in INVENTED_NOTE
    assert api.figure_note(mine) is None


def test_mark_writes_the_note_on_the_figure_and_nothing_without_one() -> None:
    from matplotlib.figure import Figure

    fig = Figure()
    mark(fig, None)
    assert fig.texts == []
    mark(fig, INVENTED_NOTE)
    mark(fig, "second", top=True)
    assert [t.get_text() for t in fig.texts] == [INVENTED_NOTE, "second"]
    bottom, top = (t.get_position()[1] for t in fig.texts)
    assert bottom < 0.05 and top > 0.95
