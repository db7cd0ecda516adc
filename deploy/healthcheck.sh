#!/bin/sh
# Health probe for a running 'abtally watch': healthy when the watcher has
# refreshed at least one partition state in DIR within MAX_AGE seconds
# (default 60; the watcher snapshots every 10 s). Exit 0 healthy, 1 not.
#   deploy/healthcheck.sh /var/lib/abtally/checkout-2026-11 [MAX_AGE]
set -eu
dir=${1:?usage: healthcheck.sh STATE_DIR [MAX_AGE_SECONDS]}
max=${2:-60}
now=$(date +%s)
newest=0
for f in "$dir"/*.abstate; do
    [ -e "$f" ] || continue
    m=$(stat -c %Y "$f")
    [ "$m" -gt "$newest" ] && newest=$m
done
if [ "$newest" -eq 0 ]; then
    echo "unhealthy: no state in $dir yet" >&2
    exit 1
fi
age=$((now - newest))
if [ "$age" -gt "$max" ]; then
    echo "unhealthy: newest state is ${age}s old (limit ${max}s)" >&2
    exit 1
fi
echo "healthy: newest state ${age}s old"
