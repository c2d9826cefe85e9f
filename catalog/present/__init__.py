"""Display units, files, charts and the report."""
