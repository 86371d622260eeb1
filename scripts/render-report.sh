#!/usr/bin/env bash
# Render an aftercast report.html to a PNG screenshot with headless Chromium, for looking at
# the page as a reader would. Not part of `cargo test`.
#
#   scripts/render-report.sh REPORT.html [OUT.png] [WIDTHxHEIGHT]
#
# Defaults: OUT.png = REPORT.png beside the report, size 1200x3000 (use 390x3000 for a phone).
# Needs Debian's `chromium`; installs it with apt-get when missing (root only).
set -euo pipefail

if [ $# -lt 1 ]; then
  echo "usage: $0 REPORT.html [OUT.png] [WIDTHxHEIGHT]" >&2
  exit 2
fi
report=$(readlink -f "$1")
[ -f "$report" ] || { echo "$0: $1: no such file" >&2; exit 2; }
out=${2:-${report%.html}.png}
size=${3:-1200x3000}
size=${size/x/,}

browser=$(command -v chromium || command -v chromium-browser || true)
if [ -z "$browser" ]; then
  if [ "$(id -u)" = 0 ]; then
    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null
    browser=$(command -v chromium)
  else
    echo "$0: chromium is not installed (apt-get install -y chromium)" >&2
    exit 1
  fi
fi

profile=$(mktemp -d)
trap 'rm -rf "$profile"' EXIT
"$browser" --headless --no-sandbox --disable-gpu \
  --disable-background-networking --disable-component-update --disable-sync \
  --no-first-run --user-data-dir="$profile" --hide-scrollbars \
  --window-size="$size" --screenshot="$(readlink -f "$(dirname "$out")")/$(basename "$out")" \
  "file://$report" 2>/dev/null
echo "$out"
