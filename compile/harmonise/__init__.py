"""Harmonisation: δ values onto ‰ VPDB, each correction a pure function returning
(values, Step) so the chain of steps can be stored and explained.

Modules: ``steps`` (how much a step changed the values; the Step type itself is
``derive.steps.Step``), ``oxygen`` (VSMOW ↔ VPDB), ``anchors``
(re-anchoring to accepted reference-material values), ``runs`` (in-house run
normalisation and QC), ``acid`` (phosphoric-acid fractionation), ``ratios`` (δ ↔ ratio ↔
atom fraction, Δ13C).
"""
