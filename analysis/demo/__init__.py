"""Demo: the invented robot, course and runs used by the demo and the tests.

``course`` describes the invented test loop, ``sim`` simulates the robot on it,
``logs`` writes raw log files with their ground truth, ``bundle`` holds the bundled
``demo_logs/`` runs and ``load`` ingests them into an archive. Entry points:
``logs.simulate_run``, ``load.load_demo_runs``.
"""
