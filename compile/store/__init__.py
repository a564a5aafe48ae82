"""The store: a DuckLake lakehouse in one folder; every write goes through it.

``lake`` (Store: open, create, reader, transaction), ``transaction`` (the one unit of
work), ``catalog`` (the catalog backend interface and its SQLite implementation),
``relations`` (the relation names readers and the writer share), ``reader`` (SELECT
helpers over them).
"""
