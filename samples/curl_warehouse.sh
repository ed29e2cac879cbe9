#!/usr/bin/env bash
# POST the warehouse sample (daily energy use against nine numeric inputs and the dock in use)
# and print the answer.
#
#   samples/curl_warehouse.sh              # /v1/compare: knn, linear and additive ranked
#   samples/curl_warehouse.sh predict      # /v1/predict with the additive method
#   NEARWISE_URL=http://host:9000 samples/curl_warehouse.sh
#
# The service must be running (`nearwise serve`); the base URL defaults to 127.0.0.1:8080.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
base="${NEARWISE_URL:-http://127.0.0.1:8080}"
endpoint="${1:-compare}"

case "$endpoint" in
    compare) body="$here/compare_warehouse.json" ;;
    predict) body="$here/predict_warehouse.json" ;;
    *)
        echo "unknown endpoint '$endpoint'; choose compare or predict" >&2
        exit 2
        ;;
esac

curl --silent --show-error --fail-with-body \
    -H 'Content-Type: application/json' \
    --data-binary "@$body" \
    "${base%/}/v1/$endpoint"
echo
