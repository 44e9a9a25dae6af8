"""The bundled demo runs, shipped as package data ``analysis.demo.bundled`` (see pyproject.toml).

No Python code lives here: this file only makes the folder findable through
importlib.resources in editable installs as well as in the wheel. The other files
are written by ``outrigger demo-logs --out demo_logs``.
"""
