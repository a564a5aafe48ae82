"""Ingest: mapping -> prepare (read, clean, validate) -> derive -> one commit.

Re-ingesting a source replaces that source only and reports added / removed / changed
records by stable record id; an identical file, mapping and settings is a no-op. Nothing
reaches the store unless every row passed, or ``keep_valid`` puts the failures in
quarantine. A Ctrl-C is answered truthfully: the commit either landed or it did not.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.check.report import Report
from strata13.compile.check.validate import prepare
from strata13.compile.derive.engine import Settings, derive
from strata13.compile.derive.stored import derive_stored
from strata13.compile.read.mapping import load_mapping
from strata13.compile.store.lake import Store
from strata13.compile.store.reader import Reader
from strata13.compile.store.transaction import DERIVED_TABLES, Transaction
from strata13.schemas.fields import SCHEMA_VERSION

from strata13.errors import (
    DomainError,
    InputFileError,
    OptionError,
    ValidationFailed,
)

if TYPE_CHECKING:
    import pyarrow as pa
    from strata13.compile.derive.engine import Derived


@dataclass
class IngestResult:
    source_id: str
    report: Report
    version: int | None  # the new store version, None when nothing was committed
    committed: int = 0
    quarantined: int = 0
    added: int = 0
    removed: int = 0
    changed: int = 0
    moved: int = 0  # same content, another sheet row (provenance updated)
    unchanged: bool = False  # nothing would change: no new version
    dry_run: bool = False
    pending: dict[str, int] = field(default_factory=dict)
    ties: int = 0  # age ties this source gives
    standards: int = 0  # reference-material rows of in-house runs (kept in the runs table)
    run_qc: list[dict[str, Any]] = field(default_factory=list)  # per run and isotope
    redated: int = 0  # records of other sources whose age changed with this source's ties
    orphaned: int = 0  # stored corrections whose record this ingest no longer has


def settings_from_store(store: Store) -> Settings:
    return Settings.from_stored(store.settings())


def ingest(
    store: Store,
    sheet: Path | None,
    mapping_path: Path,
    *,
    dry_run: bool = False,
    keep_valid: bool = False,
    progress: Any = None,
    create: Any = None,
) -> IngestResult:
    """Ingest one mapping's sheet into ``store``. Raises ValidationFailed (exit 1)."""
    step = progress or (lambda _msg: None)
    step("reading the mapping")
    mapping = load_mapping(mapping_path)
    if mapping.table is None:
        return _ingest_ties_only(store, sheet, mapping, dry_run, step, create)
    if mapping.run is not None:
        _check_run_materials(store, mapping)
    if sheet is not None and not sheet.is_file():
        raise InputFileError(
            f"{sheet} " + ("is a folder, not a sheet." if sheet.is_dir() else "does not exist."),
            "Check the path of the sheet.",
        )
    if sheet is not None and sheet.resolve() != mapping.table.file:
        raise OptionError(
            f"{sheet} is not the file {mapping_path.name} maps ({mapping.table.file.name}).",
            "Give the sheet named in the mapping's [table] file, or edit it.",
        )
    step("reading and validating the sheet")
    prepared = prepare(mapping)
    report = prepared.report
    result = IngestResult(mapping.source_id, report, None, dry_run=dry_run)
    if report.errors and not keep_valid:
        raise ValidationFailed(
            f"{len(report.errors)} problem{'s' if len(report.errors) != 1 else ''} in "
            f"{mapping.table.file.name}; nothing was written.",
            report,
            "Fix the cells listed, or use --keep-valid to commit the valid rows and "
            "quarantine the rest.",
        )
    result.quarantined = len(prepared.quarantine)
    if prepared.records.num_rows == 0:
        if report.rows_read == report.rows_blank:
            raise DomainError(
                f"{mapping.table.file.name} has no data rows under its header; "
                "nothing was written.",
                "Check the sheet and header_row in the mapping's [table]; a source "
                "is never replaced by an empty one.",
            )
        raise ValidationFailed(
            f"all {report.rows_rejected} rows of {mapping.table.file.name} "
            "were refused; nothing was written.",
            report,
            "Fix the cells listed; a source is never replaced by an empty one.",
        )
    return _land(store, prepared, result, dry_run, step, create)


def _check_run_materials(store: Store, mapping: Any) -> None:
    """Every material a [run] names must be one the store knows, before the sheet is split
    into standards and samples (an unknown name would make its rows look like samples)."""
    from strata13.schemas.materials import store_table

    from strata13.suggest import did_you_mean

    table, _ = store_table(store.settings())
    known = sorted({m.material for m in table})
    for name in [*mapping.run["anchors"], *mapping.run["checks"]]:
        if name not in known:
            raise DomainError(
                f"{mapping.path.name}: [run] names reference material {name!r}, "
                "which the store's material table does not have; nothing was "
                "written." + did_you_mean(name, known),
                "Name a material `strata13 scales` lists, or add it with --materials FILE.",
            )


