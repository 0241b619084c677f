#!/usr/bin/env bash
# Renders a `gravgrad qc` report in headless Chromium (Debian package `chromium`) and checks what it
# drew: the DOM Chromium built holds the summary table, the map, the spectra and a profile per line;
# the screenshot is a PNG of real size; and the page asked for nothing over the network.
#
#   tests/qc/check_report.sh [GRAVGRAD_BINARY]
#
# Simulates the demo survey with one line flown badly on purpose, runs `gravgrad qc` on it and checks
# the report. Exit 0 when every check holds.
set -euo pipefail
cd "$(dirname "$0")/../.."
bin=${1:-target/debug/gravgrad}
browser=$(command -v chromium || command -v chromium-browser || true)
if [ -z "$browser" ]; then
  echo "chromium not found (Debian: apt-get install -y chromium)" >&2
  exit 1
fi
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

# The demo's scenario with line 102 flown badly; the planned clearance given to the QC.
sed 's/^seed = .*/seed = 7/' data/demo/scenario.toml >"$work/scenario.toml"
printf '\n[badly_flown]\nline = 102\nturbulence_m_s2 = 1.6\nclearance_offset_m = 60.0\n' >>"$work/scenario.toml"
"$bin" --quiet simulate "$work/scenario.toml" --out "$work/survey"
printf '\n[qc]\nplanned_clearance_m = 100.0\n' >>"$work/survey/recipe.toml"
"$bin" --quiet qc "$work/survey/recipe.toml" --out "$work/out" >"$work/table.txt"
report="$work/out/qc/report.html"
grep -q '^ *102 .*FAIL.*turbulence' "$work/table.txt" || { echo "line 102 should fail for turbulence:"; cat "$work/table.txt"; exit 1; }

# Nothing to fetch: no script, no link, no image, no CSS url.
if grep -Eq '<script|<link|<img| src=|href=|url\(|@import' "$report"; then
  echo "the report refers to an outside resource" >&2
  exit 1
fi

flags=(--headless --no-sandbox --disable-gpu --no-first-run --user-data-dir="$work/profile")
timeout 120 "$browser" "${flags[@]}" --dump-dom "file://$report" >"$work/dom.html" 2>"$work/chromium.log"
for needed in 'id="summary"' 'id="map"' 'id="crossovers"' 'id="spectra"' 'class="profile"' 'not for navigation or flight safety'; do
  grep -q "$needed" "$work/dom.html" || { echo "Chromium's DOM lacks $needed" >&2; exit 1; }
done
lines=$(grep -c 'class="profile"' "$work/dom.html")
[ "$lines" -eq 5 ] || { echo "expected 5 line profiles in the DOM, found $lines" >&2; exit 1; }

timeout 120 "$browser" "${flags[@]}" --window-size=1000,3000 --screenshot="$work/report.png" "file://$report" 2>>"$work/chromium.log" >/dev/null
size=$(stat -c %s "$work/report.png")
magic=$(head -c 8 "$work/report.png" | od -An -tx1 | tr -d ' \n')
[ "$magic" = "89504e470d0a1a0a" ] || { echo "the screenshot is not a PNG" >&2; exit 1; }
[ "$size" -gt 20000 ] || { echo "the screenshot is only $size bytes" >&2; exit 1; }
echo "report rendered by $("$browser" --version 2>/dev/null | head -1): DOM with $lines line profiles, PNG of $size bytes"
