"""The demo: a fresh store from the invented demo compilation, end to end.

Yields ("say" | "note" | "report" | "table", payload) steps so the CLI only renders.
"""

from __future__ import annotations

import shutil
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from strata13.compile import api
from strata13.compile.query.filters import Filters

from strata13.errors import StoreError, ValidationFailed

SHEETS = [
    ("quillar_2011.xlsx", "quillar_2011.toml"),
    ("mossaret_fennoway_2018.ods", "mossaret_fennoway_2018.toml"),
    ("ystrel_cores_2021.csv", "ystrel_cores_2021.toml"),
    ("orvanne_lab_run_2024.csv", "orvanne_lab_run_2024.toml"),
    ("orvanne_compilation_2022.csv", "orvanne_compilation_2022.toml"),
]
BROKEN = ("harnholt_2016_broken.xlsx", "harnholt_2016_broken.toml")
TIES = "orvanne_ties_2023.toml"  # a source of age ties only


def demo_folder() -> Path:
    """Where the demo data live (installed as strata13.demo_compilation)."""
    from importlib.resources import files

    return Path(str(files("strata13.demo_compilation")))


def run_demo(out: Path) -> Iterator[tuple[str, Any]]:
    import json

    from strata13.compile.export.outputs import output_dir

    data = demo_folder()
    sheets = data / "sheets"
    output_dir(out, option="--out")
    store_dir = out / "compilation"
    export_dir = out / "export"
    if store_dir.exists():
        marker = store_dir / "strata13-store.json"
        made_by = None
        if marker.is_file():
            try:
                made_by = json.loads(marker.read_text(encoding="utf-8")).get("made_by")
            except (json.JSONDecodeError, UnicodeDecodeError, AttributeError):
                made_by = None
        if made_by != "demo":
            raise StoreError(
                f"{store_dir} exists and was not made by the demo; the demo will not touch it.",
                "Choose another --out folder for the demo.",
            )
        shutil.rmtree(store_dir)  # a previous demo store: start afresh
    yield "say", "strata13 demo — every name and number in it is invented."
    out.mkdir(parents=True, exist_ok=True)
    store = api.init_store(
        store_dir,
        regions=data / "regions.geojson",
        made_by="demo",
        rotations=(data / "rotations.toml", data / "plates.geojson"),
    )
    yield "say", f"store: {store.path}   (try: strata13 sources --store {store.path})"
    for sheet, mapping in SHEETS:
        r = api.ingest(store, sheets / sheet, sheets / mapping)
        pend = ", ".join(f"{k} {v}" for k, v in sorted(r.pending.items()))
        yield (
            "say",
            (
                f"ingested {sheet}: {r.committed} records"
                + (f" and {r.ties} age ties" if r.ties else "")
                + f" as version {r.version}"
                + (f" (pending: {pend})" if pend else "")
            ),
        )
        for line in api.accepted_lines(r.run_qc):
            yield "note", f"  {line}"
        for q in r.run_qc:
            yield (
                "say",
                (
                    f"  in-house run {q['run_id']} {q['isotope']}: slope {q['slope']:.4f}, "
                    f"intercept {q['intercept']:+.3f} ‰ from {q['anchors']}; check "
                    "residuals "
                    + ", ".join(
                        f"{k} {v:+.3f} ‰" for k, v in json.loads(q["residuals_json"]).items()
                    )
                    + f" ({q['check_status']}); precision 1σ "
                    + (f"{q['precision_1s']:.3f} ‰" if q["precision_1s"] is not None else "—")
                ),
            )
        for w in r.warnings:
            yield "say", f"  warning: {w}"
    r = api.ingest(store, None, sheets / TIES)
    yield (
        "say",
        (
            f"ingested {TIES} (age ties only): {r.ties} ties, {r.redated} records "
            f"re-dated, version {r.version}"
        ),
    )
    sheet, mapping = BROKEN
    yield "say", f"ingesting the deliberately broken {sheet} (dry run):"
    try:
        api.ingest(store, sheets / sheet, sheets / mapping, dry_run=True)
    except ValidationFailed as exc:
        yield "report", exc.report
        yield "say", f"→ {exc.message} (as intended)"
    iv = api.interval(store, "Toarcian")
    filters = Filters(
        interval=(iv.younger_ma, iv.older_ma),
        interval_info=iv.describe(),
        region=api.region(store, "northern shelf"),
        screened="pass",
    )
    tbl = api.query_arrow(store, filters).select(
        [
            "section_id",
            "sample_id",
            "position_m",
            "age_ma",
            "age_sigma_ma",
            "component",
            "d13c_carb",
            "screen",
        ]
    )
    yield (
        "say",
        (
            "query: --interval Toarcian --region 'northern shelf' --screened pass → "
            f"{tbl.num_rows} records ({iv.older_ma:g}–{iv.younger_ma:g} Ma on "
            f"{iv.time_scale})"
        ),
    )
    rows = [
        tuple(round(v, 3) if isinstance(v, float) else v for v in r.values())
        for r in tbl.to_pylist()[:6]
    ]
    yield "table", (tbl.column_names, rows)
    tropics = api.query_arrow(
        store,
        Filters(
            paleolat=(-35.0, 35.0),
            interval=(iv.younger_ma, iv.older_ma),
            interval_info=iv.describe(),
        ),
    )
    yield (
        "say",
        (
            f"paleogeography (invented rotation model, paleomagnetic frame): "
            f"--interval Toarcian --paleolat -35:35 → {tropics.num_rows} records on "
            f"plates {sorted(set(tropics.column('plate_id').to_pylist()))}"
        ),
    )
    box = api.region(store, "bbox:0,25,20,45")
    paleo_box = api.query_arrow(store, Filters(region=box, frame="paleo"))
    today_box = api.query_arrow(store, Filters(region=box))
    yield (
        "say",
        (
            f"--region bbox:0,25,20,45 --frame paleo → {paleo_box.num_rows} records "
            f"(the same box in today's coordinates: {today_box.num_rows})"
        ),
    )
    figures = out / "figures"
    figures.mkdir(exist_ok=True)
    model = api.agemodel(store, "quillar-ridge")
    path = api.plot_agemodel(model, figures / "agemodel_quillar-ridge.png", api.figure_note(store))[
        0
    ]
    yield (
        "say",
        (
            f"age model of quillar-ridge: {len(model.ties)} ties (one a chart boundary "
            f"read on ICS2012, placed on {model.time_scale}), {model.draws.shape[0]} "
            f"draws → {path}"
        ),
    )
    records, screening, counts = api.screen_report(store)
    overall = dict(
        sorted(
            (d["values"], d["counts"])
            for d in screening.overall.column("screen").value_counts().to_pylist()
        )
    )
    flagged = [r for r in counts.to_pylist() if r["outcome"] in ("fail", "warn")]
    yield (
        "say",
        (
            "screening (rules of thumb; your judgement decides): "
            + ", ".join(f"{k} {v}" for k, v in overall.items())
        ),
    )
    yield (
        "table",
        (
            ["section_id", "rule", "outcome", "n"],
            [(r["section_id"], r["rule"], r["outcome"], r["n"]) for r in flagged],
        ),
    )
    plots = [
        p
        for p in api.screen_plots(store, records, screening, figures / "screening")
        if p.suffix == ".png"
    ]
    yield "say", f"δ13C–δ18O cross-plots: {len(plots)} → {figures / 'screening'}"
    yield from _integrity(store, out, figures)
    from strata13.compile.synthesis.run import CurveRequest

    res = api.export(
        store,
        export_dir,
        Filters(interval=(iv.younger_ma, iv.older_ma), interval_info=iv.describe()),
        curve=CurveRequest(by="region", bin_myr=0.25, min_sections=3, robustness=True),
        command="strata13 export --out DIR --interval Toarcian --with-curve "
        "--by region --bin-myr 0.25 --min-sections 3 --robustness",
    )
    excursion = api.excursion(
        store,
        Filters(
            interval=(iv.younger_ma, iv.older_ma),
            interval_info=iv.describe(),
            screened=api.SYNTHESIS_SCREENED,
        ),
        by="region",
        direction="negative",
        out=figures / "excursion",
    )
    yield (
        "say",
        (
            f"excursion per section (Toarcian, negative; 1σ over {excursion.draws} draws of "
            "ages and resampled samples; full table and the figure aligned on onset in "
            f"{figures / 'excursion'}):"
        ),
    )
    yield (
        "table",
        (
            [
                "section_id",
                "group",
                "baseline",
                "peak_age_ma",
                "magnitude",
                "magnitude_sigma_permil",
                "onset_age_ma",
                "onset_age_sigma_myr",
            ],
            [
                (
                    r.section_id,
                    r.group,
                    round(r.baseline, 2),
                    round(r.peak_age_ma, 2),
                    round(r.magnitude, 2),
                    round(r.magnitude_sigma_permil, 2),
                    round(r.onset_age_ma, 2),
                    round(r.onset_age_sigma_myr, 2),
                )
                for r in excursion.per_section.itertuples()
            ],
        ),
    )
    yield (
        "say",
        (
            f"export: {res.records} records of version {res.version} with the Toarcian "
            f"curve by region → {export_dir} (figure: {export_dir / 'curve' / 'curve.png'})"
        ),
    )
    yield (
        "note",
        (
            "next: strata13 history --store "
            + str(store.path)
            + ' ; strata13 sql "SELECT section_id, count(*) FROM records GROUP BY 1" '
            "--store " + str(store.path)
        ),
    )