def _ingest_ties_only(
    store: Store, sheet: Path | None, mapping: Any, dry_run: bool, step: Any, create: Any
) -> IngestResult:
    """A source of age ties only: no sheet; its ties date sections of other sources."""
    from strata13.compile.check.validate import prepare_ties_only

    if sheet is not None:
        raise OptionError(
            f"{mapping.path.name} holds only age ties and maps no sheet.",
            "Run `strata13 ingest --map …` without a sheet file.",
        )
    if not mapping.ties:
        raise DomainError(
            f"{mapping.path.name} has no ties; nothing was written.",
            "Add [[ties]] blocks or a [ties_table] file.",
        )
    prepared = prepare_ties_only(mapping)
    return _land(
        store,
        prepared,
        IngestResult(mapping.source_id, prepared.report, None, dry_run=dry_run),
        dry_run,
        step,
        create,
    )


def _land(
    store: Store, prepared: Any, result: IngestResult, dry_run: bool, step: Any, create: Any
) -> IngestResult:
    """Derive and commit one prepared source (or, for a dry run, only derive it)."""
    from strata13.compile.ages.ties import ties_table

    mapping = prepared.mapping
    new_ties = ties_table(mapping.ties)
    if dry_run:
        derived = _dry_run(store, prepared, new_ties)
        result.standards = prepared.runs.num_rows if prepared.runs is not None else 0
        result.run_qc = derived.run_qc.to_pylist() if derived.run_qc is not None else []
        result.pending = _pending_counts(derived.table)
        result.committed = derived.table.num_rows
        return result
    step("waiting for the store's writer lock")
    if create is not None:
        store = create()
    sid = mapping.source_id
    # one transaction from here: schema migration, diff and commit see one state
    with store.transaction("ingest", sid) as tx:
        # settings are read under the lock, so the commit uses exactly what it derived with
        settings = Settings.from_stored(tx.settings())
        step("deriving harmonised values and ages")
        old_ties = tx.fetch("SELECT * FROM age_ties WHERE tie_source_id = ?", [sid])
        ties = _all_ties(tx, sid, new_ties)
        _check_tie_targets(tx, prepared, new_ties)
        runs = prepared.runs
        fixes = tx.fetch("SELECT * FROM corrections WHERE source_id = ?", [sid])
        derived = derive(
            prepared.records,
            settings,
            ties,
            runs=runs,
            corrections=fixes,
            sections=prepared.sections,
        )
        records = derived.table
        result.orphaned = _orphans(fixes, records)
        result.standards = runs.num_rows if runs is not None else 0
        result.run_qc = derived.run_qc.to_pylist() if derived.run_qc is not None else []
        # sources whose sections this source's ties date (now or before) are re-dated too
        targets = {
            t
            for t in old_ties.column("source_id").to_pylist()
            + new_ties.column("source_id").to_pylist()
            if t and t != sid
        }
        others = derive_stored(tx, sorted(targets), settings, ties)
        result.redated = sum(_age_changes(r, d.table) for r, d in others.values())
        result.pending = _pending_counts(records)
        result.committed = records.num_rows
        result.added, result.removed, result.changed = _diff(tx, sid, records)
        # nothing to commit when no record, no row position, no quarantined row and no
        # source metadata would change (a mapping edited only in its comments, say)
        old = tx.rows(
            f"SELECT {', '.join(META)}, schema_version, (SELECT count(*) FROM "
            "quarantine q WHERE q.source_id = s.source_id) FROM "
            "sources s WHERE source_id = ?",
            [sid],
        )
        result.moved = _moved(tx, sid, records)
        if (
            old
            and tuple(old[0][:-2]) == _meta(mapping.source)
            and old[0][-2] == SCHEMA_VERSION
            and old[0][-1] == len(prepared.quarantine)
            and _same_rows(old_ties, new_ties)
            and _same_runs(tx, sid, prepared.runs)
            and _same_sections(tx, sid, prepared.sections)
            and not (result.added or result.removed or result.changed or result.moved)
        ):
            result.unchanged = True
            tx.abandon()
            return result
        step("committing")
        _write(tx, prepared, records, derived, settings, result, new_ties, others)
    result.version = tx.version
    return result


META = ("citation", "year", "doi", "url", "kind", "lab", "republishes", "note")


def _meta(source: dict[str, Any]) -> tuple[Any, ...]:
    """The source's metadata as stored in the sources table."""
    return tuple(
        "|".join(source.get("republishes", [])) if k == "republishes" else source.get(k)
        for k in META
    )


