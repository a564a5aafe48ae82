"""Writing outputs: the export package and where commands may write."""
