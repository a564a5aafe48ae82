"""`strata13 scales`: the shipped reference-material values and VSMOW–VPDB relations."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import FormatOpt, OutOpt, check_format

StoreOnly = Annotated[
    Path | None,
    typer.Option("--store", help="Mark the settings of this store (optional).", show_default=False),
]
MATERIAL_COLUMNS = [
    "material",
    "value_set",
    "status",
    "in_store",
    "d13c",
    "d13c_unc",
    "d13c_unc_kind",
    "d13c_scale",
    "d18o",
    "d18o_unc",
    "d18o_unc_kind",
    "d18o_scale",
    "valid_from",
    "valid_to",
    "confidence",
    "source",
]
DISAGREE_COLUMNS = [
    "material",
    "isotope",
    "value_set",
    "status",
    "published",
    "published_scale",
    "value",
    "scale",
    "sigma_1s",
    "minus_accepted",
    "accepted",
    "note",
    "source",
]
RELATION_COLUMNS = [
    "name",
    "form",
    "slope",
    "intercept",
    "status",
    "confidence",
    "in_store",
    "source",
]


def scales(
    store: StoreOnly = None,
    fmt: FormatOpt = "table",
    out: OutOpt = None,
    disagree: Annotated[
        bool,
        typer.Option(
            "--disagree",
            help="Only the materials whose published value sets disagree: each value as "
            "the store would use it and its difference from the value the store (or the "
            "default choice) accepts.",
        ),
    ] = False,
) -> None:
    """List reference materials (values as published, uncertainty and its kind, scale,
    years in use, source) and the VSMOW–VPDB relations; works without a store."""
    from strata13.compile import api

    check_format(fmt, out, store)
    s = api.open_store(store) if store is not None else None
    if disagree:
        rows = api.scale_disagreements(s)
        render.table(
            DISAGREE_COLUMNS,
            [[r[c] for c in DISAGREE_COLUMNS] for r in rows],
            fmt,
            out,
            title="reference-material values that disagree (‰)",
        )
        render.note(
            "minus_accepted: this value − the accepted one ("
            + ("the store's settings" if s is not None else "the default choice")
            + "); a run's [run] value_set picks another (README, Mapping files: [run])"
        )
        return
    info = api.scales(s)
    render.tables(
        [
            render.Part(
                "materials",
                MATERIAL_COLUMNS,
                [[m[c] for c in MATERIAL_COLUMNS] for m in info["materials"]],
                "reference materials (‰)",
            ),
            render.Part(
                "relations",
                RELATION_COLUMNS,
                [[r[c] for c in RELATION_COLUMNS] for r in info["relations"]],
                "δ18O VSMOW–VPDB relations",
            ),
        ],
        fmt,
        out,
    )
    if s is None:
        render.note("shipped tables; add --store DIR to mark the values a store uses")
    else:
        render.note(
            "in_store: the isotopes (d13c, d18o) for which the store accepts that row's "
            "value when it re-anchors"
        )
