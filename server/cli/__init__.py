"""The ``outrigger`` command line: ``main`` plus one module per command group."""
