"""The strata13 command line: parses, calls strata13.compile, renders with rich."""
