"""`strata13 export`: the cleaned compilation, its bibliography and manifest."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import (
    ComponentOpt,
    FrameOpt,
    IntervalOpt,
    LithologyOpt,
    RegionOpt,
    ScreenedOpt,
    SourceOpt,
    StoreOpt,
    TimeScaleOpt,
    build_filters,
)


def export(out: Annotated[Path, typer.Option("--out", help="Folder to write.")],
           interval: IntervalOpt = None, time_scale: TimeScaleOpt = None,
           region: RegionOpt = None, frame: FrameOpt = "present",
           lithology: LithologyOpt = None, component: ComponentOpt = None,
           source: SourceOpt = None, screened: ScreenedOpt = "all",
           as_of: Annotated[int | None, typer.Option("--as-of", help="Export this store "
                                                     "version.", show_default=False)] = None,
           store: StoreOpt = None) -> None:
    """Write records.parquet, records.csv, bibliography and manifest.json to a folder."""
    from strata13.compile import api

    s = api.open_store(api.store_path(store))
    filters = build_filters(s, interval, region, frame, lithology, component,
                            source, screened, time_scale)
    res = api.export(s, out, filters, as_of)
    render.message(f"exported {res.records} records of version {res.version} to {res.out}")
    for name, sha in sorted(res.files.items()):
        render.note(f"  {name}  sha256 {sha[:16]}…")
