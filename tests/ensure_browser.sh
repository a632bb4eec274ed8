#!/usr/bin/env bash
# The browser tests drive Debian's Chromium; install it when missing (root only).
set -u
if [ -x /usr/bin/chromium ]; then exit 0; fi
if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null 2>&1; then
  echo "Installing Debian chromium for the browser tests..."
  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium) >/dev/null 2>&1 \
    || echo "Could not install chromium; browser tests will be skipped."
else
  echo "chromium is not installed and this user cannot install it; browser tests will be skipped."
fi
exit 0