def _integrity(store: Any, out: Path, figures: Path) -> Iterator[tuple[str, Any]]:
    """The compilation's integrity: a lost minus sign corrected, the re-published records
    paired with their originals and confirmed (counted once), and the coverage heatmap."""
    import csv

    from strata13.compile.integrity.corrections import Correction

    lost = api.sql(
        store,
        "SELECT record_id FROM records WHERE source_id = "
        "'orvanne-compilation-2022' AND sample_id = 'Q11'",
    ).rows[0][0]
    api.correct(
        store,
        [
            Correction(
                lost,
                "d13c_carb",
                "-1.47",
                "minus sign lost in the "
                "compilation's table; the original (quillar-2011, QR-11) "
                "gives -1.47",
            )
        ],
    )
    yield (
        "say",
        (
            f"correction: record {lost} δ13C 1.47 → -1.47 (a lost minus sign; "
            f"`strata13 explain {lost[:10]}` shows reported → corrected → harmonised)"
        ),
    )
    pairs = api.overlaps(store)
    yield (
        "say",
        (
            f"overlaps: {len(pairs)} probable duplicates between sources (the 2022 "
            "compilation re-publishes Quillar Ridge samples in metres and on VPDB)"
        ),
    )
    yield (
        "table",
        (
            ["record_a", "record_b", "score", "reasons"],
            [
                (r.record_a, r.record_b, round(r.score, 3), r.reasons[:90] + "…")
                for r in pairs.head(3).itertuples()
            ],
        ),
    )
    decisions = out / "duplicate_decisions.csv"
    with decisions.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["record_a", "record_b", "decision", "note"])
        for r in pairs.itertuples():
            w.writerow([r.record_a, r.record_b, "confirm", "re-published by the 2022 compilation"])
    version, n_conf, _ = api.confirm_overlaps(store, decisions)
    all_n = api.query_arrow(store, Filters(keep_duplicates=True)).num_rows
    once = api.query_arrow(store, Filters()).num_rows
    yield (
        "say",
        (
            f"confirmed {n_conf} pairs ({decisions.name}) as version {version}: "
            f"{all_n} records stored, {once} counted (duplicates once; nothing deleted)"
        ),
    )
    table, _files, _notes = api.coverage(
        store, Filters(screened=api.SYNTHESIS_SCREENED), "region", 0.5, figures / "coverage"
    )
    empty = int((table["n_samples"] == 0).sum())
    yield (
        "say",
        (
            f"coverage: {len(table)} cells (0.5 Myr × region × component), {empty} "
            f"empty → {figures / 'coverage' / 'coverage.png'}"
        ),
    )
