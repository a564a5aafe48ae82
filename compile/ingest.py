"""Ingest: mapping -> prepare (read, clean, validate) -> derive -> one commit.

Re-ingesting a source replaces that source only and reports added / removed / changed
records by stable record id; an identical file, mapping and settings is a no-op. Nothing
reaches the store unless every row passed, or ``keep_valid`` puts the failures in
quarantine. A Ctrl-C is answered truthfully: the commit either landed or it did not.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.check.report import Report
from strata13.compile.check.validate import prepare
from strata13.compile.derive.engine import Settings, derive
from strata13.compile.derive.stored import derive_stored
from strata13.compile.read.mapping import BIB_KEYS, load_mapping
from strata13.compile.store.lake import Store
from strata13.compile.store.reader import Reader
from strata13.compile.store.transaction import DERIVED_TABLES, Transaction
from strata13.schemas.fields import SCHEMA_VERSION

from strata13.errors import (
    DomainError,
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
    # loud run QC findings (a check beyond its tolerance, a slope far from 1), one sentence each
    warnings: list[str] = field(default_factory=list)
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
    if sheet is not None:  # a missing file, a folder, a pipe, a loop, a name too long …
        from strata13.compile.read.inputs import check_file

        check_file(sheet, "sheet", "Check the path of the sheet.")
    table = mapping.table
    another_file = sheet is not None and sheet.resolve() != table.file
    if sheet is not None and another_file:
        # the mapping's layout for another file of the same source (a lab's next run file):
        # a file named on the command line is the user's own, honoured as given
        table = dataclasses.replace(table, file=sheet.resolve())
        mapping = dataclasses.replace(mapping, table=table)
    step("reading and validating the sheet")
    prepared = prepare(mapping)
    report = prepared.report
    result = IngestResult(mapping.source_id, report, None, dry_run=dry_run)
    if report.errors and not keep_valid:
        raise ValidationFailed(
            f"{report.count('error')} problem{'s' if report.count('error') != 1 else ''} in "
            f"{table.file.name}; nothing was written.",
            report,
            "Fix the cells listed, or use --keep-valid to commit the valid rows and "
            "quarantine the rest.",
        )
    result.quarantined = len(prepared.quarantine)
    if prepared.records.num_rows == 0:
        if report.rows_read == report.rows_blank:
            raise DomainError(
                f"{table.file.name} has no data rows under its header; nothing was written.",
                "Check the sheet and header_row in the mapping's [table]; a source "
                "is never replaced by an empty one.",
            )
        raise ValidationFailed(
            f"all {report.rows_rejected} rows of {table.file.name} "
            "were refused; nothing was written.",
            report,
            "Fix the cells listed; a source is never replaced by an empty one.",
        )
    return _land(store, prepared, result, dry_run, step, create, keep_others=another_file)


def with_other_files(reads: Transaction | Reader, prepared: Any) -> Any:
    """The prepared file joined with the rows the source holds from its other files.

    A source may hold several files (the runs of one lab, the parts of a supplement), each
    ingested as `ingest FILE --map MAP` with FILE another file than the mapping's own (an
    ingest of the mapping's own file is the whole source and replaces every file).
    Re-ingesting one file replaces only the records, samples, quarantined rows and runs it
    brings; the source's other files keep theirs, and sections and localities are unioned.
    The other files' records are re-derived with the new ones, so age models and screens
    see the whole source.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    m = prepared.mapping
    if m.table is None:
        return prepared
    sid, name = m.source_id, m.table.file.name
    # rows stored before records named their file come from the source's one file
    same_file = (
        "coalesce(file_name, (SELECT any_value(file_name) FROM sources WHERE source_id = ?)) "
        "IS NOT DISTINCT FROM ?"
    )
    kept = reads.fetch(
        f"SELECT * FROM records WHERE source_id = ? AND NOT ({same_file}) ORDER BY record_id",
        [sid, sid, name],
    )
    if not kept.num_rows:
        return prepared
    clash = pc.is_in(kept.column("record_id"), value_set=prepared.records.column("record_id"))
    if pc.any(clash).as_py():
        row = kept.filter(clash).slice(0, 1).to_pylist()[0]
        earlier = row["file_name"] or "an earlier file"
        raise DomainError(
            f"{name}: sample {row['sample_id']!r} (section {row['section_id']!r}, replicate "
            f"{row['replicate']}) is already stored for {sid} from {earlier}; nothing was "
            "written.",
            "Give the repeated analysis its own replicate (or run and position), or "
            "re-ingest the file that holds it.",
        )
    records = pa.concat_tables(
        [prepared.records, kept.select(prepared.records.column_names).cast(prepared.records.schema)]
    )
    samples = _union(reads, "samples", sid, prepared.samples, ("section_id", "sample_id"), records)
    sections = _union(reads, "sections", sid, prepared.sections, ("section_id",), records)
    localities = _union(reads, "localities", sid, prepared.localities, ("locality_id",), records)
    quarantine = [
        q
        for q in reads.fetch(
            f"SELECT * FROM quarantine WHERE source_id = ? AND NOT ({same_file})",
            [sid, sid, name],
        ).to_pylist()
    ]
    runs = prepared.runs
    stored_runs = reads.fetch("SELECT * FROM runs WHERE source_id = ?", [sid])
    if stored_runs.num_rows:
        new_ids = runs.column("run_id") if runs is not None else pa.array([], pa.string())
        old = stored_runs.filter(pc.invert(pc.is_in(stored_runs.column("run_id"), new_ids)))
        runs = old if runs is None else pa.concat_tables([runs, old.cast(runs.schema)])
    for q in quarantine:
        q.pop("source_id", None)
        q.pop("ingested_version", None)
    return dataclasses.replace(
        prepared,
        records=records,
        samples=samples,
        sections=sections,
        localities=localities,
        runs=runs,
        quarantine=list(prepared.quarantine) + quarantine,
    )


