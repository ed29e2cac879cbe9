#!/usr/bin/env bash
# Build the base image debian:trixie-slim locally, for machines that reach Debian's archive
# and PyPI but no image registry. docker/Dockerfile stays standard: it says FROM
# debian:trixie-slim and works the same with the registry's image.
#
#   tests/deploy/base_image.sh            build it unless `docker image inspect` finds it
#   tests/deploy/base_image.sh --rebuild  build it again
#
# Debian's debootstrap installs a minimal trixie (variant minbase) from
# http://deb.debian.org/debian; the result is imported as debian:trixie-slim. Like the
# registry's slim image it leaves out documentation, manual pages and translations, and keeps
# no package lists. The machine's CA bundle (NEARWISE_BUILD_CA, default
# /etc/ssl/certs/ca-certificates.crt) is copied to /usr/local/share/nearwise-build/ca.crt and
# PIP_CERT points at it, so pip in the build trusts a network that inspects TLS.
set -euo pipefail

image="debian:trixie-slim"
mirror="${NEARWISE_DEBIAN_MIRROR:-http://deb.debian.org/debian}"
ca="${NEARWISE_BUILD_CA:-/etc/ssl/certs/ca-certificates.crt}"
ca_in_image="/usr/local/share/nearwise-build/ca.crt"

if [[ "${1:-}" != "--rebuild" ]] && docker image inspect "$image" >/dev/null 2>&1; then
    echo "base image: $image is present"
    exit 0
fi
for tool in debootstrap docker tar; do
    if ! command -v "$tool" >/dev/null; then
        echo "base image: $tool is missing (apt-get install -y debootstrap docker.io)" >&2
        exit 1
    fi
done

root="$(mktemp -d /var/tmp/nearwise-trixie.XXXXXX)"
trap 'rm -rf "$root"' EXIT

# What the registry's slim image leaves out, before the first package is unpacked.
mkdir -p "$root/etc/dpkg/dpkg.cfg.d"
cat >"$root/etc/dpkg/dpkg.cfg.d/slim" <<'CFG'
path-exclude /usr/share/doc/*
path-include /usr/share/doc/*/copyright
path-exclude /usr/share/man/*
path-exclude /usr/share/info/*
path-exclude /usr/share/locale/*
path-exclude /usr/share/lintian/*
CFG

echo "base image: debootstrap --variant=minbase trixie from $mirror"
debootstrap --variant=minbase trixie "$root" "$mirror" >/dev/null

cat >"$root/etc/apt/apt.conf.d/docker-clean" <<'CFG'
DPkg::Post-Invoke { "rm -f /var/cache/apt/archives/*.deb /var/cache/apt/archives/partial/*.deb /var/cache/apt/*.bin || true"; };
APT::Update::Post-Invoke { "rm -f /var/cache/apt/archives/*.deb /var/cache/apt/archives/partial/*.deb /var/cache/apt/*.bin || true"; };
Dir::Cache::pkgcache "";
Dir::Cache::srcpkgcache "";
CFG
rm -f "$root/etc/apt/sources.list"
cat >"$root/etc/apt/sources.list.d/debian.sources" <<CFG
Types: deb
URIs: $mirror
Suites: trixie trixie-updates
Components: main
Signed-By: /usr/share/keyrings/debian-archive-keyring.gpg

Types: deb
URIs: ${mirror%/debian}/debian-security
Suites: trixie-security
Components: main
Signed-By: /usr/share/keyrings/debian-archive-keyring.gpg
CFG

# debootstrap unpacks the first packages itself, past the dpkg filter: trim them here.
find "$root/usr/share/doc" -mindepth 1 ! -type d ! -name copyright -delete
find "$root/usr/share/doc" -mindepth 1 -type d -empty -delete
rm -rf "$root"/usr/share/man/* "$root"/usr/share/info/* "$root"/usr/share/locale/* \
    "$root"/usr/share/lintian/*

install -D -m 0644 "$ca" "$root$ca_in_image"
rm -rf "$root"/var/lib/apt/lists/* "$root"/var/cache/apt/archives/*.deb "$root"/var/log/*.log

tar --numeric-owner -C "$root" -c . | docker import \
    --change "ENV PIP_CERT=$ca_in_image" \
    --change 'CMD ["bash"]' \
    - "$image" >/dev/null
echo "base image: imported $image ($(docker image inspect --format '{{.Size}}' "$image") bytes)"
