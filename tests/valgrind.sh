#!/bin/sh
# make valgrind: runs abtally's file paths under valgrind memcheck and fails
# on any memory error or leak (definite, indirect or possible):
#   replay of every fixtures/replay/*/input.jsonl (running records, a
#   quarantine, a saved state), check --state of that state (text and json),
#   check of the log itself, merge of two shard states, gzip and junk input,
#   a missing config; publish and 'watch --drain' against the embedded broker
#   (which itself runs outside valgrind); srm and plan.
# Usage: sh tests/valgrind.sh [BUILD]   (BUILD defaults to build)
set -eu
BUILD=${1:-build}
A=$PWD/$BUILD/abtally
[ -x "$A" ] || { echo "valgrind: $A is not built" >&2; exit 1; }
command -v valgrind > /dev/null || { echo "valgrind: not installed (apt-get install valgrind)" >&2; exit 1; }
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
VG="valgrind --quiet --error-exitcode=99 --leak-check=full --errors-for-leak-kinds=definite,indirect,possible --track-origins=yes"
n=0
# Runs one command under memcheck; the command's own exit status must be $1.
run() {
    want=$1
    shift
    n=$((n + 1))
    set +e
    # shellcheck disable=SC2086
    $VG "$@" > "$T/out.$n" 2> "$T/err.$n"
    rc=$?
    set -e
    if [ "$rc" -eq 99 ] || grep -q '^==[0-9]*==' "$T/err.$n"; then
        echo "valgrind: FAIL: memcheck errors in: $*" >&2
        grep '^==[0-9]*==' "$T/err.$n" | head -n 60 >&2
        exit 1
    fi
    if [ "$rc" -ne "$want" ]; then
        echo "valgrind: FAIL: exit $rc (expected $want): $*" >&2
        tail -n 5 "$T/err.$n" >&2
        exit 1
    fi
    echo "valgrind: ok: $(echo "$*" | sed "s|$T/||g; s|$PWD/||g")"
}
for d in fixtures/replay/*/; do
    d=${d%/}
    c=$d/config.json
    [ -f "$c" ] && [ -f "$d/input.jsonl" ] || continue
    name=$(basename "$d")
    run 0 "$A" replay --config "$c" --every 12h --quarantine "$T/$name.quar" --save-state "$T/st-$name" "$d/input.jsonl"
    # check's exit status is the verdict (0 sound, 3 unsound): both are fine here
    set +e
    "$A" check --config "$c" --state "$T/st-$name" --no-record > /dev/null 2>&1
    verdict=$?
    set -e
    run "$verdict" "$A" check --config "$c" --state "$T/st-$name" --no-record
    run "$verdict" "$A" check --config "$c" --state "$T/st-$name" --no-record --format json
    run "$verdict" "$A" check --config "$c" "$d/input.jsonl"
    run 0 "$A" replay --config "$c" --final-only --shard 0/2 --save-state "$T/sh-$name" "$d/input.jsonl"
    run 0 "$A" replay --config "$c" --final-only --shard 1/2 --save-state "$T/sh-$name" "$d/input.jsonl"
    run 0 "$A" merge --config "$c" --out "$T/merged-$name.abstate" "$T/sh-$name"
done
# gzip input, stdin and a malformed tail
d=$(ls -d fixtures/replay/*/ | head -n 1)
d=${d%/}
gzip -c "$d/input.jsonl" > "$T/in.jsonl.gz"
run 0 "$A" replay --config "$d/config.json" --final-only "$T/in.jsonl.gz"
printf '{"kind":"outcome"\n\xff\xfe\n[[[[[[[[[[\n' > "$T/junk.jsonl"
run 0 "$A" replay --config "$d/config.json" --final-only "$T/junk.jsonl"
run 1 "$A" replay --config "$T/missing.json" "$T/junk.jsonl"
# the live path: publish a fixture to the embedded broker (not under
# valgrind) and consume it with watch --drain and publish under memcheck
"$A" broker --topic events:2 > "$T/bootstrap" 2> "$T/broker.err" &
BROKER=$!
trap 'kill -TERM $BROKER 2>/dev/null; wait $BROKER 2>/dev/null; rm -rf "$T"' EXIT
i=0
until [ -s "$T/bootstrap" ]; do
    i=$((i + 1))
    [ "$i" -gt 200 ] && { echo "valgrind: broker did not start" >&2; exit 1; }
    sleep 0.1
done
BS=$(head -n 1 "$T/bootstrap")
run 0 "$A" publish --brokers "$BS" --topic events "$d/input.jsonl"
run 0 "$A" watch --config "$d/config.json" --brokers "$BS" --topic events --state "$T/watch-st" \
    --drain -q --kafka session.timeout.ms=6000 --kafka heartbeat.interval.ms=500
run 0 "$A" srm 5100 4900 --json
run 0 "$A" plan --metric binary --baseline 0.1 --mde 0.01 --looks 4 --json
echo "valgrind: $n runs, no memory errors or leaks"
