#!/usr/bin/env bash
# Ask whether the service is alive (/healthz) and ready to serve (/readyz); exits non-zero
# when either check fails, so it can gate a nightly job.
#
#   samples/curl_health.sh
#   NEARWISE_URL=http://host:9000 samples/curl_health.sh
#
# The base URL defaults to 127.0.0.1:8080.
set -euo pipefail

base="${NEARWISE_URL:-http://127.0.0.1:8080}"

for path in healthz readyz; do
    curl --silent --show-error --fail-with-body "${base%/}/$path"
    echo
done