def _file_names(records: pa.Table, m: Any) -> str:
    """The files a source's records come from ("; "-separated, sorted)."""
    import pyarrow.compute as pc

    if m.table is None:
        return str(m.path.name)
    names = {n for n in pc.unique(records.column("file_name")).to_pylist() if n}
    return "; ".join(sorted(names | {m.table.file.name}))


def _union(
    reads: Transaction | Reader,
    table: str,
    sid: str,
    new: pa.Table,
    key: tuple[str, ...],
    records: pa.Table,
) -> pa.Table:
    """The new rows of a per-source table, plus the stored ones whose key they lack and
    whose records are still there."""
    import pyarrow as pa
    import pyarrow.compute as pc

    old = reads.fetch(f"SELECT * FROM {table} WHERE source_id = ?", [sid])
    if not old.num_rows:
        return new

    def keys(t: pa.Table) -> pa.Array:
        return pc.binary_join_element_wise(
            *[pc.fill_null(t.column(k).cast(pa.string()), "") for k in key], "\x1f"
        )

    keep = pc.and_(
        pc.invert(pc.is_in(keys(old), value_set=keys(new))),
        pc.is_in(keys(old), value_set=keys(records.select(list(key)))),
    )
    return pa.concat_tables([new, old.filter(keep).select(new.column_names).cast(new.schema)])


def _check_run_materials(store: Store, mapping: Any) -> None:
    """Every material a [run] names must be one the store knows, before the sheet is split
    into standards and samples (an unknown name would make its rows look like samples)."""
    from strata13.schemas.materials import store_table

    from strata13.suggest import did_you_mean

    table, _ = store_table(store.settings())
    known = sorted({m.material for m in table})
    names = [*mapping.run["anchors"], *mapping.run["checks"]]
    for name in names:
        if name not in known:
            raise DomainError(
                f"{mapping.path.name}: [run] names reference material {name!r}, "
                "which the store's material table does not have; nothing was "
                "written." + did_you_mean(name, known),
                "Name a material `strata13 scales` lists, or add it with --materials FILE.",
            )
    _check_run_value_sets(mapping, table, names)


def _check_run_value_sets(mapping: Any, table: Any, names: list[str]) -> None:
    """A value set the [run] names must exist: for its material, or (one name for all) for
    at least one of the run's materials."""
    from strata13.schemas.materials import value_sets

    from strata13.suggest import did_you_mean

    named = mapping.run.get("value_set")
    if named is None:
        return
    pairs = named.items() if isinstance(named, dict) else [(None, named)]
    for mat, wanted in pairs:
        have = (
            value_sets(table, mat)
            if mat
            else sorted({v for n in names for v in value_sets(table, n)})
        )
        if wanted not in have:
            raise DomainError(
                f"{mapping.path.name}: [run] value_set {wanted!r} is not a value set of "
                f"{mat or 'any of the run materials'} in the store's material table; nothing "
                "was written." + did_you_mean(wanted, have),
                f"Value sets there: {', '.join(have)} (see `strata13 scales`).",
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
    store: Store,
    prepared: Any,
    result: IngestResult,
    dry_run: bool,
    step: Any,
    create: Any,
    keep_others: bool = False,
) -> IngestResult:
    """Derive and commit one prepared source (or, for a dry run, only derive it);
    ``keep_others``: the file is one of several of its source (with_other_files)."""
    from strata13.compile.ages.ties import ties_table

    mapping = prepared.mapping
    new_ties = ties_table(mapping.ties)
    if dry_run:
        derived, result.redated = _dry_run(store, prepared, new_ties, keep_others)
        result.ties = new_ties.num_rows
        result.standards = prepared.runs.num_rows if prepared.runs is not None else 0
        result.run_qc = derived.run_qc.to_pylist() if derived.run_qc is not None else []
        result.warnings = run_warnings(result.run_qc)
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
        if keep_others:
            prepared = with_other_files(tx, prepared)
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
        result.warnings = run_warnings(result.run_qc)
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


