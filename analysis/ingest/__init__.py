"""Ingest: raw log files in, one stored run out.

A channel map (``channel_map``) names which raw column is which catalogue signal and
in which unit; ``read`` and ``formats`` stream CSV / JSON Lines / Parquet files in
blocks, ``timebase`` turns their clocks into seconds since the first sample,
``order`` puts out-of-order rows right, and ``stream`` converts every block to SI and
writes the run's Parquet streams. ``map_template`` writes a starter map from headers.
Entry points: ``stream.ingest_files``, ``channel_map.load_channel_map``,
``map_template.template``.
"""
