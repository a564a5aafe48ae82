"""The derive engine: one pipeline (corrections, harmonise, ages, paleo, screens) for ingest
and every recompute command."""
