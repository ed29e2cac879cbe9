#!/usr/bin/env bash
# POST the turbine CSV tables to /v1/locality: how densely the training rows cover their space,
# how wide a neighborhood of k rows is, and flags for each query row, without fitting a model.
#
#   samples/curl_locality.sh           # neighborhoods of k = 10 rows
#   samples/curl_locality.sh 25        # or another k
#   NEARWISE_URL=http://host:9000 samples/curl_locality.sh
#
# The service must be running (`nearwise serve`); the base URL defaults to 127.0.0.1:8080.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
base="${NEARWISE_URL:-http://127.0.0.1:8080}"
k="${1:-10}"

curl --silent --show-error --fail-with-body \
    -F "train=@$here/turbine_train.csv;type=text/csv" \
    -F "query=@$here/turbine_query.csv;type=text/csv" \
    "${base%/}/v1/locality?features=wind_ms,air_density&k=$k"
echo
