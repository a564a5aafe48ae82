"""The strata13 engine: read, clean, map, validate, derive, store, query, export."""
