#!/usr/bin/env bash
# Send the sample CSV tables as multipart/form-data parts `train` and `query`, with the other
# request fields as query-string parameters, and print the predictions as CSV.
#
#   samples/curl_csv.sh                # spline of power_kw against wind_ms
#   samples/curl_csv.sh knn            # knn on wind_ms and air_density
#   NEARWISE_URL=http://host:9000 samples/curl_csv.sh
#
# Field names are the JSON paths with dots (tuning.folds, params.k); a list such as
# `features` is comma-separated. Drop the Accept header to get the JSON answer instead.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
base="${NEARWISE_URL:-http://127.0.0.1:8080}"
method="${1:-spline}"

case "$method" in
    spline) fields="features=wind_ms" ;;
    knn | linear) fields="features=wind_ms,air_density" ;;
    *)
        echo "unknown method '$method'; choose spline, knn or linear" >&2
        exit 2
        ;;
esac

curl --silent --show-error --fail-with-body \
    -H 'Accept: text/csv' \
    -F "train=@$here/turbine_train.csv;type=text/csv" \
    -F "query=@$here/turbine_query.csv;type=text/csv" \
    "${base%/}/v1/predict?method=$method&target=power_kw&$fields&tuning.folds=5&tuning.seed=0"
