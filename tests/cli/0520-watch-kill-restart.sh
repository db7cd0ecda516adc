#!/bin/sh
# Exactly once across a crash: a watcher is killed with SIGKILL mid-stream
# (after its first snapshot, consumption throttled so the kill lands while
# events remain), then restarted on the same state directory. Its final
# summary equals one uninterrupted replay's: nothing lost, nothing counted
# twice. (The always-valid SRM p is a running minimum over the records a
# process printed, so it is left out of the comparison.)
set -eu
. tests/cli-lib.sh
make_log 30000
start_broker events:3
"$A" publish --brokers "$BS" --topic events "$T/log.jsonl" 2> "$T/pub.err" || fail "publish failed"
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" --drain -q \
    --snapshot-every 100ms --max-rate 6000 $KAFKA_TEST > "$T/first.out" 2> "$T/first.err" &
W=$!
PIDS="$PIDS $W"
wait_for 'ls "$T/st" 2>/dev/null | grep -q abstate' 400 || fail "no snapshot appeared"
sleep 1
kill -KILL "$W"
wait "$W" 2>/dev/null || true
n=$(ls "$T/st" | grep -c abstate)
[ "$n" -ge 1 ] || fail "no state after the kill"
grep -q '"final":true' "$T/first.out" && fail "the first watcher finished before the kill"
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" --drain -q \
    $KAFKA_TEST > "$T/second.out" 2> "$T/second.err" || fail "restart: $(cat "$T/second.err")"
"$A" replay --config "$T/exp.json" --final-only "$T/log.jsonl" > "$T/replay.out"
tail -n 1 "$T/second.out" > "$T/final.out"
same_records "$T/final.out" "$T/replay.out" p_seq || fail "final summary after restart differs"
echo ok
