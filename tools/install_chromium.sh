#!/bin/sh
# Debian's Chromium for the browser tests, installed only when it is missing.
# - skipped when $CHROMIUM (default /usr/bin/chromium) already runs;
# - installs chromium alone, without recommended packages (--no-install-recommends);
# - never upgrades a package already installed: the install is simulated first and
#   refused, naming the packages, if apt would upgrade any (use your own apt then).
set -eu
CHROMIUM="${CHROMIUM:-/usr/bin/chromium}"
APT_GET="${APT_GET:-apt-get}"
if [ -x "$CHROMIUM" ] && "$CHROMIUM" --headless --no-sandbox --version >/dev/null 2>&1; then
  echo "chromium: $CHROMIUM works; nothing to install"
  exit 0
fi
if [ -z "${SUDO+set}" ]; then
  if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
fi
$SUDO "$APT_GET" update -q
# "Inst name [installed version] (new version ...)": a bracket means an upgrade.
upgrades=$($SUDO "$APT_GET" install -s -q --no-install-recommends chromium | grep '^Inst [^ ]* \[' || true)
if [ -n "$upgrades" ]; then
  echo "chromium: installing it would upgrade packages already installed:" >&2
  echo "$upgrades" | sed 's/^Inst /  /' >&2
  echo "Nothing was changed. Install chromium yourself, or run the tests with -m 'not browser'." >&2
  exit 1
fi
$SUDO "$APT_GET" install -y -q --no-install-recommends --no-upgrade chromium
