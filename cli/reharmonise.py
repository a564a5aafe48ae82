"""`strata13 reharmonise`: new harmonisation settings, every derived value recomputed."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import StoreOpt

from strata13.numbers import readable


def reharmonise(
    vsmow_constants: Annotated[
        str | None,
        typer.Option(
            "--vsmow-constants",
            help="VSMOW–VPDB relation by name (see `strata13 scales`).",
            show_default=False,
        ),
    ] = None,
    materials: Annotated[
        Path | None,
        typer.Option(
            "--materials",
            help="Reference-material file (CSV, the columns of `strata13 "
            "scales --format csv`) whose values the store accepts.",
            show_default=False,
        ),
    ] = None,
    check_tolerance: Annotated[
        str | None,
        typer.Option(
            "--check-tolerance",
            help="How far an in-house run's check material may lie from its accepted value "
            "before the run is marked warn: a tolerance in ‰, or from-uncertainty (3 × the "
            "material's 1σ combined with the run's precision; the default).",
            show_default=False,
        ),
    ] = None,
    store: StoreOpt = None,
) -> None:
    """Recompute every harmonised value with the store's (changed) settings, in one commit."""
    from strata13.compile import api

    res = api.reharmonise(
        api.open_store(api.store_path(store)), vsmow_constants, materials, check_tolerance
    )
    if res.version is None:
        render.message(
            f"0 changed: {res.records} records already match these settings; no new version."
        )
        return
    render.message(f"reharmonised {res.records} records as version {res.version}.")
    for col, n in sorted(res.changed.items()):
        unit = api.change_unit(col)
        render.message(
            f"  {col}: {n} values changed; largest change "
            f"{readable(res.max_change[col], unit=unit.strip())}{unit}, median "
            f"{readable(res.median_change[col], unit=unit.strip())}{unit}"
        )
    for line in res.checks_changed:
        render.message(f"  check status of {line}")
    if not res.changed:
        render.message("  no value changed (settings and statuses were updated).")
