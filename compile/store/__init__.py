"""The store: a DuckLake lakehouse in one folder; every write goes through it."""
