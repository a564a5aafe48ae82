"""Export: a cleaned, reproducible compilation in a folder.

Files: ``records.parquet`` and ``records.csv`` (rows ordered by record id, column types
fixed by the schema, never float32), ``bibliography.bib`` and ``bibliography.txt``, and
``manifest.json`` (tool, schema and store versions, settings hash, filters, counts, and the
SHA-256 of every file written, by path relative to the manifest). Nothing in the output
depends on the clock, so one store version exported twice gives identical bytes.

CSV text cells a spreadsheet would run as a formula (starting with = + - @ or a tab/CR)
get a leading apostrophe; numbers are never touched, and neither is text that is a plain
number.
"""

from __future__ import annotations

import csv
import hashlib
import json
import re
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from strata13.compile.query.filters import Filters, run
from strata13.schemas.fields import SCHEMA_VERSION
from strata13.schemas.records import ANALYSES, RECORDS_COLUMNS, arrow_schema

from strata13.errors import OptionError

if TYPE_CHECKING:
    import pyarrow as pa

_PLAIN_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


@dataclass
class ExportResult:
    out: Path
    version: int
    records: int
    files: dict[str, str]  # relative path -> sha256


def neutralise(text: str) -> str:
    """Prefix an apostrophe to text that a spreadsheet would run as a formula."""
    if text and text.startswith(FORMULA_START) and not _PLAIN_NUMBER.match(text):
        return "'" + text
    return text


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _records_schema() -> pa.Schema:
    types = dict(ANALYSES)
    return arrow_schema([(c, types[c]) for c in RECORDS_COLUMNS])


def _format_number(v: float) -> str:
    return repr(float(v))


def write_csv(table: pa.Table, path: Path) -> None:
    import pyarrow as pa

    text_cols = {f.name for f in table.schema if pa.types.is_string(f.type)}
    int_cols = {f.name for f in table.schema if pa.types.is_integer(f.type)}
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(table.column_names)
        columns = [table.column(c).to_pylist() for c in table.column_names]
        for row in zip(*columns, strict=True):
            out = []
            for name, v in zip(table.column_names, row, strict=True):
                if v is None:
                    out.append("")
                elif name in text_cols:
                    out.append(neutralise(v))
                elif name in int_cols:
                    out.append(str(int(v)))
                else:
                    out.append(_format_number(v))
            w.writerow(out)


def _bibtex(sources: list[dict[str, Any]]) -> str:
    def esc(s: Any) -> str:
        return str(s).replace("{", "\\{").replace("}", "\\}")

    out = []
    for s in sources:
        fields = [("note", s["citation"])]
        for k in ("year", "doi", "url"):
            if s.get(k):
                fields.append((k, s[k]))
        fields.append(("keywords", f"strata13 source {s['source_id']}; {s.get('kind') or ''}"))
        body = ",\n".join(f"  {k} = {{{esc(v)}}}" for k, v in fields)
        out.append(f"@misc{{{s['source_id']},\n{body}\n}}\n")
    return "\n".join(out)


def export(
    con: Any,
    version: int,
    out: Path,
    filters: Filters,
    settings_hash: str,
    store_path: Path,
    settings: dict[str, Any] | None = None,
) -> ExportResult:
    """Write the export folder for ``version`` (``con`` is a reader pinned to it);
    ``settings`` (time scale, screening rule set and its hash, …) go into the manifest."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    from strata13 import __version__

    if out.exists() and not out.is_dir():
        raise OptionError(f"--out {out} is a file, not a folder.", "Name a folder.")
    out.mkdir(parents=True, exist_ok=True)
    table = run(con, filters, order="record_id")
    table = table.select(RECORDS_COLUMNS).cast(_records_schema())
    files: dict[str, str] = {}
    pq.write_table(
        table,
        out / "records.parquet",
        compression="zstd",
        write_statistics=True,
        use_dictionary=True,
        store_schema=True,
    )
    write_csv(table, out / "records.csv")
    ids = sorted(set(table.column("source_id").to_pylist()))
    srcs = []
    if ids:
        srcs = con.execute(
            f"SELECT source_id, citation, year, doi, url, kind FROM sources WHERE source_id IN "
            f"({', '.join('?' for _ in ids)}) ORDER BY source_id",
            ids,
        ).to_arrow_table()
        srcs = srcs.to_pylist()
    (out / "bibliography.bib").write_text(_bibtex(srcs), encoding="utf-8")
    (out / "bibliography.txt").write_text(
        "".join(
            f"[{s['source_id']}] {s['citation']}"
            + (f" doi:{s['doi']}" if s.get("doi") else "")
            + "\n"
            for s in srcs
        ),
        encoding="utf-8",
    )
    for name in ("records.parquet", "records.csv", "bibliography.bib", "bibliography.txt"):
        files[name] = _sha(out / name)
    counts = {
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
    snap = con.execute(
        "SELECT CAST(snapshot_time AS VARCHAR) FROM lake.snapshots() WHERE snapshot_id = ?",
        [version],
    ).fetchone()
    manifest = {
        "tool": "strata13",
        "tool_version": __version__,
        "schema_version": SCHEMA_VERSION,
        "store_version": version,
        "store_version_time": snap[0] if snap else None,
        "settings_hash": settings_hash,
        "settings": settings or {},
        "filters": filters.describe(),
        "counts": counts,
        "files": [{"path": k, "sha256": v} for k, v in sorted(files.items())],
        "reproduce": f"strata13 export --store {store_path.name} --as-of {version} --out DIR",
    }
    (out / "manifest.json").write_text(
        json.dumps(manifest, indent=1, sort_keys=True, ensure_ascii=False) + "\n", encoding="utf-8"
    )
    _ = pa  # arrow is the table type throughout
    return ExportResult(out, version, table.num_rows, files)
