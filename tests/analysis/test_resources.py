"""Package data is found through importlib.resources, and the version has one source."""

from __future__ import annotations

import importlib.metadata

import pytest

from analysis import __version__
from analysis.resources import data_folder, demo_folder, package_version, web_folder
from server.cli.main import main


def test_pages_and_demo_runs_are_package_data():
    assert (web_folder() / "index.html").is_file()
    assert (web_folder() / "js" / "run.js").is_file()
    assert (demo_folder() / "runs.toml").is_file()


def test_missing_package_data_says_how_to_reinstall():
    with pytest.raises(Exception, match="Reinstall it"):
        data_folder("analysis.no_such_data", "test data")


def test_version_comes_from_one_place(capsys):
    # pyproject.toml reads its version from analysis.__version__ (dynamic attr)
    assert importlib.metadata.version("outrigger") == __version__ == package_version()
    with pytest.raises(SystemExit) as exit_info:
        main(["--version"])
    assert exit_info.value.code == 0
    assert capsys.readouterr().out.strip() == f"outrigger {__version__}"
