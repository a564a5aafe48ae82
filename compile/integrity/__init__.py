"""Integrity of the compilation: the same measurement published more than once.

Compilations fold in other compilations: later papers re-publish, re-scale or re-date
earlier samples, so one measurement can enter the store under several sources. Counting it
twice would overweight its section in curves and counts.

Modules (all pure: no store access; the CLI and ``api`` call them):

* ``overlaps`` — ``find_overlaps(records)`` -> scored candidate pairs across sources, each
  with the reasons it was proposed; ``read_decisions(path)`` reads the user's confirm/reject
  file; ``duplicates_to_drop(decisions)`` -> the record ids a view leaves out (nothing is
  ever deleted).
"""
