#!/bin/sh
# A truncated or corrupted snapshot is refused with a clear error, and
# 'watch --reset' starts over. A watcher's partition states are damaged in
# several ways (truncated, one byte flipped, emptied, replaced by text, made
# with another config); 'check --state' refuses each (exit 1) with a message
# naming the file and the reason (the CRC-32 catches the byte flips and
# truncations). A watcher resuming from the damaged directory stops with the
# same clear error instead of guessing; 'watch --reset' replaces the states
# and its final summary equals a replay's.
set -eu
. tests/cli-lib.sh
make_log 6000
start_broker events:2
"$A" publish --brokers "$BS" --topic events "$T/log.jsonl" 2> "$T/pub.err" || fail "publish: $(cat "$T/pub.err")"
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --group g1 --state "$T/st" --drain -q \
    $KAFKA_TEST > /dev/null 2> "$T/w1.err" || fail "watch: $(cat "$T/w1.err")"
P0=$T/st/events-0.abstate
P1=$T/st/events-1.abstate
[ -f "$P0" ] && [ -f "$P1" ] || fail "no partition states: $(ls "$T/st")"
"$A" replay --config "$T/exp.json" --final-only "$T/log.jsonl" > "$T/replay.out"

# refuse DIR (exit 1) with a message matching $2 that names the file
refused() {
    rc=0
    "$A" check --config "$T/exp.json" --state "$1" --no-record > /dev/null 2> "$T/err" || rc=$?
    [ "$rc" -eq 1 ] || fail "$3: check exit $rc, not 1"
    grep -q "$2" "$T/err" || fail "$3: unclear error: $(cat "$T/err")"
    grep -q "abstate'" "$T/err" || fail "$3: the error does not name the file: $(cat "$T/err")"
}
mkdir "$T/bad"
cp "$P0" "$T/bad/events-0.abstate"
truncate -s -100 "$T/bad/events-0.abstate"
refused "$T/bad" "checksum mismatch (truncated or corrupted)" "truncated"
cp "$P0" "$T/bad/events-0.abstate"
truncate -s 30 "$T/bad/events-0.abstate"
refused "$T/bad" "checksum mismatch" "cut in the header"
for off in 20 200 $(( $(stat -c %s "$P0") - 2 )); do
    cp "$P0" "$T/bad/events-0.abstate"
    printf '\001' | dd of="$T/bad/events-0.abstate" bs=1 seek="$off" conv=notrunc 2>/dev/null
    cmp -s "$P0" "$T/bad/events-0.abstate" && printf '\002' | dd of="$T/bad/events-0.abstate" bs=1 seek="$off" conv=notrunc 2>/dev/null
    refused "$T/bad" "checksum mismatch" "byte $off flipped"
done
: > "$T/bad/events-0.abstate"
refused "$T/bad" "not an abtally snapshot" "empty file"
echo "not a snapshot at all" > "$T/bad/events-0.abstate"
refused "$T/bad" "not an abtally snapshot" "text file"
sed 's/"cups_per_visit"/"cups_per_visit2"/' "$T/exp.json" > "$T/exp2.json"
if "$A" check --config "$T/exp2.json" --state "$T/st" --no-record > /dev/null 2> "$T/err"; then
    fail "a state made with another config was accepted"
fi
grep -q "made with a different config" "$T/err" || fail "config change: unclear error: $(cat "$T/err")"

# a watcher on the damaged directory stops with the error; --reset starts over
cp "$P1" "$T/p1.good"
truncate -s -1 "$P1"
rc=0
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --group g2 --state "$T/st" --drain -q \
    $KAFKA_TEST > /dev/null 2> "$T/w2.err" || rc=$?
[ "$rc" -eq 1 ] || fail "watch on a corrupted state: exit $rc, not 1"
grep -q "events-1.abstate': checksum mismatch" "$T/w2.err" || fail "watch: unclear error: $(cat "$T/w2.err")"
grep -q -- "--reset" "$T/w2.err" || fail "watch: the error does not point to --reset: $(cat "$T/w2.err")"
"$A" watch --help | grep -q -- "--reset" || fail "watch --help does not list --reset"
# shellcheck disable=SC2086
"$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --group g3 --state "$T/st" --drain -q --reset \
    $KAFKA_TEST > "$T/w3.out" 2> "$T/w3.err" || fail "watch --reset: $(cat "$T/w3.err")"
tail -n 1 "$T/w3.out" > "$T/final.out"
same_records "$T/final.out" "$T/replay.out" p_seq || fail "watch --reset: final summary differs from replay"
"$A" check --config "$T/exp.json" --state "$T/st" --no-record > /dev/null 2> "$T/err" || [ $? -eq 3 ] ||
    fail "the states written after --reset do not load: $(cat "$T/err")"
sed "s|$T/||" "$T/w2.err"
echo ok
