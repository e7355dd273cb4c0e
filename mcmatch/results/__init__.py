"""The run summary, run folders (atomic, marker file), CSV/Parquet/JSON."""
