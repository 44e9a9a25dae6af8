"""Where the installed package keeps its data, found through importlib.resources.

The wheel carries two folders of the source tree as package data (declared in
``pyproject.toml``): the dashboard pages (``web/``, package ``server.web``) and the
bundled demo runs (``demo_logs/``, package ``analysis.demo.bundled``). Code finds
them here, never relative to the checkout, so an installed wheel works the same as
an editable install.
"""

from __future__ import annotations

import importlib.metadata
import importlib.resources
from pathlib import Path

from analysis import __version__
from analysis.errors import OutriggerError

#: Distribution name in the package metadata.
DISTRIBUTION = "outrigger"


def package_version() -> str:
    """The installed version from the package metadata, else the source's ``__version__``.

    Both come from one place: ``pyproject.toml`` reads its version from
    ``analysis.__version__``, which is also stamped on every stored analysis.
    """
    try:
        return importlib.metadata.version(DISTRIBUTION)
    except importlib.metadata.PackageNotFoundError:
        return __version__


def data_folder(package: str, what: str) -> Path:
    """The folder of package data ``package`` as a path on disk.

    Raises
    ------
    OutriggerError
        When the package data is not installed (a broken or partial install).
    """
    try:
        root = importlib.resources.files(package)
    except ModuleNotFoundError as exc:
        raise OutriggerError(
            f"The {what} are not installed with this copy of Outrigger (package data "
            f"{package!r} is missing). Reinstall it: `pip install --force-reinstall "
            "outrigger-<version>-py3-none-any.whl`, or `pip install -e .` in the source tree."
        ) from exc
    return Path(str(root))


def web_folder() -> Path:
    """The dashboard's static pages (``web/`` of the source tree)."""
    return data_folder("server.web", "dashboard pages")


def demo_folder() -> Path:
    """The bundled demo runs (``demo_logs/`` of the source tree)."""
    return data_folder("analysis.demo.bundled", "bundled demo runs")
