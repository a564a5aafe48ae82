"""Integrity of the compilation: duplicates across sources, the user's corrections, coverage.

Compilations fold in other compilations: later papers re-publish, re-scale or re-date
earlier samples, so one measurement can enter the store under several sources. Counting it
twice would overweight its section in curves and counts.

Modules:

* ``overlaps`` (pure) — ``find_overlaps(records)`` -> scored candidate pairs across
  sources, each with the reasons it was proposed; ``read_decisions(path)`` reads the user's
  confirm/reject file; ``duplicates_to_drop(decisions)`` -> the record ids a view leaves
  out (nothing is ever deleted).
* ``store_ops`` — the candidates with the decisions a store holds; ``confirm`` stores a
  decisions file in one store transaction.
* ``corrections`` — the user's corrections of published values: checked, stored in one
  transaction that re-derives their sources, applied by derive on top of the reported
  values, listed with their status (applied or orphaned).
* ``coverage`` — record counts per time bin and region or source, zeros included, and the
  heatmap.
"""
