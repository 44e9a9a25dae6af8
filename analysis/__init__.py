"""Outrigger analysis core: pure computation on field-test logs of wheel-legged robots.

Nothing in this package imports a web framework or ``server``.
"""

__version__ = "0.1.0"
