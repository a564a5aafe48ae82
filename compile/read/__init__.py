"""Reading a sheet: cells with coordinates, cleaning of number text, the mapping file."""
