"""`strata13 stages`, `redate` and `agemodel`: charts, the store's chart, age models."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import FormatOpt, OutOpt, StoreOpt, WidthOpt, check_format

from strata13.numbers import readable

TIE_COLUMNS = [
    "position_m",
    "basis",
    "boundary",
    "given_age_ma",
    "chart",
    "age_ma",
    "sigma_ma",
    "shared",
    "from_source",
    "note",
]


def stages(
    time_scale: Annotated[
        str | None,
        typer.Option(
            "--time-scale",
            help="Chart version, or a CSV table of the same format "
            "(default: the store's, else the newest shipped chart).",
            show_default=False,
        ),
    ] = None,
    interval: Annotated[
        str | None,
        typer.Option(
            "--interval",
            help="Only units overlapping this name, NAME..NAME or A-B Ma.",
            show_default=False,
        ),
    ] = None,
    fmt: FormatOpt = "table",
    out: OutOpt = None,
    store: StoreOpt = None,
) -> None:
    """List a chart's stages, series and periods with base ages and uncertainties (the ±
    as the chart states it, its level, and 1σ); works without a store."""
    from strata13.compile import api

    check_format(fmt, out, store, allowed=("table", "csv", "json"))
    s = api.open_store(store) if store is not None else None
    scale, rows, notes = api.stages(s, time_scale, interval)
    for n in notes:
        render.note(n)
    cols = list(rows[0]) if rows else []
    render.table(
        cols,
        [[r[c] for c in cols] for r in rows],
        fmt,
        out,
        title=f"{scale.version} — {scale.source}",
    )
    render.note(
        f"{len(rows)} units of {scale.version}"
        + (" (the store's chart)" if s is not None and time_scale is None else "")
    )


def redate(
    time_scale: Annotated[
        str | None,
        typer.Option(
            "--time-scale",
            help="The store's new chart: a shipped version, or a chart table of your own (CSV).",
            show_default=False,
        ),
    ] = None,
    extrapolation: Annotated[
        bool | None,
        typer.Option(
            "--extrapolate/--no-extrapolate",
            help="Store setting: date samples beyond the outermost ties (flagged).",
            show_default=False,
        ),
    ] = None,
    draws: Annotated[
        int | None,
        typer.Option(
            "--draws", help="Store setting: age-model draws per section.", show_default=False
        ),
    ] = None,
    blank_sigma: Annotated[
        str | None,
        typer.Option(
            "--blank-boundary-sigma",
            help="Store setting: 1σ of a chart boundary whose error the chart leaves blank: "
            "borrow (from the nearest chart that states one; default), refuse, or a σ in Myr.",
            show_default=False,
        ),
    ] = None,
    shape: Annotated[
        float | None,
        typer.Option(
            "--accumulation-shape",
            help="Store setting: gamma shape of the time one accumulation segment took "
            "(1: exponential, the default; larger: steadier accumulation between ties).",
            show_default=False,
        ),
    ] = None,
    segment: Annotated[
        float | None,
        typer.Option(
            "--accumulation-segment",
            help="Store setting: the segment length in metres the shape refers to (default 1 m).",
            show_default=False,
        ),
    ] = None,
    store: StoreOpt = None,
) -> None:
    """Put every age on another chart (or change the age-model settings) in one commit."""
    from strata13.compile import api

    res = api.redate(
        api.open_store(api.store_path(store)),
        time_scale,
        extrapolation,
        draws,
        blank_sigma,
        shape,
        segment,
    )
    if res.version is None:
        render.message(
            f"0 changed: {res.records} records already match these settings; no new version."
        )
        return
    before, after = res.settings_before.get("time_scale"), res.settings_after.get("time_scale")
    render.message(
        f"redated {res.records} records as version {res.version}"
        + (f" ({before} → {after})" if before != after else "")
        + "."
    )
    for key, label in (
        ("age_accumulation_shape", "accumulation shape"),
        ("age_accumulation_segment_m", "accumulation segment (m)"),
    ):
        old, new = res.settings_before.get(key), res.settings_after.get(key)
        if new is not None and old != new:
            render.message(
                f"  {label}: {'default' if old is None else readable(old)} → {readable(new)}"
            )
    for col, n in sorted(res.changed.items()):
        if res.max_change[col] > 0:
            unit = api.change_unit(col)
            render.message(
                f"  {col}: {n} values changed; largest change "
                f"{readable(res.max_change[col], unit=unit.strip())}{unit}, median "
                f"{readable(res.median_change[col], unit=unit.strip())}{unit}"
            )
        else:
            render.message(f"  {col}: {n} values newly set or cleared (none moved)")
    if not res.changed:
        render.message("  no age changed (settings and statuses were updated).")
    for c in res.conflicts:
        render.message(f"  no age model for {c}")


def agemodel(
    section: Annotated[str, typer.Argument(help="Section id, or SOURCE/SECTION.")],
    plot: Annotated[
        Path | None,
        typer.Option(
            "--plot",
            help="Write the age–position figure here: FILE.png, with FILE.svg and FILE.pdf "
            "beside it.",
            show_default=False,
        ),
    ] = None,
    width: WidthOpt = "double",
    fmt: FormatOpt = "table",
    out: OutOpt = None,
    store: StoreOpt = None,
) -> None:
    """A section's ties (as given and on the store's chart) and its age model."""
    from strata13.compile import api

    path = api.store_path(store)
    check_format(fmt, out, path, allowed=("table", "csv", "json"))
    api.check_width(width)
    if plot is not None:
        for figure_file in api.figure_files(plot):
            api.output_file(figure_file, option="--plot", stores=[path])
    s = api.open_store(path)
    m = api.agemodel(s, section)
    rows = [
        [
            t["position_m"],
            t["basis"],
            t.get("boundary"),
            t.get("age_ma"),
            t.get("chart"),
            t["age"],
            t["sigma"],
            t["shared_key"] or "",
            t["tie_source_id"],
            t.get("note"),
        ]
        for t in m.ties
    ]
    render.table(
        TIE_COLUMNS,
        rows,
        fmt,
        out,
        title=f"ties of {m.source_id}/{m.section_id} ({m.position_kind}; ages on "
        f"{m.time_scale}, σ = 1σ)",
    )
    basis = ", ".join(f"{k} {v}" for k, v in sorted(m.basis_counts.items()))
    if m.draws.size:
        render.note(
            f"age model: {m.draws.shape[0]} draws at {len(m.positions)} positions, "
            f"accumulation prior {m.prior_text}; {m.records} records ({basis})"
        )
    else:
        render.note(f"no age model ({m.reason}); {m.records} records ({basis})")
    if plot is not None:
        files = api.plot_agemodel(m, plot, api.figure_note(s), width)
        render.message("wrote " + ", ".join(str(f) for f in files))


def replace_rotations(
    model: Annotated[Path, typer.Argument(help="Rotation model (TOML, README 'Paleogeography').")],
    polygons: Annotated[Path, typer.Argument(help="Plate polygons (GeoJSON).")],
    store: StoreOpt = None,
) -> None:
    """Put a rotation model and its plate polygons in the store and recompute every
    paleo-position (and the screens) in one commit."""
    from strata13.compile import api

    res = api.replace_rotations(api.open_store(api.store_path(store)), model, polygons)
    if res.version is None:
        render.message(
            f"0 changed: {res.records} records already placed with this model; no new version."
        )
        return
    name = res.settings_after.get("rotation_model_name")
    frame = res.settings_after.get("rotation_frame")
    render.message(
        f"placed {res.records} records with model {name!r} ({frame} frame) as "
        f"version {res.version}."
    )
    for col in ("paleolat", "paleolon"):
        if col in res.changed and res.max_change[col] > 0:
            render.message(
                f"  {col}: {res.changed[col]} values changed; largest change "
                f"{readable(res.max_change[col], unit='°')}°, median "
                f"{readable(res.median_change[col], unit='°')}°"
            )
        elif col in res.changed:
            render.message(f"  {col}: {res.changed[col]} values newly set or cleared")
    unplaced = (
        res.records - res.changed.get("paleolat", 0) if not res.max_change.get("paleolat") else None
    )
    if unplaced:
        render.note(f"{unplaced} records without a paleo-position (see paleo_status)")
