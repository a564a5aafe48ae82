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

from strata13.compile import interrupts
from strata13.compile.derive import Settings, derive
from strata13.compile.errors import (
    DomainError,
    InputFileError,
    Interrupted,
    OptionError,
    ValidationFailed,
)
from strata13.compile.mapping import load_mapping
from strata13.compile.report import Report
from strata13.compile.store import Store
from strata13.compile.validate import prepare
from strata13.schemas.fields import SCHEMA_VERSION

if TYPE_CHECKING:
    import pyarrow as pa


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


def settings_from_store(store: Store) -> Settings:
    return Settings.from_stored(store.settings())


def ingest(store: Store, sheet: Path | None, mapping_path: Path, *, dry_run: bool = False,
           keep_valid: bool = False, progress: Any = None,
           create: Any = None) -> IngestResult:
    """Ingest one mapping's sheet into ``store``. Raises ValidationFailed (exit 1)."""
    step = progress or (lambda _msg: None)
    step("reading the mapping")
    mapping = load_mapping(mapping_path)
    if sheet is not None and not sheet.is_file():
        raise InputFileError(f"{sheet} " + ("is a folder, not a sheet." if sheet.is_dir()
                                            else "does not exist."), "Check the path of the sheet.")
    if sheet is not None and sheet.resolve() != mapping.table.file:
        raise OptionError(f"{sheet} is not the file {mapping_path.name} maps "
                          f"({mapping.table.file.name}).",
                          "Give the sheet named in the mapping's [table] file, or edit it.")
    step("reading and validating the sheet")
    prepared = prepare(mapping)
    report = prepared.report
    result = IngestResult(mapping.source_id, report, None, dry_run=dry_run)
    if report.errors and not keep_valid:
        raise ValidationFailed(
            f"{len(report.errors)} problem{'s' if len(report.errors) != 1 else ''} in "
            f"{mapping.table.file.name}; nothing was written.", report,
            "Fix the cells listed, or use --keep-valid to commit the valid rows and "
            "quarantine the rest.")
    result.quarantined = len(prepared.quarantine)
    if prepared.records.num_rows == 0:
        if report.rows_read == report.rows_blank:
            raise DomainError(f"{mapping.table.file.name} has no data rows under its header; "
                              "nothing was written.",
                              "Check the sheet and header_row in the mapping's [table]; a source "
                              "is never replaced by an empty one.")
        raise ValidationFailed(f"all {report.rows_rejected} rows of {mapping.table.file.name} "
                               "were refused; nothing was written.", report,
                               "Fix the cells listed; a source is never replaced by an empty "
                               "one.")
    if dry_run:
        derived = derive(prepared.records, settings_from_store(store))
        result.pending = _pending_counts(derived.table)
        result.committed = derived.table.num_rows
        return result
    step("waiting for the store's writer lock")
    if create is not None:
        store = create()
    with store.writer() as con:
        # one transaction from here: schema migration, diff and commit see one state
        con.execute("BEGIN")
        store.migrate(con)
        # settings are read under the lock, so the commit uses exactly what it derived with
        settings = Settings.from_stored(store.read_settings(con))
        step("deriving harmonised values and ages")
        derived = derive(prepared.records, settings)
        records = derived.table
        result.pending = _pending_counts(records)
        result.committed = records.num_rows
        result.added, result.removed, result.changed = _diff(con, mapping.source_id, records)
        # nothing to commit when no record, no row position, no quarantined row and no
        # source metadata would change (a mapping edited only in its comments, say)
        old = con.execute(f"SELECT {', '.join(META)}, schema_version, (SELECT count(*) FROM "
                          "lake.quarantine q WHERE q.source_id = s.source_id) FROM "
                          "lake.sources s WHERE source_id = ?", [mapping.source_id]).fetchone()
        result.moved = _moved(con, mapping.source_id, records)
        if old is not None and tuple(old[:-2]) == _meta(mapping.source) \
                and old[-2] == SCHEMA_VERSION and old[-1] == len(prepared.quarantine) \
                and not (result.added or result.removed or result.changed or result.moved):
            result.unchanged = True
            result.version = None
            con.execute("ROLLBACK")
            return result
        before = store._latest(con)
        step("committing")
        interrupts.check()  # a Ctrl-C a library swallowed still stops us before the commit
        try:
            result.version = _commit(store, con, prepared, records, derived.chains, settings,
                                     result)
        except KeyboardInterrupt:
            landed = store.latest_version() > before
            raise Interrupted(
                "interrupted: " + ("the commit landed" if landed else
                                   "the commit did not land; the store is unchanged"),
                landed) from None
    return result


META = ("citation", "year", "doi", "url", "kind", "lab", "republishes", "note")


