#!/usr/bin/env bash
# POST the sample comparison body to /v1/compare: every method that applies is tuned on the
# same folds, ranked, and the simplest one within a standard error of the best recommended.
#
#   samples/curl_compare.sh
#   NEARWISE_URL=http://host:9000 samples/curl_compare.sh
#
# The service must be running (`nearwise serve`); the base URL defaults to 127.0.0.1:8080.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
base="${NEARWISE_URL:-http://127.0.0.1:8080}"

curl --silent --show-error --fail-with-body \
    -H 'Content-Type: application/json' \
    --data-binary "@$here/compare_turbine.json" \
    "${base%/}/v1/compare"
echo
