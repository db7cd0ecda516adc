#!/bin/sh
# The brokers down and back, and partition leaders moving: nothing lost,
# nothing counted twice. An embedded cluster of 3 brokers (topic with 3
# partitions, replicated on all three) is driven through 'abtally broker's
# control commands on stdin. Part of the log is published while every broker
# is down (the publisher waits and delivers it all once they are back); a
# watcher (with a secret --unit-key) then consumes the whole log, throttled,
# while the leaders of all partitions move, every broker goes down for two
# seconds and comes back, and the leaders move again. Its final summary must
# equal a replay's, and its saved states must read back (only) with the key.
set -eu
. tests/cli-lib.sh
make_log 16000
head -n 8000 "$T/log.jsonl" > "$T/part1.jsonl"
tail -n +8001 "$T/log.jsonl" > "$T/part2.jsonl"
printf 'invented-test-key-for-the-faults' > "$T/unit.key"
mkfifo "$T/ctl"
exec 3<> "$T/ctl" # read-write: the broker never sees the end of its input
"$A" broker --brokers 3 --topic events:3 < "$T/ctl" > "$T/broker.out" 2> "$T/broker.err" &
PIDS="$PIDS $!"
wait_for '[ -s "$T/broker.out" ]' 200 || fail "broker did not start: $(cat "$T/broker.err")"
BS=$(head -n 1 "$T/broker.out")
acks=0
# sends one control command and waits for its acknowledgement
ctl() {
    echo "$*" >&3
    acks=$((acks + 1))
    wait_for '[ "$(grep -c "^ok " "$T/broker.out")" -ge '"$acks"' ]' 100 ||
        fail "broker did not acknowledge '$*': $(cat "$T/broker.err")"
}
"$A" publish --brokers "$BS" --topic events "$T/part1.jsonl" 2> "$T/pub1.err" || fail "publish: $(cat "$T/pub1.err")"
# publish the second half into an outage
ctl down -1
"$A" publish --brokers "$BS" --topic events --kafka reconnect.backoff.max.ms=500 "$T/part2.jsonl" \
    > /dev/null 2> "$T/pub2.err" &
PUB=$!
PIDS="$PIDS $PUB"
sleep 2 # the outage lasts this long
ctl up -1
wait "$PUB" || fail "publish through an outage: $(cat "$T/pub2.err")"

# consume (throttled to ~6 s) while the cluster misbehaves
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" --drain -q \
    --snapshot-every 300ms --max-rate 2500 --unit-key "$T/unit.key" $KAFKA_TEST \
    > "$T/watch.out" 2> "$T/watch.err" &
W=$!
PIDS="$PIDS $W"
wait_for 'ls "$T/st" 2>/dev/null | grep -q abstate' 300 || fail "the watcher never saved a state: $(cat "$T/watch.err")"
ctl leader events 0 2
ctl leader events 1 3
ctl leader events 2 1
ctl down -1
sleep 2 # the outage lasts this long
ctl up -1
ctl leader events 0 3
ctl leader events 2 2
i=0
while kill -0 "$W" 2>/dev/null; do
    i=$((i + 1))
    [ "$i" -gt 1200 ] && fail "the watcher did not finish within 120 s"
    sleep 0.1
done
wait "$W" || fail "watch: $(cat "$T/watch.err")"
grep -q '"final":true' "$T/watch.out" || fail "no final summary"
"$A" replay --config "$T/exp.json" --final-only "$T/log.jsonl" > "$T/replay.out"
tail -n 1 "$T/watch.out" > "$T/final.out"
same_records "$T/final.out" "$T/replay.out" p_seq || fail "final summary after the faults differs from replay"
python3 -c 'import json,sys; r=json.load(open(sys.argv[1])); assert r["integrity"]["lines_read"] == 16000, r["integrity"]' \
    "$T/final.out" || fail "not every line was read exactly once"
# the states were made with the key: read with it, refused without it
"$A" check --config "$T/exp.json" --state "$T/st" --unit-key "$T/unit.key" --no-record --format json \
    > "$T/check.json" 2> "$T/check.err" || [ $? -eq 3 ] || fail "check with the key: $(cat "$T/check.err")"
python3 - "$T/check.json" "$T/replay.out" <<'PY' || fail "check --state with the key differs from replay"
import json, sys
c = json.load(open(sys.argv[1])); r = json.load(open(sys.argv[2]))
assert c["units"] == r["units"], (c["units"], r["units"])
for k in ("lines_read", "accepted", "duplicates", "multi_arm_units", "rejected"):
    assert c["integrity"][k] == r["integrity"][k], k
PY
if "$A" check --config "$T/exp.json" --state "$T/st" --no-record > /dev/null 2> "$T/err"; then
    fail "a keyed state was read without its key"
fi
grep -q "made with a secret unit key" "$T/err" || fail "unclear error without the key: $(cat "$T/err")"
echo "ok ($(grep -c 'kafka:' "$T/watch.err" || true) broker errors reported by the watcher, $(grep -c 'kafka:' "$T/pub2.err" || true) by the publisher)"
