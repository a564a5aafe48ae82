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
    KeepDupOpt,
    LithologyOpt,
    PaleolatOpt,
    RegionOpt,
    ScreenedOpt,
    SourceOpt,
    StoreOpt,
    TimeScaleOpt,
    build_filters,
)
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
)


def export(
    out: Annotated[Path, typer.Option("--out", help="Folder to write.")],
    interval: IntervalOpt = None,
    time_scale: TimeScaleOpt = None,
    region: RegionOpt = None,
    frame: FrameOpt = "present",
    lithology: LithologyOpt = None,
    component: ComponentOpt = None,
    source: SourceOpt = None,
    screened: ScreenedOpt = "all",
    keep_duplicates: KeepDupOpt = False,
    paleolat: PaleolatOpt = None,
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
    """Write records.parquet, records.csv, bibliography and manifest.json to a folder."""
    from strata13.compile import api

    s = api.open_store(api.store_path(store))
    filters = build_filters(
        s,
        interval,
        region,
        frame,
        lithology,
        component,
        source,
        screened,
        time_scale,
        keep_duplicates,
        paleolat,
    )
    request = None
    if with_curve:
        from strata13.compile.synthesis.run import CurveRequest

        request = CurveRequest(
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
        request.check()
    options: dict[str, object] = {
        "interval": interval,
        "time_scale": time_scale,
        "region": region,
        "frame": frame if frame != "present" else None,
        "lithology": lithology or [],
        "component": component or [],
        "source": source or [],
        "screened": screened if screened != "all" else None,
        "keep_duplicates": keep_duplicates,
        "paleolat": paleolat,
    }
    if with_curve:
        options |= {
            "with_curve": True,
            "isotope": isotope,
            "by": by,
            "bin_myr": bin_myr,
            "span": span,
            "boots": boots,
            "seed": seed,
            "min_sections": min_sections,
            "weight": weight,
            "age_draws": age_draws,
            "allow_mixed": allow_mixed,
            "robustness": robustness,
        }
    res = api.export(s, out, filters, as_of, curve=request, command=_command(s, as_of, options))
    render.message(f"exported {res.records} records of version {res.version} to {res.out}")
    for name, sha in sorted(res.files.items()):
        render.note(f"  {name}  sha256 {sha[:16]}…")


def _command(store: object, as_of: int | None, options: dict[str, object]) -> str:
    """The command that reproduces this export: every option given, pinned to the version
    (store by folder name, output as DIR, so the manifest does not depend on where)."""
    import shlex

    args = [
        "strata13",
        "export",
        "--store",
        Path(str(getattr(store, "path", ""))).name,
        "--out",
        "DIR",
        "--as-of",
        str(as_of if as_of is not None else store.latest_version()),
    ]  # type: ignore[attr-defined]
    for name, value in options.items():
        flag = "--" + name.replace("_", "-")
        if value is None or value is False or value == []:
            continue
        if value is True:
            args.append(flag)
        elif isinstance(value, list):
            for v in value:
                args += [flag, str(v)]
        else:
            args += [flag, str(value)]
    return shlex.join(args)
