#!/bin/sh
# Installs the Debian packages CI needs beyond the build's own
# (deploy/install-deps.sh): clang with libFuzzer and the sanitizer runtimes
# for `make fuzz`, and valgrind for `make valgrind`. Safe to run again: it
# does nothing when all are present.
set -eu
PKGS="clang libclang-rt-14-dev valgrind"
missing=""
for p in $PKGS; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing="$missing $p"
done
[ -z "$missing" ] && exit 0
echo "install-ci-deps: installing:$missing" >&2
if [ "$(id -u)" -ne 0 ]; then
    SUDO=sudo
else
    SUDO=
fi
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -q
# shellcheck disable=SC2086
$SUDO apt-get install -y -q --no-install-recommends $missing
