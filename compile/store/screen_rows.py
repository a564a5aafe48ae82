"""Per-rule screen results, stored compactly and shown whole.

The derive pipeline yields one row per record and rule (``screen_results``: outcome and
detail). Most of these rows say the same thing for a whole source — a rule passes, or does
not apply to the material, for nearly every record — and written out in long form they
took more room than the records themselves. So the store keeps, per source and rule, the
outcome and detail most of its records share (``screen_common``) and, in
``screen_results``, only the rows that differ from it. The readers' ``screen_results`` view
puts the long form back: the stored rows, plus the common outcome for every record of the
source that has no stored row for the rule. Nothing is lost: a (source, rule) is made
common only when the rule has a row for every record of the source, so the view shows
exactly the rows the pipeline produced (a test compares both). Versions written before
``screen_common`` existed kept the long form, and their view reads it as it is.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pyarrow as pa
    from strata13.compile.store.transaction import Transaction

COMMON = "screen_common"  # catalog table: (source_id, rule, outcome, detail)


def split(results: pa.Table, records_per_source: dict[str, int]) -> tuple[pa.Table, pa.Table]:
    """(rows to store, common outcomes) of long-form ``results``.

    ``records_per_source`` counts each source's records as stored; a rule whose rows do not
    cover them all keeps every row."""
    import duckdb
    import pyarrow as pa

    con = duckdb.connect()
    try:
        con.register("results", results)
        con.register(
            "counts",
            pa.table(
                {
                    "source_id": pa.array(list(records_per_source), pa.string()),
                    "n": pa.array(list(records_per_source.values()), pa.int64()),
                }
            ),
        )
        common = con.execute(
            """
            WITH complete AS (
                SELECT source_id, rule FROM results JOIN counts USING (source_id)
                GROUP BY source_id, rule, n HAVING count(DISTINCT record_id) = n
                   AND count(*) = n
            ), ranked AS (
                SELECT source_id, rule, outcome, detail, row_number() OVER (
                    PARTITION BY source_id, rule
                    ORDER BY count(*) DESC, outcome, detail NULLS FIRST) AS k
                FROM results JOIN complete USING (source_id, rule)
                GROUP BY source_id, rule, outcome, detail
            )
            SELECT source_id, rule, outcome, detail FROM ranked WHERE k = 1
            ORDER BY source_id, rule
            """
        ).to_arrow_table()
        con.register("common", common)
        kept = con.execute(
            f"""
            SELECT {", ".join(f'r."{c}"' for c in results.column_names)} FROM results r
            LEFT JOIN common c USING (source_id, rule)
            WHERE c.rule IS NULL OR r.outcome IS DISTINCT FROM c.outcome
               OR r.detail IS DISTINCT FROM c.detail
            """
        ).to_arrow_table()
    finally:
        con.close()
    return kept.cast(results.schema), common


def replace(tx: Transaction, source_ids: Sequence[str] | None, results: pa.Table | None) -> None:
    """Replace the screen results of ``source_ids`` (None: all) in compact form; the
    sources' records must already be written in this transaction."""
    tx.delete_sources("screen_results", source_ids)
    tx.delete_sources(COMMON, source_ids)
    if results is None or results.num_rows == 0:
        return
    sources = sorted(set(results.column("source_id").to_pylist()) - {None})
    counts = {
        str(s): int(n)
        for s, n in tx.con.execute(
            "SELECT source_id, count(*) FROM lake.analyses WHERE list_contains(?, source_id) "
            "GROUP BY source_id",
            [sources],
        ).fetchall()
    }
    kept, common = split(results, counts)
    tx.append("screen_results", kept)
    tx.insert(COMMON, common)


def view_sql(columns: str, at: str) -> str:
    """The long-form ``screen_results`` view of one version (``at``: its AT clause)."""
    return (
        f"SELECT {columns} FROM lake.screen_results{at} UNION ALL "
        "SELECT a.record_id, c.rule, c.outcome, c.detail, a.source_id "
        f"FROM (SELECT record_id, source_id FROM lake.analyses{at}) a "
        f"JOIN (SELECT * FROM lake.{COMMON}{at}) c USING (source_id) "
        f"ANTI JOIN (SELECT record_id, rule FROM lake.screen_results{at}) s "
        "ON s.record_id = a.record_id AND s.rule = c.rule"
    )
