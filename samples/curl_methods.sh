#!/usr/bin/env bash
# GET the catalogue: each method's parameters, ranges, default grids and tuning schemes, its
# interval kinds and `std_error` formula, and every warning code with its rule.
#
#   samples/curl_methods.sh
#   NEARWISE_URL=http://host:9000 samples/curl_methods.sh
#
# The service must be running (`nearwise serve`); the base URL defaults to 127.0.0.1:8080.
set -euo pipefail

base="${NEARWISE_URL:-http://127.0.0.1:8080}"

curl --silent --show-error --fail-with-body "${base%/}/v1/methods"
echo