def _moved(tx: Transaction, source_id: str, records: pa.Table) -> int:
    """Records that kept their content but sit in another sheet row than before."""
    with tx.registered("incoming_rows", records.select(["record_id", "sheet", "sheet_row"])):
        return int(
            tx.value(
                "SELECT count(*) FROM incoming_rows n JOIN (SELECT record_id, sheet, sheet_row "
                "FROM records WHERE source_id = ?) o USING (record_id) WHERE "
                "n.sheet <> o.sheet OR n.sheet_row <> o.sheet_row",
                [source_id],
            )
        )


def _diff(tx: Transaction, source_id: str, records: pa.Table) -> tuple[int, int, int]:
    """(added, removed, changed) record counts against the stored source, in DuckDB."""
    old = "(SELECT record_id, row_hash FROM records WHERE source_id = ?)"
    with tx.registered("incoming_ids", records.select(["record_id", "row_hash"])):
        added = tx.value(
            f"SELECT count(*) FROM incoming_ids n ANTI JOIN {old} o USING (record_id)", [source_id]
        )
        removed = tx.value(
            f"SELECT count(*) FROM {old} o ANTI JOIN incoming_ids n USING (record_id)", [source_id]
        )
        changed = tx.value(
            f"SELECT count(*) FROM incoming_ids n JOIN {old} o "
            "USING (record_id) WHERE n.row_hash <> o.row_hash",
            [source_id],
        )
    return int(added), int(removed), int(changed)


def _all_ties(reads: Transaction | Reader, source_id: str, new_ties: pa.Table) -> pa.Table:
    """Every stored tie except this source's old ones, plus its new ones."""
    import pyarrow as pa

    others = reads.fetch(
        "SELECT * FROM age_ties WHERE tie_source_id IS DISTINCT FROM ?", [source_id]
    )
    return pa.concat_tables([others.select(new_ties.column_names).cast(new_ties.schema), new_ties])


def _dry_run(store: Store, prepared: Any, new_ties: pa.Table) -> Any:
    """Derive as an ingest would, against the store's ties (if the store exists)."""
    from strata13.compile.store.lake import is_store

    settings = settings_from_store(store)
    if not is_store(store.path):
        _check_tie_targets(None, prepared, new_ties)
        return derive(
            prepared.records, settings, new_ties, runs=prepared.runs, sections=prepared.sections
        )
    con, _ = store.reader()
    try:
        reads = Reader(con)
        ties = _all_ties(reads, prepared.mapping.source_id, new_ties)
        _check_tie_targets(reads, prepared, new_ties)
        fixes = reads.fetch(
            "SELECT * FROM corrections WHERE source_id = ?", [prepared.mapping.source_id]
        )
    finally:
        con.close()
    return derive(
        prepared.records,
        settings,
        ties,
        runs=prepared.runs,
        corrections=fixes,
        sections=prepared.sections,
    )


def _check_tie_targets(
    reads: Transaction | Reader | None, prepared: Any, new_ties: pa.Table
) -> None:
    """Every tie dates a section that exists: this source's, or one already in the store."""
    import pyarrow.compute as pc

    sid = prepared.mapping.source_id
    own = (
        set(pc.unique(prepared.records.column("section_id")).to_pylist())
        if prepared.records.num_rows
        else set()
    )
    for t in new_ties.to_pylist():
        if t["source_id"] == sid:
            if t["section_id"] not in own:
                raise DomainError(
                    f"{prepared.mapping.path.name}: a tie names section {t['section_id']!r}, "
                    f"which no row of source {sid!r} has; nothing was written.",
                    "Check the tie's section (write other-source/section for a section of "
                    "another source).",
                )
        elif reads is not None and not reads.value(
            "SELECT count(*) FROM records WHERE source_id = ? AND section_id = ?",
            [t["source_id"], t["section_id"]],
        ):
            raise DomainError(
                f"{prepared.mapping.path.name}: a tie names section "
                f"{t['source_id']}/{t['section_id']}, which is not in the store; nothing was "
                "written.",
                "Ingest that source first, or check the section's name.",
            )


def _same_rows(a: pa.Table, b: pa.Table) -> bool:
    """Whether two tables hold the same rows (order ignored)."""

    def rows(t: pa.Table) -> list[tuple[Any, ...]]:
        cols = [c for c in b.column_names]
        return sorted(tuple(str(v) for v in r.values()) for r in t.select(cols).to_pylist())

    return a.num_rows == b.num_rows and rows(a) == rows(b)


def _orphans(fixes: pa.Table, records: pa.Table) -> int:
    """Corrections of this source whose record id the incoming records no longer have."""
    import pyarrow.compute as pc

    if not fixes.num_rows:
        return 0
    have = pc.is_in(fixes.column("record_id"), value_set=records.column("record_id"))
    return int(fixes.num_rows - (pc.sum(have).as_py() or 0))


