#!/usr/bin/env bash
# POST one of the sample JSON bodies to /v1/predict and print the answer.
#
#   samples/curl_predict.sh            # spline (the default)
#   samples/curl_predict.sh knn        # or linear
#   samples/curl_predict.sh window     # the spline again, tuned along `time` (scheme window)
#   NEARWISE_URL=http://host:9000 samples/curl_predict.sh
#
# The service must be running (`nearwise serve`); the base URL defaults to 127.0.0.1:8080.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
base="${NEARWISE_URL:-http://127.0.0.1:8080}"
method="${1:-spline}"

case "$method" in
    window) body="$here/predict_turbine_window.json" ;;
    *) body="$here/predict_${method}.json" ;;
esac

if [[ ! -f "$body" ]]; then
    echo "no sample body for '$method'; choose spline, knn, linear or window" >&2
    exit 2
fi

curl --silent --show-error --fail-with-body \
    -H 'Content-Type: application/json' \
    --data-binary "@$body" \
    "${base%/}/v1/predict"
echo
