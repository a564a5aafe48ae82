"""Corrections: the first derive stage, the user's stored fixes on top of the published values.

Non-δ fields take the corrected value here; a corrected δ value is applied by ``harmonise``
(its chain opens with the correction step) so ``*_reported`` keeps what was published.
The corrections themselves live in ``integrity.corrections``.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from strata13.compile.derive.engine import Given, Recorded
from strata13.compile.derive.settings import Settings

if TYPE_CHECKING:
    import pyarrow as pa


def stage(table: pa.Table, settings: Settings, given: Given) -> tuple[pa.Table, Recorded]:
    """Write the store's corrections of non-δ fields and mark every corrected record."""
    from strata13.compile.integrity.corrections import apply

    return apply(table, given.corrections), Recorded()
