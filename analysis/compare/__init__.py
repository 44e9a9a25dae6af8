"""Compare: two runs of one course, side by side.

``align`` aligns the runs by distance and the cross-correlation of yaw rate,
``segments`` cuts the course into segments, ``course_kpis`` computes KPIs per
segment, ``bootstrap`` gives confidence intervals of the differences, ``compare``
puts it together, ``view`` shapes it for pages and reports and ``gate`` decides
a release gate. Entry points: ``compare.compare_runs``, ``gate.check_gate``.
"""
