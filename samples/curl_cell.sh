#!/usr/bin/env bash
# GET /v1/cell, as a spreadsheet formula would: x and y as comma-separated lists in the URL,
# and the answer as plain text (one line per `at` value). Here: 40 of the turbine's readings,
# every tenth one (wind_ms and power_kw, the 2nd and 4th columns of the CSV file), so that they
# span the days of the log and its winds; power at 6, 9 and 12 m/s, then the upper interval
# bounds.
#
#   samples/curl_cell.sh
#   NEARWISE_URL=http://host:9000 samples/curl_cell.sh
#
# The service must be running (`nearwise serve`); the base URL defaults to 127.0.0.1:8080.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
base="${NEARWISE_URL:-http://127.0.0.1:8080}"
rows="$(awk 'NR > 1 && NR % 10 == 2' "$here/turbine_train.csv")"
x="$(cut -d, -f2 <<<"$rows" | paste -sd, -)"
y="$(cut -d, -f4 <<<"$rows" | paste -sd, -)"

for part in value upper; do
    echo "# $part"
    curl --silent --show-error --fail-with-body -G "${base%/}/v1/cell" \
        --data-urlencode "x=$x" --data-urlencode "y=$y" \
        --data-urlencode "at=6,9,12" --data-urlencode "part=$part"
    echo
done