def _meta(source: dict[str, Any]) -> tuple[Any, ...]:
    """The source's metadata as stored in the sources table."""
    return tuple("|".join(source.get("republishes", [])) if k == "republishes"
                 else source.get(k) for k in META)


def _moved(con: Any, source_id: str, records: pa.Table) -> int:
    """Records that kept their content but sit in another sheet row than before."""
    con.register("incoming_rows", records.select(["record_id", "sheet", "sheet_row"]))
    try:
        return int(con.execute(
            "SELECT count(*) FROM incoming_rows n JOIN (SELECT record_id, sheet, sheet_row FROM "
            "lake.analyses WHERE source_id = ?) o USING (record_id) WHERE n.sheet <> o.sheet "
            "OR n.sheet_row <> o.sheet_row", [source_id]).fetchone()[0])
    finally:
        con.unregister("incoming_rows")


def _diff(con: Any, source_id: str, records: pa.Table) -> tuple[int, int, int]:
    """(added, removed, changed) record counts against the stored source, in DuckDB."""
    con.register("incoming_ids", records.select(["record_id", "row_hash"]))
    try:
        old = "(SELECT record_id, row_hash FROM lake.analyses WHERE source_id = ?)"
        added = con.execute(f"SELECT count(*) FROM incoming_ids n ANTI JOIN {old} o "
                            "USING (record_id)", [source_id]).fetchone()[0]
        removed = con.execute(f"SELECT count(*) FROM {old} o ANTI JOIN incoming_ids n "
                              "USING (record_id)", [source_id]).fetchone()[0]
        changed = con.execute(f"SELECT count(*) FROM incoming_ids n JOIN {old} o "
                              "USING (record_id) WHERE n.row_hash <> o.row_hash",
                              [source_id]).fetchone()[0]
    finally:
        con.unregister("incoming_ids")
    return int(added), int(removed), int(changed)


def _pending_counts(records: pa.Table) -> dict[str, int]:
    import pyarrow.compute as pc

    out = {}
    for col in ("d13c_carb_status", "d18o_carb_status", "d13c_org_status", "age_status"):
        st = records.column(col)
        n = pc.sum(pc.fill_null(pc.starts_with(st, "pending"), False)).as_py() or 0
        if n:
            out[col.removesuffix("_status")] = int(n)
    return out


def _commit(store: Store, con: Any, prepared: Any, records: pa.Table, chains: dict[str, str],
            settings: Settings, result: IngestResult) -> int:
    """One transaction across all tables: replace the source, add chains, log the commit."""
    import pyarrow as pa
    from strata13.schemas.records import PER_SOURCE, QUARANTINE, SOURCES, arrow_schema

    m = prepared.mapping
    sid = m.source_id
    for table in PER_SOURCE:
        con.execute(f"DELETE FROM lake.{table} WHERE source_id = ?", [sid])
    version = store._latest(con) + 1
    src = m.source
    sources = pa.Table.from_pylist([{
        "source_id": sid, "citation": src.get("citation"), "year": src.get("year"),
        "doi": src.get("doi"), "url": src.get("url"), "kind": src.get("kind"),
        "lab": src.get("lab"), "republishes": _meta(src)[META.index("republishes")],
        "note": src.get("note"), "file_name": m.table.file.name,
        "file_sha256": prepared.file_sha256, "mapping_sha256": m.sha256,
        "n_records": records.num_rows, "ingested_version": version,
        "schema_version": SCHEMA_VERSION}], schema=arrow_schema(SOURCES))
    quarantine = pa.Table.from_pylist(
        [{"source_id": sid, **q, "ingested_version": version} for q in prepared.quarantine],
        schema=arrow_schema(QUARANTINE))
    if records.num_rows:
        store.add_parquet(con, "analyses", records)
    for name, table in (("sources", sources),
                        ("localities", prepared.localities), ("sections", prepared.sections),
                        ("samples", prepared.samples), ("quarantine", quarantine)):
        if table.num_rows:
            con.register("incoming", table)
            con.execute(f"INSERT INTO lake.{name} SELECT * FROM incoming")
            con.unregister("incoming")
    store.add_chains(con, chains)
    summary = {"source": sid, "records": records.num_rows, "added": result.added,
               "removed": result.removed, "changed": result.changed, "moved": result.moved,
               "quarantined": result.quarantined}
    got = store._record_commit(con, "ingest", sid, settings.hash(), summary)
    con.execute("COMMIT")
    return got


def reconcile(result: IngestResult) -> str:
    """The row accounting sentence: read = committed + quarantined + blank."""
    r = result.report
    return (f"read {r.rows_read} rows = {result.committed} committed + {result.quarantined} "
            f"quarantined + {r.rows_blank} blank")

