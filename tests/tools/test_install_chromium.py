"""The Makefile's Chromium step: skipped when it works, minimal install, never an upgrade.

Runs tools/install_chromium.sh with a stand-in apt-get that records its arguments
(nothing is installed).
"""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
SCRIPT = ROOT / "tools" / "install_chromium.sh"


def _run(tmp_path: Path, chromium: str, simulated: str) -> tuple[int, str, list[str]]:
    log = tmp_path / "apt.log"
    apt = tmp_path / "apt-get"
    apt.write_text(
        "#!/bin/sh\n"
        f'echo "$*" >> {log}\n'
        'case "$*" in *" -s "*) cat <<"EOF"\n' + simulated + "\nEOF\n;; esac\n",
        encoding="utf-8",
    )
    apt.chmod(0o755)
    env = dict(os.environ, CHROMIUM=chromium, APT_GET=str(apt), SUDO="")
    done = subprocess.run(["sh", str(SCRIPT)], env=env, capture_output=True, text=True, check=False)
    calls = log.read_text().splitlines() if log.exists() else []
    return done.returncode, done.stdout + done.stderr, calls


def test_skipped_when_chromium_already_works(tmp_path: Path) -> None:
    works = tmp_path / "chromium"
    works.write_text("#!/bin/sh\necho 'Chromium 1.0'\n")
    works.chmod(0o755)
    code, out, calls = _run(tmp_path, str(works), "")
    assert code == 0 and "nothing to install" in out
    assert calls == []  # apt-get never ran


def test_installs_only_chromium_without_recommends(tmp_path: Path) -> None:
    # apt-get -s prints "Inst name (version ...)" for a new package (apt-get(8), --simulate).
    new_only = "Inst libfoo1 (1.2 Debian:12/stable [amd64])\nInst chromium (120 Debian [amd64])"
    code, out, calls = _run(tmp_path, str(tmp_path / "absent"), new_only)
    assert code == 0, out
    install = [c for c in calls if c.startswith("install") and " -s " not in f" {c} "]
    assert install == ["install -y -q --no-install-recommends --no-upgrade chromium"]
    assert not any("upgrade" in c.split()[0] for c in calls)  # no apt-get upgrade


def test_refuses_when_it_would_upgrade_an_installed_package(tmp_path: Path) -> None:
    # "Inst name [installed] (new ...)": the bracket marks an upgrade (apt-get(8)).
    upgrade = "Inst systemd [252.1] (252.2 Debian [amd64])\nInst chromium (120 Debian [amd64])"
    code, out, calls = _run(tmp_path, str(tmp_path / "absent"), upgrade)
    assert code == 1
    assert "systemd" in out and "Nothing was changed" in out
    assert not any(c.startswith("install -y") for c in calls)
