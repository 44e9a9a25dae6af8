"""What the pages need to know about the server: version, features, event kinds, thresholds."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request

from analysis import catalogue
from analysis.profile import THRESHOLD_SPECS
from analysis.resources import package_version

router = APIRouter(prefix="/api", tags=["server"])


@router.get("/info")
def info(request: Request) -> dict[str, Any]:
    """Server version and features, event kinds (display order) and threshold keys.

    ``features.token_required`` tells the page to ask for a write token;
    ``features.pages`` lists optional pages installed (e.g. ``compare``).
    """
    return {
        "version": package_version(),
        "features": request.app.state.features,
        "event_kinds": [{"kind": k, "meaning": m} for k, m in catalogue.EVENT_KINDS.items()],
        "thresholds": [
            {"key": s.key, "unit": s.unit, "default": s.default, "meaning": s.meaning}
            for s in THRESHOLD_SPECS.values()
        ],
    }