META = ("citation", "year", "doi", "url", "kind", "lab", "republishes", "note", *BIB_KEYS)


def _meta(source: dict[str, Any]) -> tuple[Any, ...]:
    """The source's metadata as stored in the sources table (lists "|"-joined, volume and
    issue as text)."""

    def stored(k: str) -> Any:
        v = source.get(k)
        if k in ("republishes", "authors"):
            return "|".join(v or []) if k == "republishes" or v else None
        if k in ("volume", "issue") and v is not None:
            return str(v)
        return v

    return tuple(stored(k) for k in META)


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


def _dry_run(
    store: Store, prepared: Any, new_ties: pa.Table, keep_others: bool = False
) -> tuple[Any, int]:
    """Derive as an ingest would, against the store's ties (if the store exists); also the
    number of stored records of other sources whose ages the new ties would change."""
    from strata13.compile.store.lake import is_store

    settings = settings_from_store(store)
    if not is_store(store.path):
        _check_tie_targets(None, prepared, new_ties)
        derived = derive(
            prepared.records, settings, new_ties, runs=prepared.runs, sections=prepared.sections
        )
        return derived, 0
    sid = prepared.mapping.source_id
    con, _ = store.reader()
    try:
        reads = Reader(con)
        ties = _all_ties(reads, sid, new_ties)
        if keep_others:
            prepared = with_other_files(reads, prepared)
        _check_tie_targets(reads, prepared, new_ties)
        fixes = reads.fetch("SELECT * FROM corrections WHERE source_id = ?", [sid])
        old_ties = reads.fetch("SELECT source_id FROM age_ties WHERE tie_source_id = ?", [sid])
        targets = {
            t
            for t in old_ties.column("source_id").to_pylist()
            + new_ties.column("source_id").to_pylist()
            if t and t != sid
        }
        others = derive_stored(reads, sorted(targets), settings, ties)
        redated = sum(_age_changes(r, d.table) for r, d in others.values())
    finally:
        con.close()
    derived = derive(
        prepared.records,
        settings,
        ties,
        runs=prepared.runs,
        corrections=fixes,
        sections=prepared.sections,
    )
    return derived, redated


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
                **dict(zip(META, _meta(src), strict=True)),
                "file_name": _file_names(records, m),
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


def run_warnings(run_qc: list[dict[str, Any]]) -> list[str]:
    """One sentence per loud run QC finding: a check material beyond its tolerance, a
    normalisation slope far from 1 (the run_qc rows' ``warnings``)."""
    return [
        f"run {q['run_id']} {q['isotope']} ({q['source_id']}): {w}"
        for q in run_qc
        if q.get("warnings")
        for w in str(q["warnings"]).split("; ")
    ]


def accepted_lines(run_qc: list[dict[str, Any]]) -> list[str]:
    """The accepted reference-material values a source's runs were normalised to, one line
    per isotope and material: value on VPDB, value set and status, the published value
    and scale (and the relation that converted it), who chose the value set, the source."""
    import json

    seen: dict[tuple[str, str, str], str] = {}
    for q in run_qc:
        for mat, a in sorted(json.loads(q.get("accepted_json") or "{}").items()):
            via = (
                f" = {a['published']:+g} ‰ {a['published_scale']} via {a['converted_with']}"
                if a.get("converted_with")
                else ""
            )
            seen.setdefault(
                (q["source_id"], q["isotope"], mat),
                f"accepted {q['isotope']} {mat} ({a['role']}): {a['value_vpdb']:+.3f} ‰ VPDB"
                f"{via} — {a['value_set']}, {a['status']}; {a['chosen_by']}; source: "
                f"{a['source']}",
            )
    return list(seen.values())
