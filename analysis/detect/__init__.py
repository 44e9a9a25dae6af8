"""Detect: the detectors, one module each, and the pipeline that runs them.

``saturation``, ``slip``, ``tipover`` (with ``force_angle``), ``roll`` and
``balance`` each take a run's frame, the robot profile and thresholds and return a
``DetectorResult`` (events, KPIs, derived series). ``pipeline`` runs them all and
stores the results, a long run in time chunks (``chunked``, with ``chunk_kpis``
and ``chunk_lag`` for its whole-run KPIs); ``limits`` checks KPIs against release limits (``outrigger
check``); ``batch`` re-analyses many runs. Entry points: ``pipeline.analyse_run``,
``pipeline.DETECTORS``, ``limits.check_limits``, ``batch.reanalyse``.
"""
