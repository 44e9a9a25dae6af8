"""Compare: two runs of one course, side by side.

``align`` aligns the runs by distance and the cross-correlation of yaw rate,
``segments`` cuts the course into segments, ``course_kpis`` computes KPIs per
segment, ``bootstrap`` gives block-bootstrap intervals within a run,
``replicates`` the units (runs, laps) and Welch's interval over them, ``fdr`` the
Benjamini-Hochberg correction, ``table`` the KPI table with corrected verdicts
(``compare_pieces``: the replicate-unit interface), ``compare`` puts it together,
``view`` shapes it for pages and reports and ``gate`` decides a release gate.
Entry points: ``compare.compare_runs``, ``table.compare_pieces``, ``gate.check_gate``.
"""
