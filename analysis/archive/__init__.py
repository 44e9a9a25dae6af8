"""Archive: the stored runs and the fleet tables.

``store.Archive`` keeps one folder per run (Parquet streams, metadata, analysis
results) under an archive root with a SQLite catalog; ``files`` holds the atomic
file helpers; ``fleet`` writes the events and KPIs of all runs as one partitioned
Parquet dataset; ``courses`` keeps distance marks per course; ``overview_store``
reads and writes the whole-run chart overview of a run. Entry point: ``store.Archive``.
"""
