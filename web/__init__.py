"""The dashboard's static pages, shipped as package data ``server.web`` (see pyproject.toml).

No Python code lives here: this file only makes the folder findable through
importlib.resources in editable installs as well as in the wheel.
"""
