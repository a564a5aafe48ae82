"""Export: a cleaned, reproducible compilation in a folder, as a data package.

Files: ``records.parquet`` and ``records.csv`` (rows ordered by record id, column types
fixed by the schema, never float32); beside them, as Parquet and CSV, the tables the
records depend on (``chains``, ``chain_parameters``, ``ties``, ``age_models``,
``screen_results``, ``runs``, ``run_qc``, ``corrections``, ``duplicate_decisions``:
``tables``), each restricted to what the exported records use; ``columns.csv``, the data
dictionary (``schemas.package_tables``); ``bibliography.bib`` and ``bibliography.txt``
(``bibliography``, ``citing``); ``README.txt`` for a data repository (``readme``); and
``manifest.json`` (tool, schema and store versions, settings hash, filters, counts, and the
SHA-256 and size of every file, by path relative to the manifest), written once after every
file through an :class:`~strata13.compile.export.artifact.Artifact`. Nothing in the output
depends on the clock, so one store version exported twice gives identical bytes.

CSV text cells a spreadsheet would run as a formula (starting with = + - @ or a tab/CR)
get a leading apostrophe; numbers are never touched, and neither is text that is a plain
number.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.export.artifact import Artifact
from strata13.compile.export.bibliography import bibtex, plain_text
from strata13.compile.export.citing import references
from strata13.compile.export.readme import readme
from strata13.compile.query.filters import Filters, run
from strata13.schemas.fields import SCHEMA_VERSION
from strata13.schemas.package_tables import PACKAGE_TABLES, dictionary
from strata13.schemas.records import ANALYSES, RECORDS_COLUMNS, arrow_schema

if TYPE_CHECKING:
    import pyarrow as pa

_PLAIN_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


__all__ = ["FORMULA_START", "ExportResult", "export", "neutralise", "write_csv"]


@dataclass
class ExportResult:
    """What an export wrote: the folder, the store version, the record count and the
    SHA-256 of every file by its path relative to the folder."""

    out: Path
    version: int
    records: int
    files: dict[str, str]  # relative path -> sha256


def neutralise(text: str) -> str:
    """Prefix an apostrophe to text that a spreadsheet would run as a formula."""
    # fullmatch: Python's ``$`` also matches before a final newline, RE2's (the column
    # writer's) does not, and "-1\n" is no plain number
    if text and text.startswith(FORMULA_START) and not _PLAIN_NUMBER.fullmatch(text):
        return "'" + text
    return text


def _records_schema() -> pa.Schema:
    types = dict(ANALYSES)
    return arrow_schema([(c, types[c]) for c in RECORDS_COLUMNS])


_NEEDS_QUOTES = r'[,"\r\n]'


def _cells(column: pa.ChunkedArray | pa.Array) -> pa.Array:
    """One column as CSV cell text, as Python's csv writer (QUOTE_MINIMAL) writes it: text
    neutralised and quoted where needed, integers as digits, floats in their shortest exact
    form (``repr``), nulls empty."""
    import pyarrow as pa
    import pyarrow.compute as pc

    col = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    if pa.types.is_floating(col.type):
        values = col.to_pylist()
        return pa.array(["" if v is None else repr(float(v)) for v in values], pa.string())
    text = pc.cast(col, pa.string())
    if pa.types.is_integer(col.type):
        return pc.fill_null(text, "")
    starts = [pc.starts_with(text, f) for f in FORMULA_START]
    formula = starts[0]
    for more in starts[1:]:
        formula = pc.or_(formula, more)
    risky = pc.and_(formula, pc.invert(pc.match_substring_regex(text, _PLAIN_NUMBER.pattern)))
    text = pc.if_else(pc.fill_null(risky, False), pc.binary_join_element_wise("'", text, ""), text)
    quoted = pc.binary_join_element_wise("", pc.replace_substring(text, '"', '""'), "", '"')
    needs = pc.fill_null(pc.match_substring_regex(text, _NEEDS_QUOTES), False)
    return pc.fill_null(pc.if_else(needs, quoted, text), "")


def write_csv(table: pa.Table, path: Path) -> None:
    """A table as CSV: numbers in their shortest exact form, formula-like text
    neutralised, empty cells for nulls; the bytes Python's csv writer gives, built a
    column at a time."""
    import pyarrow.compute as pc

    with path.open("w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(table.column_names) + "\n")
        if table.num_rows == 0:
            return
        if table.num_columns == 1:  # a lone empty field is written "" so no row is blank
            lines = _cells(table.column(0))
            lines = pc.if_else(pc.equal(lines, ""), '""', lines)
        else:
            lines = pc.binary_join_element_wise(*(_cells(c) for c in table.columns), ",")
        for start in range(0, len(lines), 100_000):
            fh.write("\n".join(lines.slice(start, 100_000).to_pylist()) + "\n")


def export(
    con: Any,
    version: int,
    art: Artifact,
    filters: Filters,
    settings_hash: str,
    store_path: Path,
    settings: dict[str, Any] | None = None,
    *,
    reproduce: str | None = None,
    extra: dict[str, Any] | None = None,
    demo: bool = False,
) -> ExportResult:
    """Write the export folder ``art`` for ``version`` (``con`` is a reader pinned to it)
    and its manifest, last; ``settings`` (time scale, screening rule set and its hash, …)
    go into the manifest, ``reproduce`` (the command line) replaces the default one, and
    ``extra`` adds entries (the curve's manifest); ``demo`` (a store the demo made) puts
    the invented-data warning first in README.txt. Files already registered in ``art``
    (the curve) are listed with these."""
    import pyarrow.parquet as pq

    from strata13 import __version__

    out = art.open()
    table = run(con, filters, order="record_id")
    table = table.select(RECORDS_COLUMNS).cast(_records_schema())
    pq.write_table(
        table,
        art.path("records.parquet"),
        compression="zstd",
        write_statistics=True,
        use_dictionary=True,
        store_schema=True,
    )
    art.add("records.parquet")
    write_csv(table, art.path("records.csv"))
    art.add("records.csv")
    from strata13.compile.export.tables import package_tables
    from strata13.compile.store.lake import Store

    stored = Store.read_settings(con, "settings")
    related = package_tables(con, table, stored)
    for name, t in related.items():
        _write_table(art, name, t)
    entries = references(con, table, related, stored, with_curve="curve" in (extra or {}))
    art.write_text("bibliography.bib", bibtex(entries))
    art.write_text("bibliography.txt", plain_text(entries))
    tables = {"records": [(c, dict(ANALYSES)[c]) for c in RECORDS_COLUMNS], **PACKAGE_TABLES}
    write_dictionary(art, tables)
    ids = sorted(set(table.column("source_id").to_pylist()))
    counts = {
        **{name: t.num_rows for name, t in related.items()},
        "records": table.num_rows,
        "sources": len(ids),
        "sections": len(
            set(
                zip(
                    table.column("source_id").to_pylist(),
                    table.column("section_id").to_pylist(),
                    strict=True,
                )
            )
        ),
    }
    from strata13.compile.store.relations import snapshot_time

    fields = {
        "tool": "strata13",
        "tool_version": __version__,
        "schema_version": SCHEMA_VERSION,
        "store_version": version,
        "store_version_time": snapshot_time(con, version),
        "settings_hash": settings_hash,
        "settings": settings or {},
        "filters": filters.describe(),
        "counts": counts,
        "reproduce": reproduce
        or f"strata13 export --store {store_path.name} --as-of {version} --out DIR",
        **(extra or {}),
    }
    art.write_text("README.txt", readme(fields, sorted(art.files), entries, related, demo=demo))
    art.finish(fields)
    return ExportResult(out, version, int(table.num_rows), dict(art.files))


def _write_table(art: Artifact, name: str, table: pa.Table) -> None:
    """One table as Parquet (types as declared) and CSV (as the records')."""
    import pyarrow.parquet as pq

    pq.write_table(
        table,
        art.path(f"{name}.parquet"),
        compression="zstd",
        write_statistics=True,
        use_dictionary=True,
        store_schema=True,
    )
    art.add(f"{name}.parquet")
    write_csv(table, art.path(f"{name}.csv"))
    art.add(f"{name}.csv")


def write_dictionary(art: Artifact, tables: dict[str, list[tuple[str, str]]]) -> None:
    """columns.csv: table, column, type, unit, meaning, allowed values of every column."""
    with art.path("columns.csv").open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["table", "column", "type", "unit", "meaning", "allowed_values"])
        for e in dictionary(tables):
            w.writerow([e.table, e.column, e.type, e.unit, e.meaning, e.allowed])
    art.add("columns.csv")
