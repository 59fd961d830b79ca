"""Storage: the schema (models), the one writer, reading back, Parquet export."""
