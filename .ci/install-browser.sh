#!/bin/sh
# Install Debian's chromium package for the real-browser report test, if missing.
set -eu
if [ -x /usr/bin/chromium ]; then
    exit 0
fi
SUDO=""
if [ "$(id -u)" -ne 0 ]; then
    SUDO="sudo"
fi
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends chromium >/dev/null
/usr/bin/chromium --version 2>/dev/null || true
