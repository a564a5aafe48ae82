"""Synthesis: composite curves and excursion tables from the compiled samples.

``curve`` (binning, LOESS with bands and robustness) and ``excursion`` (baseline, peak,
magnitude, onset and recovery per section) are pure functions of a sample table;
``figures`` draws them (matplotlib, imported lazily); ``run`` reads the samples of one
store version through the query filters and writes the tables, figures and manifest of a
``--out`` folder.
"""
