#!/usr/bin/env bash
# Render a run's report.html in a real browser (headless Chromium from Debian's
# packages: apt-get install chromium) to a PNG, to look at it as a reader would.
#   tools/report-screenshot.sh outputs/NAME [out.png]
set -euo pipefail
folder="${1:?usage: tools/report-screenshot.sh RUN_DIR [OUT.png]}"
out="${2:-$folder/report-screenshot.png}"
command -v chromium >/dev/null || { echo "chromium is not installed (apt-get install chromium)" >&2; exit 2; }
chromium --headless --no-sandbox --disable-gpu --hide-scrollbars --window-size=1100,3000 \
  --screenshot="$out" "file://$(realpath "$folder")/report.html" 2>/dev/null
echo "$out"
