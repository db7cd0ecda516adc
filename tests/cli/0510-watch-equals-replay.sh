#!/bin/sh
# Live equals replay: a log published to the embedded broker (4 partitions)
# and consumed by 'watch --drain' gives the same records as 'replay' of the
# file: every running record holds the same events (floats equal to 1e-9:
# per-partition tallies merge in another order; orphan counts are settled at
# different moments), and the final summary is identical byte for byte.
set -eu
. tests/cli-lib.sh
make_log 20000
# a line over 1 MiB: publish sends a too_long marker, watch counts it as replay does
python3 -c 'print("{\"kind\":\"outcome\",\"note\":\"" + "x" * 1100000 + "\"}")' >> "$T/log.jsonl"
start_broker events:4
"$A" publish --brokers "$BS" --topic events "$T/log.jsonl" 2> "$T/pub.err" || fail "publish: $(cat "$T/pub.err")"
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" --drain -q \
    $KAFKA_TEST > "$T/watch.out" 2> "$T/watch.err" || fail "watch: $(cat "$T/watch.err")"
"$A" replay --config "$T/exp.json" "$T/log.jsonl" > "$T/replay.out"
[ "$(wc -l < "$T/replay.out")" -gt 5 ] || fail "too few records"
same_records "$T/watch.out" "$T/replay.out" orphan_outcomes || fail "records differ"
[ "$(tail -n 1 "$T/watch.out")" = "$(tail -n 1 "$T/replay.out")" ] || fail "final summaries differ"
tail -n 1 "$T/watch.out" | grep -q '"too_long":1' || fail "the long line was not counted as too_long"
ls "$T/st" | grep -c '^events-[0-3].abstate$' | grep -qx 4 || fail "expected 4 partition states"
echo ok
