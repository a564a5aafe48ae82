"""`strata13 curve` and `strata13 excursion`: composite curves and excursion metrics."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer
from strata13.cli import render
from strata13.cli.common import FormatOpt, StoreOpt, WidthOpt, check_format, command_line
from strata13.cli.filters import NO_FILTERS, SYNTHESIS_SCREENED, FilterArgs, filter_options

from strata13.numbers import readable

if TYPE_CHECKING:
    from strata13.compile.api import CurveRequest

ByOpt = Annotated[
    str | None,
    typer.Option(
        "--by",
        help="Group by region | paleolat-band[:DEG] | source | setting | component (default: "
        "component and setting). paleolat-band:15 makes bands of 15° (a divisor of 180; "
        "default 30).",
        show_default=False,
    ),
]
IsotopeOpt = Annotated[str, typer.Option("--isotope", help="carb | org: which δ13C.")]
BinOpt = Annotated[
    float | None,
    typer.Option(
        "--bin-myr",
        help="Bin width in Myr (default: the stages of the store's chart).",
        show_default=False,
    ),
]
SpanOpt = Annotated[
    float, typer.Option("--span", help="LOESS span: fraction of samples in each local fit.")
]
BootsOpt = Annotated[int, typer.Option("--boots", help="Section bootstrap draws for the band.")]
SeedOpt = Annotated[int, typer.Option("--seed", help="Random seed (same seed, same files).")]
MinSecOpt = Annotated[
    int, typer.Option("--min-sections", help="Hide the band where fewer sections contribute.")
]
WeightOpt = Annotated[str, typer.Option("--weight", help="sections | samples.")]
DrawsOpt = Annotated[
    int, typer.Option("--age-draws", help="Age draws carried into the band (0: ages fixed).")
]
MixedOpt = Annotated[
    bool,
    typer.Option(
        "--allow-mixed",
        help="Merge carbonate and organic δ13C into one curve (the figure says so).",
    ),
]
# the excursion's draws; compile/synthesis/excursion_draws.py::DEFAULT_DRAWS is the default
# (repeated here so --help imports no numpy; a test keeps the two equal)
EXCURSION_DRAWS = 500
ExcursionDrawsOpt = Annotated[
    int,
    typer.Option(
        "--draws",
        help="Draws for the 1σ and 95 % ranges: each draws every sample's age (age-model "
        "draws, reported σ, stage span) and resamples each section's samples (0: none).",
    ),
]
BootstrapOpt = Annotated[
    bool,
    typer.Option(
        "--bootstrap/--no-bootstrap",
        help="Resample each section's samples with replacement (kept in stratigraphic order) "
        "in every draw; --no-bootstrap varies the ages only.",
    ),
]
RobustOpt = Annotated[
    bool,
    typer.Option(
        "--robustness", help="Refit leaving out each source and section; list the most influential."
    ),
]


def curve_request(
    isotope: str,
    bin_myr: float | None,
    span: float,
    boots: int,
    seed: int,
    min_sections: int,
    weight: str,
    age_draws: int,
    by: str | None,
    allow_mixed: bool,
    robustness: bool,
    width: str = "double",
) -> tuple[CurveRequest, dict[str, object]]:
    """The curve options as a checked request, and as a command line names them."""
    from strata13.compile import api

    req = api.CurveRequest(
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
        width=width,
    )
    req.check()
    given: dict[str, object] = {
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
        "width": width,
    }
    return req, given


@filter_options(screened=SYNTHESIS_SCREENED)
def curve(
    out: Annotated[Path, typer.Option("--out", help="Folder for the CSVs, figure and manifest.")],
    filters: FilterArgs = NO_FILTERS,
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
    width: WidthOpt = "double",
    store: StoreOpt = None,
) -> None:
    """A composite δ13C curve per group: binned statistics, LOESS with a section-bootstrap
    band, optional age draws and leave-one-out robustness; CSVs, the figure (PNG, SVG,
    PDF) and a manifest."""
    from strata13.compile import api

    path = api.store_path(store)
    api.output_dir(out, option="--out", stores=[path])
    req, given = curve_request(
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
        width,
    )
    s = api.open_store(path)
    res = api.curve(
        s,
        filters.build(s),
        req,
        out,
        command=command_line("curve", s.path, filters.given() | given),
    )
    render.message(
        f"curve of {len(res.groups)} group(s) from store version {res.version} → {res.out}"
    )
    for n in res.notes:
        render.note(n)
    if res.influence is not None:
        top = res.influence[res.influence["leave"] == "source"].head(3)
        for r in top.itertuples():
            render.note(
                f"influence [{r.group}] without {r.left_out}: largest change "
                f"{readable(r.max_abs_change, unit='‰')} ‰, "
                f"RMS {readable(r.rms_change, unit='‰')} ‰"
            )
    for name, sha in sorted(res.files.items()):
        render.note(f"  {name}  sha256 {sha[:16]}…")


@filter_options(screened=SYNTHESIS_SCREENED)
def excursion(
    filters: FilterArgs = NO_FILTERS,
    by: ByOpt = None,
    baseline: Annotated[
        str | None,
        typer.Option(
            "--baseline",
            help="Pre-excursion window 'A-B' in Ma (default: the oldest "
            "20 % of each section's samples, at least 3).",
            show_default=False,
        ),
    ] = None,
    fraction: Annotated[
        float,
        typer.Option(
            "--fraction",
            help="Onset/recovery: departure from the baseline by this fraction of the magnitude.",
        ),
    ] = 0.10,
    direction: Annotated[
        str, typer.Option("--direction", help="auto | negative | positive.")
    ] = "auto",
    draws: ExcursionDrawsOpt = EXCURSION_DRAWS,
    seed: SeedOpt = 0,
    bootstrap: BootstrapOpt = True,
    fmt: FormatOpt = "table",
    out: Annotated[
        Path | None,
        typer.Option(
            "--out",
            help="Folder for the tables (CSV and Parquet), their column list, the figure "
            "aligned on onset with the ranges (PNG, SVG, PDF), and a manifest.",
            show_default=False,
        ),
    ] = None,
    width: WidthOpt = "double",
    shared_axis: Annotated[
        bool,
        typer.Option(
            "--shared-axis/--own-axis",
            help="One δ axis for all section panels, so magnitudes compare by eye (the "
            "default); --own-axis scales each panel to its section.",
        ),
    ] = True,
    store: StoreOpt = None,
) -> None:
    """Per-section excursion metrics in an interval: baseline, peak, magnitude, onset,
    recovery and duration with 1σ and 95 % ranges over seeded draws, sample count and
    spacing; a summary across sections and groups with the uncertainty of each mean."""
    from strata13.compile import api

    from strata13.errors import OptionError

    path = api.store_path(store)
    check_format(fmt, None, path, allowed=("table", "csv", "json"))
    api.check_width(width)
    if out is not None:
        api.output_dir(out, option="--out", stores=[path])
    s = api.open_store(path)
    wanted = filters.build(s)
    window = None
    if baseline is not None:
        iv = api.interval(s, baseline, filters.time_scale)
        if "Ma" not in iv.text and "-" not in iv.text:
            raise OptionError(
                f"--baseline {baseline!r} is not an age range.",
                "Give the pre-excursion window as A-B in Ma.",
            )
        window = (iv.older_ma, iv.younger_ma, "ma")
    options = filters.given() | {
        "by": by,
        "baseline": baseline,
        "fraction": fraction,
        "direction": direction,
        "draws": draws,
        "seed": seed,
        "no_bootstrap": not bootstrap,  # the default is on: only its absence is written
        "width": width,
        "own_axis": not shared_axis,  # the default is shared: only its absence is written
    }
    res = api.excursion(
        s,
        wanted,
        by=by,
        baseline=window,
        fraction=fraction,
        direction=direction,
        draws=draws,
        seed=seed,
        bootstrap=bootstrap,
        out=out,
        command=command_line("excursion", s.path, options) if out is not None else None,
        width=width,
        shared_axis=shared_axis,
    )
    for note in res.notes:
        render.note(note)
    per, summary = res.per_section, res.summary
    render.tables(
        [
            render.Part(
                "per_section",
                list(per.columns),
                [list(r) for r in per.itertuples(index=False, name=None)],
                "excursion per section",
            ),
            render.Part(
                "summary",
                list(summary.columns),
                [list(r) for r in summary.itertuples(index=False, name=None)],
                "summary",
            ),
        ],
        fmt,
        None,
        elsewhere=f"it is in {out}" if out is not None else "--out DIR writes it",
    )
    for name, sha in sorted(res.files.items()):
        render.note(f"  {name}  sha256 {sha[:16]}…")
