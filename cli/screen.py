"""`strata13 screen`: the store's screening rules, re-screening, the summary and cross-plots."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import FormatOpt, OutOpt, StoreOpt, WidthOpt, check_format
from strata13.cli.filters import NO_FILTERS, FilterArgs, filter_options

GROUP_COLUMNS = [
    "rule",
    "source_id",
    "section_id",
    "group",
    "n",
    "n_eff",
    "r",
    "r2",
    "p",
    "outcome",
]


@filter_options
def screen(
    rules: Annotated[
        Path | None,
        typer.Option(
            "--rules", help="Rule file (TOML) to become the store's rule set.", show_default=False
        ),
    ] = None,
    untested: Annotated[
        str | None,
        typer.Option(
            "--untested",
            help="Store setting: 'fails' (default) or 'passes' — whether an "
            "untested rule counts as passed.",
            show_default=False,
        ),
    ] = None,
    summary: Annotated[
        bool,
        typer.Option(
            "--summary",
            help="Counts per source, section, rule and outcome, and the "
            "covariance statistics per group.",
        ),
    ] = False,
    plot: Annotated[
        Path | None,
        typer.Option(
            "--plot",
            help="Write one δ13C–δ18O cross-plot per section (PNG, SVG, PDF) into this folder.",
            show_default=False,
        ),
    ] = None,
    width: WidthOpt = "double",
    filters: FilterArgs = NO_FILTERS,
    fmt: FormatOpt = "table",
    out: OutOpt = None,
    store: StoreOpt = None,
) -> None:
    """Screen every record with the store's rules (rules of thumb: your judgement and your
    lab's practice decide). Screening flags records; it never changes or deletes them.
    FILTERS choose the records of --summary and --plot."""
    from strata13.compile import api

    from strata13.errors import OptionError

    path = api.store_path(store)
    check_format(fmt, out, path, allowed=("table", "csv", "json"))
    api.check_width(width)
    if untested not in (None, "fails", "passes"):
        raise OptionError(
            f"--untested {untested!r} is not 'fails' or 'passes'.", "Example: --untested passes"
        )
    if filters != NO_FILTERS and not (summary or plot):
        raise OptionError(
            "FILTERS choose the records of --summary and --plot; re-screening covers every record.",
            "Add --summary or --plot, or leave out the filters.",
        )
    s = api.open_store(path)
    if rules is not None or untested is not None or not (summary or plot):
        res = api.screen(s, rules, None if untested is None else untested == "passes")
        settings = s.settings()
        name = settings.get("screen_rules_name") or "the default rules"
        if res.version is None:
            render.message(
                f"0 changed: {res.records} records already screened with {name}; no new version."
            )
        else:
            render.message(
                f"screened {res.records} records with {name} as version "
                f"{res.version}: {res.screen_changed} overall results changed."
            )
    if summary or plot:
        wanted = filters.build(s) if filters != NO_FILTERS else None
        records, screening, counts = api.screen_report(s, wanted)
        if summary:
            g = screening.groups
            render.tables(
                [
                    render.Part(
                        "outcomes",
                        counts.column_names,
                        [list(r.values()) for r in counts.to_pylist()],
                        "screen results per source, section, rule and outcome",
                    ),
                    render.Part(
                        "covariance",
                        GROUP_COLUMNS,
                        [[r[c] for c in GROUP_COLUMNS] for r in g.to_pylist()],
                        "covariance per group (δ13C vs δ18O)",
                    ),
                ][: 2 if g.num_rows else 1],
                fmt,
                out,
            )
            overall = screening.overall.column("screen").value_counts().to_pylist()
            render.note(
                "overall: "
                + ", ".join(f"{d['values']} {d['counts']}" for d in sorted(overall, key=str))
            )
        if plot is not None:
            files = api.screen_plots(s, records, screening, plot, width)
            pngs = [f for f in files if f.suffix == ".png"]
            render.message(f"wrote {len(pngs)} cross-plots (PNG, SVG, PDF) to {plot}")
