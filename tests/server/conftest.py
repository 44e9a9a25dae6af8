"""Dashboard test fixtures (defined in dashboard_fixtures.py, shared with tests/web)."""

from tests.server.dashboard_fixtures import client, demo_inputs, grouped, planted_inputs, stocked

__all__ = ["client", "demo_inputs", "grouped", "planted_inputs", "stocked"]
