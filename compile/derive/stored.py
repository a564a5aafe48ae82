"""Re-deriving stored sources inside a write: read their inputs, run the derive engine.

Used by every write that changes what a source's derived values depend on (its ties, a
correction, a re-dating source's ties); the store's transaction writes the result.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pyarrow as pa
    from strata13.compile.derive.engine import Derived, Settings
    from strata13.compile.store.reader import Reader
    from strata13.compile.store.transaction import Transaction


def derive_stored(
    tx: Transaction | Reader,
    sources: Sequence[str],
    settings: Settings,
    ties: pa.Table | None = None,
) -> dict[str, tuple[pa.Table, Derived]]:
    """Re-derive stored sources from their records, runs, corrections, sections and the
    given or stored ties: {source: (stored records, Derived)}; a source with no records is
    left out. A Reader does it for a dry run (nothing is written either way)."""
    from strata13.compile.derive.engine import derive

    if ties is None:
        ties = tx.fetch("SELECT * FROM age_ties")
    out = {}
    for sid in sources:
        recs = tx.fetch("SELECT * FROM records WHERE source_id = ? ORDER BY record_id", [sid])
        if not recs.num_rows:
            continue
        runs = tx.fetch("SELECT * FROM runs WHERE source_id = ?", [sid])
        fixes = tx.fetch("SELECT * FROM corrections WHERE source_id = ?", [sid])
        secs = tx.fetch("SELECT * FROM sections WHERE source_id = ?", [sid])
        out[sid] = (
            recs,
            derive(recs, settings, ties, runs=runs, corrections=fixes, sections=secs),
        )
    return out
