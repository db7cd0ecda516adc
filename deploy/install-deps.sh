#!/bin/sh
# Installs Debian packages when any is missing: by default those abtally
# needs to build and test; with arguments, those packages instead (CI's
# extra tools: deploy/install-ci-deps.sh). Safe to run again: it does
# nothing when all are present.
set -eu
PKGS="build-essential pkg-config librdkafka-dev libjansson-dev libgsl-dev libcmocka-dev zlib1g-dev libssl-dev libsimdjson-dev"
[ "$#" -gt 0 ] && PKGS="$*"
missing=""
for p in $PKGS; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing="$missing $p"
done
[ -z "$missing" ] && exit 0
echo "install-deps: installing:$missing" >&2
if [ "$(id -u)" -ne 0 ]; then
    SUDO=sudo
else
    SUDO=
fi
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -q
# shellcheck disable=SC2086
$SUDO apt-get install -y -q --no-install-recommends $missing
