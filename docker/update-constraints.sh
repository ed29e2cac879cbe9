#!/usr/bin/env bash
# Regenerate docker/constraints.txt: resolve the project's dependencies afresh (newest versions
# PyPI offers for the image's Python) inside debian:trixie-slim and pin what was installed.
# Run from the repository root after changing [project].dependencies in pyproject.toml, then
# rebuild the image and run the tests (tests/deploy/ checks every dependency is pinned).
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."

out="docker/constraints.txt"
pins="$(docker run --rm --network host -v "$PWD:/src:ro" debian:trixie-slim sh -euc '
    export DEBIAN_FRONTEND=noninteractive PIP_DISABLE_PIP_VERSION_CHECK=1
    apt-get update -qq && apt-get install -y -qq --no-install-recommends python3-venv >/dev/null
    python3 -m venv /tmp/v
    mkdir /tmp/src && cp -r /src/pyproject.toml /src/README.md /src/service /tmp/src/
    /tmp/v/bin/pip install -q setuptools
    /tmp/v/bin/pip install -q --no-build-isolation /tmp/src
    /tmp/v/bin/python -c "import sys; print(sys.version.split()[0])"
    /tmp/v/bin/pip freeze --all --exclude nearwise --exclude pip
')"
python_version="$(head -n 1 <<<"$pins")"
{
    echo "# Exact versions the image installs (docker/Dockerfile sets PIP_CONSTRAINT to this file),"
    echo "# resolved for Python $python_version in debian:trixie-slim. setuptools is the build backend"
    echo "# only: it is pinned here but not installed into the image."
    echo "# Regenerate with: docker/update-constraints.sh"
    tail -n +2 <<<"$pins"
} >"$out"
echo "wrote $out"