def _same_runs(tx: Transaction, source_id: str, runs: pa.Table | None) -> bool:
    """Whether the source's stored run standards equal the incoming ones."""
    old = tx.fetch("SELECT * FROM runs WHERE source_id = ?", [source_id])
    if runs is None:
        return bool(old.num_rows == 0)
    return bool(_same_rows(old.select(runs.column_names), runs))


def _same_sections(tx: Transaction, source_id: str, sections: pa.Table) -> bool:
    """Whether the source's stored sections (datum, names, accumulation prior …) equal the
    incoming ones: a changed prior re-dates the source even when no record changed."""
    old = tx.fetch("SELECT * FROM sections WHERE source_id = ?", [source_id])
    return bool(_same_rows(old.select(sections.column_names), sections))


def _age_changes(before: pa.Table, after: pa.Table) -> int:
    import numpy as np

    a = before.column("age_ma").to_numpy(zero_copy_only=False).astype(float)
    b = after.column("age_ma").to_numpy(zero_copy_only=False).astype(float)
    same = (np.isnan(a) & np.isnan(b)) | (np.abs(a - b) <= 1e-12)
    return int((~same).sum())


def _pending_counts(records: pa.Table) -> dict[str, int]:
    import pyarrow.compute as pc

    out = {}
    for col in ("d13c_carb_status", "d18o_carb_status", "d13c_org_status", "age_status"):
        st = records.column(col)
        n = pc.sum(pc.fill_null(pc.starts_with(st, "pending"), False)).as_py() or 0
        if n:
            out[col.removesuffix("_status")] = int(n)
    return out


def _write(
    tx: Transaction,
    prepared: Any,
    records: pa.Table,
    derived: Derived,
    settings: Settings,
    result: IngestResult,
    ties: pa.Table,
    others: dict[str, tuple[pa.Table, Derived]],
) -> None:
    """Replace the source (records, ties, age draws, screen results), re-date the sources
    its ties date, add chains and say what the commit did."""
    import pyarrow as pa
    from strata13.schemas.records import PER_SOURCE, QUARANTINE, SOURCES, arrow_schema

    m = prepared.mapping
    sid = m.source_id
    for table in PER_SOURCE:
        tx.delete(table, source_id=sid)
    version = tx.next_version()
    src = m.source
    sources = pa.Table.from_pylist(
        [
            {
                "source_id": sid,
                "citation": src.get("citation"),
                "year": src.get("year"),
                "doi": src.get("doi"),
                "url": src.get("url"),
                "kind": src.get("kind"),
                "lab": src.get("lab"),
                "republishes": _meta(src)[META.index("republishes")],
                "note": src.get("note"),
                "file_name": m.table.file.name if m.table is not None else m.path.name,
                "file_sha256": prepared.file_sha256,
                "mapping_sha256": m.sha256,
                "n_records": records.num_rows,
                "ingested_version": version,
                "schema_version": SCHEMA_VERSION,
            }
        ],
        schema=arrow_schema(SOURCES),
    )
    quarantine = pa.Table.from_pylist(
        [{"source_id": sid, **q, "ingested_version": version} for q in prepared.quarantine],
        schema=arrow_schema(QUARANTINE),
    )
    tx.add_parquet("records", records)
    for name, table in (
        ("sources", sources),
        ("localities", prepared.localities),
        ("sections", prepared.sections),
        ("samples", prepared.samples),
        ("quarantine", quarantine),
        *([("runs", prepared.runs)] if prepared.runs is not None else []),
    ):
        tx.insert(name, table)
    tx.delete("age_ties", tie_source_id=sid)
    tx.insert("age_ties", ties)
    result.ties = ties.num_rows
    for kind, rows in zip(
        DERIVED_TABLES, (derived.draws, derived.screens, derived.run_qc), strict=True
    ):
        tx.replace_source(kind, [sid], rows)
    tx.add_chains(derived.chains)
    for other, (_, d) in others.items():
        tx.write_derived([other], d)
    summary = {
        "source": sid,
        "records": records.num_rows,
        "added": result.added,
        "removed": result.removed,
        "changed": result.changed,
        "moved": result.moved,
        "quarantined": result.quarantined,
        "ties": ties.num_rows,
        "redated": result.redated,
    }
    tx.record(summary, settings.hash())


def reconcile(result: IngestResult) -> str:
    """The row accounting sentence: read = committed + quarantined + blank."""
    r = result.report
    std = f" + {result.standards} run standards" if result.standards else ""
    return (
        f"read {r.rows_read} rows = {result.committed} committed{std} + "
        f"{result.quarantined} quarantined + {r.rows_blank} blank"
    )
