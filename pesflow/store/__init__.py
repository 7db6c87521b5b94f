"""Stage 5, the store: one durable Parquet record per point, keyed by content."""
