"""Coverage: where and when the compilation is thin.

Counts of samples and sections per time bin × group (region or paleolatitude band) ×
component, with every empty cell kept (a zero is information: no data there), as a table and
a heatmap whose empty cells are drawn and labelled, so a reader sees where a curve is well
founded and where it is not.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pandas as pd
    from matplotlib.figure import Figure
    from strata13.compile.query.filters import Filters
    from strata13.compile.store.lake import Store


def counts(samples: pd.DataFrame, edges: Any, groups: list[str] | None = None) -> pd.DataFrame:
    """Samples and sections per (bin, group, component), zeros included.

    ``samples``: one row per sample with age_ma, group, component, source_id, section_id.
    ``edges``: bin edges in Ma, old to young; ``groups``: every group to show (e.g. all the
    store's regions, so an empty one shows as zeros). Columns: age_old, age_young, group,
    component, n_samples, n_sections.
    """
    import numpy as np
    import pandas as pd

    edges = np.sort(np.asarray(edges, dtype=float))[::-1]
    df = samples[samples["age_ma"].notna()].copy()
    idx = np.searchsorted(-edges, -df["age_ma"].to_numpy(), side="left") - 1
    idx = np.where(df["age_ma"].to_numpy() == edges[0], 0, idx)
    df["bin"] = idx
    df = df[(df["bin"] >= 0) & (df["bin"] < len(edges) - 1)]
    df["component"] = df["component"].fillna("component not stated")
    df["section"] = df["source_id"].astype(str) + "/" + df["section_id"].astype(str)
    got = (
        df.groupby(["bin", "group", "component"])
        .agg(n_samples=("section", "size"), n_sections=("section", "nunique"))
        .reset_index()
    )
    full = pd.MultiIndex.from_product(
        [
            range(len(edges) - 1),
            sorted(set(df["group"].unique()) | set(groups or [])),
            sorted(df["component"].unique()),
        ],
        names=["bin", "group", "component"],
    ).to_frame(index=False)
    out = full.merge(got, how="left", on=["bin", "group", "component"]).fillna(
        {"n_samples": 0, "n_sections": 0}
    )
    out["age_old"] = edges[out["bin"].to_numpy()]
    out["age_young"] = edges[out["bin"].to_numpy() + 1]
    out = out.astype({"n_samples": int, "n_sections": int})
    return out[["age_old", "age_young", "group", "component", "n_samples", "n_sections"]]


def heatmap(
    table: pd.DataFrame,
    path: Path,
    title: str,
    note: str | None = None,
    width: str = "double",
    stages: list[tuple[str, float, float]] | None = None,
) -> list[Path]:
    """The coverage figure as PNG, SVG and PDF beside ``path`` (``plotting.save``); returns
    the files. See ``heatmap_figure``."""
    from strata13.compile.plotting.save import save

    return save(heatmap_figure(table, title, width, stages), path, note)


def heatmap_figure(
    table: pd.DataFrame,
    title: str,
    width: str = "double",
    stages: list[tuple[str, float, float]] | None = None,
) -> Figure:
    """Sections per cell (rows: group · component; columns: the bins at their true ages,
    older to the left, the stage strip under them), the count written in every cell and
    empty cells hatched. Counts are whole numbers, so the colour scale is discrete: one
    colour per count, ticks on the integers."""
    from strata13.compile.plotting.style import journal

    with journal(width):
        return _heatmap_figure(table, title, width, stages)


def _heatmap_figure(
    table: pd.DataFrame,
    title: str,
    width: str,
    stages: list[tuple[str, float, float]] | None,
) -> Figure:
    import numpy as np
    from matplotlib import colormaps
    from matplotlib.colors import BoundaryNorm
    from strata13.compile.plotting import axes as age
    from strata13.compile.plotting.style import new_figure, plain, wrap

    table = table.copy()
    table["row"] = table["group"] + " · " + table["component"]
    rows = sorted(table["row"].unique())
    bins = (
        table[["age_old", "age_young"]]
        .drop_duplicates()
        .sort_values("age_old", ascending=False)
        .to_numpy(dtype=float)
    )
    grid = np.zeros((len(rows), len(bins)), dtype=int)
    samples = np.zeros_like(grid)
    for r in table.itertuples():
        i = rows.index(r.row)
        j = int(np.flatnonzero(bins[:, 0] == r.age_old)[0])
        grid[i, j], samples[i, j] = r.n_sections, r.n_samples
    height = 1.3 + 0.26 * len(rows) + age.STRIP_IN
    fig = new_figure(width, height)
    old, young = float(bins[:, 0].max()), float(bins[:, 1].min())
    stage_list = age.stages_in(stages, old, young)
    ax, strip = age.age_axes(fig, fig.add_gridspec(1, 1)[0], stage_list, height)
    top = max(1, int(grid.max()))
    cmap = colormaps["viridis"].resampled(top)
    norm = BoundaryNorm(np.arange(0.5, top + 1.5), cmap.N)
    masked = np.ma.masked_equal(grid, 0)
    im = None
    for j, (a, b) in enumerate(bins):  # one column per bin, at its true ages
        im = ax.pcolormesh(
            [a, b], np.arange(len(rows) + 1) - 0.5, masked[:, j : j + 1], cmap=cmap, norm=norm
        )
        for i in range(len(rows)):
            if grid[i, j] == 0:
                ax.add_patch(_hatch(a, b, i))
            dark = 0 < grid[i, j] < 0.6 * top  # dark end of viridis
            ax.text(
                (a + b) / 2,
                i,
                f"{grid[i, j]}\n({samples[i, j]})",
                ha="center",
                va="center",
                fontsize="small",
                linespacing=1.0,
                color="white" if dark else "black",
            )
    ax.set_ylim(len(rows) - 0.5, -0.5)
    ax.set_yticks(range(len(rows)), [plain(r) for r in rows])
    ax.tick_params(axis="y", length=0)
    age.set_age_axis(ax, old, young, width=width)
    text = title + "\neach cell: sections (samples); hatched: no data"
    fig.suptitle(plain(wrap(text, width, 0.95)), x=0.01, ha="left", fontsize=None)
    if im is not None:
        cb = fig.colorbar(im, ax=ax, ticks=range(1, top + 1), fraction=0.04, pad=0.02)
        cb.set_label("sections per cell")
        cb.ax.minorticks_off()
    if strip is not None:
        age.stage_strip(fig, ax, strip, stage_list)
    return fig


def _hatch(old: float, young: float, y: int) -> Any:
    from matplotlib.patches import Rectangle

    return Rectangle(
        (young, y - 0.5), old - young, 1, fill=False, hatch="///", edgecolor="0.75", linewidth=0
    )


def coverage(
    store: Store,
    filters: Filters,
    by: str = "region",
    bin_myr: float | None = None,
    out: Path | None = None,
    command: str | None = None,
    width: str = "double",
) -> tuple[pd.DataFrame, dict[str, str], list[str]]:
    """The coverage table for the filtered records (and, with ``out``, CSV, heatmap and a
    manifest naming ``command``, the filters, the store version and the settings hash);
    returns the table, the files written (name -> sha256) and the notes (what the filters
    left out, with counts)."""
    from strata13.compile.derive.settings import DEFAULT_TIME_SCALE, Settings
    from strata13.compile.export.artifact import Artifact
    from strata13.compile.plotting.axes import chart_stages
    from strata13.compile.plotting.style import check_width
    from strata13.compile.synthesis.run import (
        CurveRequest,
        bin_edges_for,
        data_note,
        samples_for,
    )

    check_width(width)
    req = CurveRequest(by=by, bin_myr=bin_myr, width=width)
    req.check()
    s = samples_for(store, filters, req)
    df = s.frame
    older, younger = float(df["age_ma"].max()), float(df["age_ma"].min())
    scale = s.settings.get("time_scale", DEFAULT_TIME_SCALE)
    edges, _ = bin_edges_for(req, older, younger, scale, filters.interval)
    groups = None
    if by == "region":
        con, _ = store.reader(s.version)
        try:
            groups = [r[0] for r in con.execute("SELECT name FROM regions").fetchall()]
        finally:
            con.close()
    table = counts(df, edges, groups)
    files: dict[str, str] = {}
    if out is not None:
        art = Artifact(out)
        art.open()
        table.to_csv(
            art.path("coverage.csv"), index=False, lineterminator="\n", float_format="%.6g"
        )
        art.add("coverage.csv")
        for path in heatmap(
            table,
            art.path("coverage.png"),
            f"Coverage by {by} and component — {len(df)} samples, store version {s.version}",
            data_note(store),
            width,
            chart_stages(scale),
        ):
            art.add(path.name)
        art.finish(
            {
                "tool": "strata13",
                "what": "coverage",
                **({"command": command} if command is not None else {}),
                "store_version": s.version,
                "settings_hash": Settings.from_stored(s.settings).hash(),
                "time_scale": scale,
                "parameters": {"by": by, "bin_myr": bin_myr, "width": width},
                "filters": filters.describe(),
                "samples": int(len(df)),
                "screen_left_out": s.screen_left_out,
                "notes": list(s.notes),
            }
        )
        files = dict(art.files)
    return table, files, list(s.notes)
