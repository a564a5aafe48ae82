"""Duplicates and coverage against a store: candidates, stored decisions, the drop list.

``overlaps`` lists probable duplicates between sources (``overlaps.find_overlaps``) with
the decisions already taken; ``confirm`` stores a decisions file in one commit and works
out, for every confirmed pair, which record views leave out (the re-publisher's, where the
lineage says who re-publishes whom). Nothing is ever deleted: filters skip the dropped
record ids unless asked to keep duplicates.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import TYPE_CHECKING

from strata13.compile.store.reader import Reader

from strata13.errors import DomainError

if TYPE_CHECKING:
    from typing import Unpack

    import pandas as pd
    from strata13.compile.integrity.overlaps import Tolerances
    from strata13.compile.store.lake import Store


def _declared(reads: Reader) -> dict[str, set[str]]:
    """source -> sources it re-publishes (from the sources' lineage)."""
    out: dict[str, set[str]] = {}
    for sid, rep in reads.rows("SELECT source_id, republishes FROM sources"):
        if rep:
            out[sid] = {r for r in rep.split("|") if r}
    return out


def overlaps(
    store: Store, source: str | None = None, **tolerances: Unpack[Tolerances]
) -> pd.DataFrame:
    """Candidate duplicate pairs with the decision taken on each (if any)."""
    from strata13.compile.integrity.overlaps import find_overlaps

    con, _ = store.reader()
    try:
        records = con.execute("SELECT * FROM records").df()
        declared = _declared(Reader(con))
        decided = con.execute("SELECT record_a, record_b, decision FROM duplicates").df()
    finally:
        con.close()
    pairs = find_overlaps(records, source=source, declared=declared, **tolerances)
    pairs["decision"] = ""
    if len(decided) and len(pairs):
        key = {(a, b): d for a, b, d in decided.itertuples(index=False)}
        key |= {(b, a): d for (a, b), d in list(key.items())}
        pairs["decision"] = [
            key.get((a, b), "") for a, b in zip(pairs["record_a"], pairs["record_b"], strict=True)
        ]
    return pairs


def confirm(store: Store, path: Path) -> tuple[int | None, int, int]:
    """Store a decisions file (record_a, record_b, decision, note) in one commit.
    Returns (version, confirmed, rejected)."""
    import pyarrow as pa
    from strata13.compile.derive.engine import Settings
    from strata13.compile.integrity.overlaps import duplicates_to_drop, read_decisions
    from strata13.schemas.records import DUPLICATES, arrow_schema

    decisions = read_decisions(path)
    with store.transaction("overlaps", path.name) as tx:
        ids = sorted({d.record_a for d in decisions} | {d.record_b for d in decisions})
        found: dict[str, str] = (
            dict(
                tx.rows(
                    "SELECT record_id, source_id FROM records WHERE record_id IN "
                    f"({', '.join('?' for _ in ids)})",
                    ids,
                )
            )
            if ids
            else {}
        )
        missing = sorted(set(ids) - set(found))
        if missing:
            raise DomainError(
                f"{path.name} names record {missing[0]!r}, which is not in the "
                "store; nothing was written.",
                "Use the record ids `strata13 overlaps` lists.",
            )
        drop = duplicates_to_drop(decisions, source_of=found, declared=_declared(tx))
        now = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M:%S")
        rows = []
        for d in decisions:
            tx.delete("duplicates", record_a=d.record_a, record_b=d.record_b)
            tx.delete("duplicates", record_a=d.record_b, record_b=d.record_a)
            dropped = (
                (d.record_a if d.record_a in drop else d.record_b if d.record_b in drop else None)
                if d.decision == "confirm"
                else None
            )
            rows.append(
                {
                    "record_a": d.record_a,
                    "record_b": d.record_b,
                    "decision": d.decision,
                    "note": d.note or None,
                    "drop_record_id": dropped,
                    "decided_utc": now,
                }
            )
        tx.insert("duplicates", pa.Table.from_pylist(rows, schema=arrow_schema(DUPLICATES)))
        settings = Settings.from_stored(tx.settings())
        n_conf = sum(d.decision == "confirm" for d in decisions)
        tx.record({"confirmed": n_conf, "rejected": len(decisions) - n_conf}, settings.hash())
    return tx.version, n_conf, len(decisions) - n_conf
