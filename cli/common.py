"""Options shared by several commands, defined once."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any

import typer

StoreOpt = Annotated[
    Path | None,
    typer.Option(
        "--store",
        help="Store folder (default: $STRATA13_STORE or ./compilation).",
        show_default=False,
    ),
]
FormatOpt = Annotated[str, typer.Option("--format", help="table | csv | json | parquet.")]
OutOpt = Annotated[
    Path | None,
    typer.Option("--out", help="Write to this file instead of stdout.", show_default=False),
]
IntervalOpt = Annotated[
    str | None,
    typer.Option(
        "--interval",
        help="Time bin: a stage, series or period name, NAME..NAME, or 'A-B' in Ma (either order).",
        show_default=False,
    ),
]
TimeScaleOpt = Annotated[
    str | None,
    typer.Option(
        "--time-scale",
        help="Chart the --interval is read on (default: the store's).",
        show_default=False,
    ),
]
RegionOpt = Annotated[
    str | None,
    typer.Option(
        "--region",
        help="A region name of the store, a GeoJSON file, or bbox:W,S,E,N.",
        show_default=False,
    ),
]
FrameOpt = Annotated[str, typer.Option("--frame", help="present | paleo: where --region applies.")]
LithologyOpt = Annotated[
    list[str] | None, typer.Option("--lithology", help="Repeatable.", show_default=False)
]
ComponentOpt = Annotated[
    list[str] | None, typer.Option("--component", help="Repeatable.", show_default=False)
]
SourceOpt = Annotated[
    list[str] | None, typer.Option("--source", help="Source id; repeatable.", show_default=False)
]
ScreenedOpt = Annotated[str, typer.Option("--screened", help="pass | fail | untested | all.")]
PaleolatOpt = Annotated[
    str | None,
    typer.Option(
        "--paleolat",
        help="Paleolatitude range MIN:MAX in degrees (negative values parse: -30:30).",
        show_default=False,
    ),
]
KeepDupOpt = Annotated[
    bool,
    typer.Option(
        "--keep-duplicates",
        help="Keep both records of confirmed duplicate pairs (default: counted once).",
    ),
]


ALL_FORMATS = ("table", "csv", "json", "parquet")


def check_format(
    fmt: str, out: Path | None, store: Path | None = None, allowed: tuple[str, ...] = ALL_FORMATS
) -> None:
    """Refuse an unknown format, parquet to a terminal, and an --out that is unsafe."""
    from strata13.compile.export.outputs import output_file

    from strata13.errors import OptionError

    if fmt not in allowed:
        raise OptionError(
            f"--format {fmt!r} is not one of {', '.join(allowed)}.", "Example: --format csv"
        )
    if fmt == "parquet" and out is None:
        raise OptionError("--format parquet needs --out FILE.", "Parquet is binary; name a file.")
    if out is not None:
        output_file(out, option="--out", stores=[store] if store else [])


def build_filters(
    store: Any,
    interval: str | None,
    region: str | None,
    frame: str,
    lithology: list[str] | None,
    component: list[str] | None,
    source: list[str] | None,
    screened: str,
    time_scale: str | None = None,
    keep_duplicates: bool = False,
    paleolat: str | None = None,
) -> Any:
    """Turn the FILTERS options into the library's Filters (validated, vocabulary-checked)."""
    from strata13.compile import api
    from strata13.compile.query.filters import SCREENED, Filters, check_vocab

    from strata13.errors import OptionError

    if frame not in ("present", "paleo"):
        raise OptionError(
            f"--frame {frame!r} is not present or paleo.",
            "Use --frame present (today's coordinates) or --frame paleo.",
        )
    if screened not in SCREENED:
        raise OptionError(
            f"--screened {screened!r} is not one of {', '.join(SCREENED)}.",
            "Example: --screened pass (see `strata13 screen --summary`).",
        )
    from strata13.compile.query.filters import parse_paleolat

    band = parse_paleolat(paleolat) if paleolat else None
    if band is not None or frame == "paleo":
        frame_kind = store.settings().get("rotation_frame")
        if frame_kind is None:
            from strata13.cli import render

            render.note("the store has no rotation model: no record has a paleo-position yet")
        elif band is not None and frame_kind != "paleomagnetic":
            from strata13.cli import render

            render.note(
                f"--paleolat on a {frame_kind}-frame model: paleolatitudes in a "
                "mantle frame are not those climate belts follow"
            )
    if time_scale is not None and not interval:
        raise OptionError(
            "--time-scale names the chart of --interval, which is not given.",
            "Add --interval NAME, or leave out --time-scale.",
        )
    iv = api.interval(store, interval, time_scale) if interval else None
    for note in iv.notes if iv else []:
        from strata13.cli import render

        render.note(f"--interval: {note}")
    return Filters(
        interval=(iv.younger_ma, iv.older_ma) if iv else None,
        interval_info=iv.describe() if iv else None,
        region=api.region(store, region) if region else None,
        frame=frame,
        lithology=check_vocab(lithology or [], "lithology", "--lithology"),
        component=check_vocab(component or [], "component", "--component"),
        source=api.check_sources(store, list(source or [])),
        screened=screened,
        keep_duplicates=keep_duplicates,
        paleolat=band,
    )
