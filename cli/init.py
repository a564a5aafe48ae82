"""`strata13 init`: create a store with its settings."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import StoreOpt


def init(
    store: StoreOpt = None,
    time_scale: Annotated[
        str | None,
        typer.Option(
            "--time-scale",
            help="Time scale of the store's ages: a shipped chart, or a chart table of your "
            "own (CSV; default: the newest shipped chart).",
            show_default=False,
        ),
    ] = None,
    regions: Annotated[
        Path | None,
        typer.Option(
            "--regions", help="GeoJSON FeatureCollection of named regions.", show_default=False
        ),
    ] = None,
    rules: Annotated[
        Path | None,
        typer.Option(
            "--rules",
            help="Screening rule file (TOML; default: the shipped rules).",
            show_default=False,
        ),
    ] = None,
    materials: Annotated[
        Path | None,
        typer.Option(
            "--materials",
            help="Your reference-material file (CSV, same columns as the "
            "shipped table); its values are accepted before the shipped ones.",
            show_default=False,
        ),
    ] = None,
    rotations: Annotated[
        tuple[Path, Path] | None,
        typer.Option(
            "--rotations",
            help="Rotation model (TOML) and plate polygons (GeoJSON): --rotations MODEL POLYGONS.",
            show_default=False,
        ),
    ] = None,
    extrapolate: Annotated[
        bool,
        typer.Option(
            "--extrapolate-ages",
            help="Let age models date samples beyond their outermost "
            "ties (flagged). Off by default.",
        ),
    ] = False,
    catalog: Annotated[
        str | None,
        typer.Option(
            "--catalog",
            help="Where the catalog lives: 'embedded' (a file in the store folder, the "
            "default) or postgres:CONNINFO (a libpq connection string or service name of an "
            "empty database, shared by a group; no password in it: libpq reads ~/.pgpass).",
            show_default=False,
        ),
    ] = None,
) -> None:
    """Create a new, empty store and choose its settings."""
    from strata13.compile import api

    s = api.init_store(
        api.store_path(store),
        time_scale=time_scale or api.DEFAULT_TIME_SCALE,
        regions=regions,
        rules=rules,
        age_extrapolation=extrapolate,
        materials=materials,
        rotations=rotations,
        catalog=catalog,
    )
    where = f"; catalog {s.catalog.describe()}" if catalog else ""
    render.message(
        f"created store {s.path} (version 1; time scale "
        f"{api.open_store(s.path).settings()['time_scale']}{where})"
    )
