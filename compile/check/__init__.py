"""Checking a mapped sheet: schemas, cross-row rules, the report, the typed tables."""
