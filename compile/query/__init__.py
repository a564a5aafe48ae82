"""Reading the store: filters turned into SQL, regions, the guarded `sql` command."""
