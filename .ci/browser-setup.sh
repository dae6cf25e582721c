#!/bin/sh
# Installs Debian's Chromium for the browser test layer (tests/browser/) when it is missing.
# Playwright drives this system browser through executable_path; no browser is ever
# downloaded by Playwright itself.  POSIX sh (the README runs it with `sh`).
set -eu

if [ -x /usr/bin/chromium ]; then
    echo "browser-setup: /usr/bin/chromium present ($(/usr/bin/chromium --version 2>/dev/null || echo 'version unknown'))"
    exit 0
fi

SUDO=""
if [ "$(id -u)" -ne 0 ]; then
    SUDO="sudo"
fi

echo "browser-setup: installing Debian's chromium (about 80 s)"
DEBIAN_FRONTEND=noninteractive
export DEBIAN_FRONTEND
$SUDO apt-get update
$SUDO apt-get install -y chromium

if [ ! -x /usr/bin/chromium ]; then
    echo "browser-setup: /usr/bin/chromium still missing after apt-get install" >&2
    exit 1
fi
echo "browser-setup: installed $(/usr/bin/chromium --version 2>/dev/null || echo chromium)"
