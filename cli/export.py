"""`strata13 export`: the cleaned compilation as a data package (see compile/export)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import StoreOpt, command_line
from strata13.cli.filters import NO_FILTERS, SYNTHESIS_SCREENED, FilterArgs, filter_options
from strata13.cli.synthesis import (
    BinOpt,
    BootsOpt,
    ByOpt,
    DrawsOpt,
    IsotopeOpt,
    MinSecOpt,
    MixedOpt,
    RobustOpt,
    SeedOpt,
    SpanOpt,
    WeightOpt,
    curve_request,
)


@filter_options
def export(
    out: Annotated[Path, typer.Option("--out", help="Folder to write.")],
    filters: FilterArgs = NO_FILTERS,
    as_of: Annotated[
        int | None, typer.Option("--as-of", help="Export this store version.", show_default=False)
    ] = None,
    with_curve: Annotated[
        bool,
        typer.Option(
            "--with-curve",
            help="Also write the curve (bins, LOESS, band, figure) to "
            "OUT/curve with the curve options below; the manifest records them.",
        ),
    ] = False,
    curve_screened: Annotated[
        str,
        typer.Option(
            "--curve-screened",
            help="Screen states the --with-curve curve keeps (like a curve's --screened; "
            "the records exported follow --screened).",
        ),
    ] = SYNTHESIS_SCREENED,
    isotope: IsotopeOpt = "carb",
    by: ByOpt = None,
    bin_myr: BinOpt = None,
    span: SpanOpt = 0.3,
    boots: BootsOpt = 200,
    seed: SeedOpt = 0,
    min_sections: MinSecOpt = 5,
    weight: WeightOpt = "sections",
    age_draws: DrawsOpt = 0,
    allow_mixed: MixedOpt = False,
    robustness: RobustOpt = False,
    store: StoreOpt = None,
) -> None:
    """Write a data package to a folder: the records and the tables they depend on (chains,
    ties, age models, screen results, runs, run QC, corrections, duplicate decisions) as
    Parquet and CSV, columns.csv (the data dictionary), bibliography.bib and .txt,
    README.txt and manifest.json (SHA-256 and size of every file)."""
    from strata13.compile import api

    s = api.open_store(api.store_path(store))
    wanted = filters.build(s)
    request = None
    options = filters.given()
    if with_curve:
        request, given = curve_request(
            isotope,
            bin_myr,
            span,
            boots,
            seed,
            min_sections,
            weight,
            age_draws,
            by,
            allow_mixed,
            robustness,
        )
        options |= {"with_curve": True, "curve_screened": curve_screened, **given}
    version = as_of if as_of is not None else s.latest_version()
    command = command_line("export", s.path, options, pinned=("--as-of", str(version)))
    res = api.export(
        s, out, wanted, as_of, curve=request, command=command, curve_screened=curve_screened
    )
    render.message(f"exported {res.records} records of version {res.version} to {res.out}")
    for name, sha in sorted(res.files.items()):
        render.note(f"  {name}  sha256 {sha[:16]}…")
