"""`strata13 ingest`: validate a sheet through its mapping and commit it as one version."""

from __future__ import annotations

from collections import Counter
from pathlib import Path
from typing import Annotated

import typer
from strata13.cli import render
from strata13.cli.common import StoreOpt

from strata13.numbers import readable


def ingest(
    map_: Annotated[Path, typer.Option("--map", help="The mapping file (TOML).")],
    file: Annotated[
        Path | None,
        typer.Argument(
            help="The sheet (xlsx, ods, csv, tsv); left out for a mapping of age ties "
            "only. Default: the file the mapping names.",
            show_default=False,
        ),
    ] = None,
    dry_run: Annotated[
        bool, typer.Option("--dry-run", help="Validate and report; write nothing.")
    ] = False,
    keep_valid: Annotated[
        bool, typer.Option("--keep-valid", help="Commit valid rows; quarantine the rest.")
    ] = False,
    report: Annotated[
        Path | None,
        typer.Option("--report", help="Write the full report (.csv or .json).", show_default=False),
    ] = None,
    store: StoreOpt = None,
) -> None:
    """Ingest one sheet (or a mapping of age ties only): every problem reported at once;
    nothing bad enters the store."""
    import json

    from strata13.compile import api

    from strata13.errors import ValidationFailed

    if report is not None:
        api.output_file(
            report,
            option="--report",
            protect=[p for p in (file, map_) if p],
            stores=[api.store_path(store)],
        )

    try:
        with render.progress() as step:
            result = api.ingest(
                api.store_path(store),
                file,
                map_,
                dry_run=dry_run,
                keep_valid=keep_valid,
                progress=step,
            )
    except ValidationFailed as exc:
        render.report(exc.report, limit_info=True)
        if report:
            exc.report.write(report)
            render.note(f"full report written to {report}")
        raise
    if report:
        result.report.write(report)
    shown = [i for i in result.report.issues if i.severity != "info"]
    if shown:
        render.report(result.report, limit_info=True)
    kinds = Counter(i.rule for i in result.report.issues if i.severity == "info")
    if kinds:
        n_info = sum(kinds.values())
        what = ", ".join(f"{rule} {n}" for rule, n in sorted(kinds.items()))
        render.note(
            f"{n_info} note{'s' * (n_info != 1)} on reading the sheet ({what})"
            + ("; see the --report file" if report else "; add --report PATH to see them")
        )
    if result.dry_run:
        render.message(
            f"dry run: {result.source_id} would commit {result.committed} records "
            f"and quarantine {result.quarantined}; nothing was written."
        )
    elif result.unchanged:
        render.message(
            f"{result.source_id}: no record, row or source detail would change; no new version."
        )
    else:
        moved = f", {result.moved} moved to other rows" if result.moved else ""
        render.message(
            f"{result.source_id}: committed as version {result.version} — "
            f"{result.added} added, {result.removed} removed, {result.changed} "
            f"changed{moved}."
        )
    if result.ties or result.redated:
        would = " would be" if result.dry_run else ""
        render.message(
            f"age ties: {result.ties} {'found in' if result.dry_run else 'from'} this source"
            + (
                f"; {result.redated} records of other sources{would} re-dated"
                if result.redated
                else ""
            )
        )
    if result.report.rows_read:
        render.message(api.reconcile(result))
    if result.orphaned:
        render.note(
            f"{result.orphaned} stored correction(s) name records this sheet no longer "
            "has; see `strata13 corrections`"
        )
    for line in api.accepted_lines(result.run_qc):
        render.note(line)
    for q in result.run_qc:
        prec = readable(q["precision_1s"], unit="‰", blank="—") + (
            " ‰" if q["precision_1s"] is not None else ""
        )
        res = ", ".join(  # a residual to the run's precision, when it has one
            f"{k} {readable(v, unit='‰', sigma=q['precision_1s'], signed=True)} ‰"
            for k, v in json.loads(q["residuals_json"]).items()
        )
        drift = ""
        if q["drift_per_position"] is not None:
            sd = q["drift_sigma"]
            drift = f"; drift {readable(q['drift_per_position'], signed=True)} ‰ per position" + (
                f" ± {readable(sd, sigma=sd)} (1σ)" if sd is not None else " (1σ unknown)"
            )
        render.message(
            f"run {q['run_id']} {q['isotope']}: slope {readable(q['slope'], decimals=4)}, "
            f"intercept {readable(q['intercept'], unit='‰', signed=True)} ‰ ({q['anchors']}); "
            "check residuals "
            f"{res or '—'} ({q['check_status'] or 'no check'}); precision 1σ {prec}{drift}"
        )
        if q["check_status"] in ("warn", "untested"):
            render.note(f"checks of run {q['run_id']} {q['isotope']}: {q['check_detail']}")
    for w in result.warnings:
        render.warning(w)
    if result.pending:
        render.note(
            "pending (kept as reported, not yet harmonised or dated): "
            + ", ".join(f"{k} {v}" for k, v in sorted(result.pending.items()))
        )
