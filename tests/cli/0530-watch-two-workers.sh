#!/bin/sh
# Scale-out: two watchers in one group share a state directory. The first
# starts alone (throttled); the second joins mid-stream, so partitions move
# between them (saved on revoke, loaded on assign). The merged readout of
# 'check --state' equals the single replay's final summary.
set -eu
. tests/cli-lib.sh
make_log 30000
start_broker events:4
"$A" publish --brokers "$BS" --topic events "$T/log.jsonl" 2> "$T/pub.err" || fail "publish failed"
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" --drain -q \
    --max-rate 5000 --snapshot-every 200ms $KAFKA_TEST > "$T/a.out" 2> "$T/a.err" &
WA=$!
PIDS="$PIDS $WA"
wait_for 'ls "$T/st" 2>/dev/null | grep -q abstate' 400 || fail "worker A made no snapshot"
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" --drain -q \
    --max-rate 5000 $KAFKA_TEST > "$T/b.out" 2> "$T/b.err" &
WB=$!
PIDS="$PIDS $WB"
wait "$WA" || fail "worker A: $(cat "$T/a.err")"
wait "$WB" || fail "worker B: $(cat "$T/b.err")"
grep -q '"final":true' "$T/b.out" || fail "worker B printed no summary"
"$A" check --config "$T/exp.json" --state "$T/st" --format json > "$T/check.out" || true
"$A" replay --config "$T/exp.json" --final-only "$T/log.jsonl" > "$T/replay.out"
same_records "$T/check.out" "$T/replay.out" p_seq,time || fail "merged readout differs from replay"
echo ok
