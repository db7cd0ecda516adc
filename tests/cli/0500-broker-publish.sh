#!/bin/sh
# 0500-broker-publish.sh — `abtally broker` and `abtally publish` end to end:
# the bootstrap line, publishing plain, gzip and stdin input, the summary
# counts, usage errors, secret redaction, the test.mock.* refusal, the warning
# for a topic the broker had to create, and the control commands on stdin
# (down/up change what publish sees). Consuming back is checked in-process by
# tests/test_kafka.c.
#
# Run from the repository root; $ABTALLY is the binary. Exit 0 = pass.
# Waits are bounded polls on conditions, never sleeps for correctness; the
# trap stops the one broker this script started, by its PID.
set -u
ABTALLY=${ABTALLY:-build/abtally}
T=$(mktemp -d "${TMPDIR:-/tmp}/abtally-0500.XXXXXX") || exit 1
BPID=
PUBPID=

stop_broker() {
    [ -n "$BPID" ] || return 0
    kill -TERM "$BPID" 2>/dev/null
    i=0
    while kill -0 "$BPID" 2>/dev/null && [ $i -lt 100 ]; do sleep 0.1; i=$((i + 1)); done
    kill -KILL "$BPID" 2>/dev/null
    wait "$BPID" 2>/dev/null
    BPID=
}
cleanup() {
    exec 3>&- 4>&- 2>/dev/null
    if [ -n "$PUBPID" ]; then kill -KILL "$PUBPID" 2>/dev/null; wait "$PUBPID" 2>/dev/null; fi
    stop_broker
    rm -rf "$T"
}
trap cleanup EXIT
trap 'exit 1' INT TERM HUP

fail() {
    echo "FAIL: $*" >&2
    for f in "$T"/*.err "$T"/broker.out; do
        [ -f "$f" ] && { echo "--- $f" >&2; tail -20 "$f" >&2; }
    done
    exit 1
}

# wait_for FILE PATTERN SECONDS: poll until a line of FILE matches PATTERN.
wait_for() {
    i=0
    while [ $i -lt $(($3 * 10)) ]; do
        grep -q "$2" "$1" 2>/dev/null && return 0
        kill -0 "$BPID" 2>/dev/null || fail "broker exited while waiting for '$2' in $1"
        sleep 0.1
        i=$((i + 1))
    done
    fail "timed out after $3 s waiting for '$2' in $1"
}

# --- help, version, usage errors (no broker needed)
"$ABTALLY" broker --help >"$T/help.out" 2>&1 || fail "broker --help exited $?"
grep -q 'example:' "$T/help.out" || fail "broker --help has no example"
grep -q '5 MiB' "$T/help.out" || fail "broker --help does not state the retention limit"
"$ABTALLY" publish --help >"$T/help.out" 2>&1 || fail "publish --help exited $?"
grep -q 'example:' "$T/help.out" || fail "publish --help has no example"
"$ABTALLY" publish --version | grep -q '^abtally ' || fail "publish --version"
"$ABTALLY" publish --topic events "$T/none" 2>"$T/usage.err"
[ $? -eq 2 ] || fail "publish without --brokers should exit 2"
grep -q '^abtally: publish: ' "$T/usage.err" || fail "usage error not in the one-line format"
"$ABTALLY" broker --topic 'bad/name' 2>"$T/usage.err"
[ $? -eq 2 ] || fail "broker with a bad topic name should exit 2"
"$ABTALLY" broker --topic a:3 --topic a 2>"$T/usage.err"
[ $? -eq 2 ] || fail "broker with a repeated topic should exit 2"
"$ABTALLY" broker --brokers 0 2>"$T/usage.err"
[ $? -eq 2 ] || fail "broker --brokers 0 should exit 2"

# --- start the broker; stdin is a FIFO this script keeps open on fd 3
mkfifo "$T/ctl" || fail "mkfifo"
"$ABTALLY" broker --topic events:3 --topic single:1 <"$T/ctl" >"$T/broker.out" 2>"$T/broker.err" &
BPID=$!
exec 3>"$T/ctl"
wait_for "$T/broker.out" '^127\.0\.0\.1:[0-9][0-9]*' 20
BS=$(sed -n 1p "$T/broker.out")
case "$BS" in *,*|"") fail "unexpected bootstrap line '$BS'" ;; esac
grep -q '5 MiB' "$T/broker.err" || fail "broker note lacks the retention limit"
grep -q 'memory only' "$T/broker.err" || fail "broker note lacks the in-memory warning"

# --- an invented log: 3 units, a not-JSON line, an empty line, a blank line
cat >"$T/log.jsonl" <<'EOF'
{"kind":"assign","time":"2026-11-03T10:00:00Z","unit":"u1","exp":"checkout","arm":"control","id":"a1"}
{"kind":"assign","time":"2026-11-03T10:00:01Z","unit":"u2","exp":"checkout","arm":"treatment","id":"a2"}
{"kind":"assign","time":"2026-11-03T10:00:02Z","unit":"u3","exp":"checkout","arm":"control","id":"a3"}
{"kind":"outcome","time":"2026-11-03T10:05:00Z","unit":"u1","metric":"order_value","value":12.5,"id":"o1"}
this line is not JSON

{"kind":"outcome","time":"2026-11-03T10:06:00Z","unit":"u2","metric":"order_value","value":30,"id":"o2"}
   
{"kind":"outcome","time":"2026-11-03T10:07:00Z","unit":"u2","metric":"order_value","value":7.25,"id":"o3"}
EOF

"$ABTALLY" publish --brokers "$BS" --topic events --partitions 3 "$T/log.jsonl" 2>"$T/pub1.err" ||
    fail "publish exited $?"
grep -q 'publish: 9 messages (6 keyed by unit, 3 unkeyed)' "$T/pub1.err" || fail "publish summary counts"
grep -q '9 delivered, 0 failed' "$T/pub1.err" || fail "publish summary delivered"
grep -q 'did not exist' "$T/pub1.err" && fail "existing topic reported as created"
grep -q 'msg/s' "$T/pub1.err" || fail "publish summary has no rate"

# gzip file and stdin in one run; a surprising partition count is reported
gzip -c "$T/log.jsonl" >"$T/log.jsonl.gz" || fail "gzip"
"$ABTALLY" publish --brokers "$BS" --topic events --partitions 6 "$T/log.jsonl.gz" - <"$T/log.jsonl" 2>"$T/pub2.err" ||
    fail "publish of .gz and stdin exited $?"
grep -q 'publish: 18 messages' "$T/pub2.err" || fail "publish .gz + stdin count"
grep -q "has 3 partitions, not the 6 expected" "$T/pub2.err" || fail "partition count mismatch not reported"

# a topic the broker did not have: created with the mock's 4 partitions, said so
"$ABTALLY" publish --brokers "$BS" --topic fresh "$T/log.jsonl" 2>"$T/pub3.err" || fail "publish to a new topic exited $?"
grep -q "topic 'fresh' did not exist; the brokers created it with 4 partitions" "$T/pub3.err" ||
    fail "auto-created topic not reported"

# secrets are never printed; test.mock.* is refused without ABTALLY_ALLOW_MOCK=1
"$ABTALLY" publish --brokers "$BS" --topic events --kafka no.such.password=hunter2 "$T/log.jsonl" 2>"$T/sec.err"
[ $? -eq 2 ] || fail "unknown --kafka property should exit 2"
grep -q 'no.such.password=<redacted>' "$T/sec.err" || fail "secret not shown redacted"
grep -q hunter2 "$T/sec.err" && fail "secret value printed"
env -u ABTALLY_ALLOW_MOCK "$ABTALLY" publish --brokers "$BS" --topic events --kafka test.mock.num.brokers=1 \
    "$T/log.jsonl" 2>"$T/mock.err"
[ $? -eq 2 ] || fail "test.mock.* property should be refused with exit 2"
grep -q 'ABTALLY_ALLOW_MOCK' "$T/mock.err" || fail "refusal does not name ABTALLY_ALLOW_MOCK"

# a missing input file: exit 1, one line naming it
"$ABTALLY" publish --brokers "$BS" --topic events "$T/missing.jsonl" 2>"$T/missing.err"
[ $? -eq 1 ] || fail "missing input should exit 1"
grep -q "^abtally: publish: .*missing.jsonl" "$T/missing.err" || fail "missing input not named"

# --- control commands: errors keep the broker running; down/up take effect
echo "frobnicate 1" >&3
wait_for "$T/broker.err" "'frobnicate 1': unknown command" 10
echo "leader events 7 1" >&3
wait_for "$T/broker.err" "'leader events 7 1': .*nknown topic or partition" 10
echo "leader events 0 9" >&3
wait_for "$T/broker.err" "'leader events 0 9': broker id '9'" 10
echo "leader events 0 1" >&3
wait_for "$T/broker.out" '^ok leader events 0 1$' 10
echo "topic later:2" >&3
wait_for "$T/broker.out" '^ok topic later:2$' 10
"$ABTALLY" publish --brokers "$BS" --topic later --partitions 2 "$T/log.jsonl" 2>"$T/pub4.err" ||
    fail "publish to a topic created by command exited $?"
grep -q "did not exist" "$T/pub4.err" && fail "topic created by the 'topic' command reported as missing"

echo "down 1" >&3
wait_for "$T/broker.out" '^ok down 1$' 10
"$ABTALLY" publish --brokers "$BS" --topic events --timeout 2 --kafka message.timeout.ms=2000 \
    "$T/log.jsonl" 2>"$T/down.err"
[ $? -eq 1 ] || fail "publish to a downed broker should exit 1"
grep -q '^abtally: publish: ' "$T/down.err" || fail "no one-line error when the broker is down"
echo "up 1" >&3
wait_for "$T/broker.out" '^ok up 1$' 10
"$ABTALLY" publish --brokers "$BS" --topic events "$T/log.jsonl" 2>"$T/up.err" || fail "publish after 'up 1' exited $?"
grep -q '9 delivered, 0 failed' "$T/up.err" || fail "publish after 'up 1' did not deliver everything"

# a permanent produce error (29 = TOPIC_AUTHORIZATION_FAILED): exit 1, counts and first error
echo "perr 0 29 1" >&3
wait_for "$T/broker.out" '^ok perr 0 29 1$' 10
"$ABTALLY" publish --brokers "$BS" --topic single "$T/log.jsonl" 2>"$T/perm.err"
[ $? -eq 1 ] || fail "publish with a permanent produce error should exit 1"
grep -q 'messages failed; first: .*log.jsonl:[0-9]*: .*uthoriz' "$T/perm.err" || fail "failure count or first error missing"

# --- SIGINT stops a publish blocked reading an idle pipe: exit 1, "interrupted"
# (the line reader fills large blocks, so lines still in its buffer are not
# published; the summary says how many were). The warning about the new topic 'live'
# comes after the handlers are installed: wait for it before signalling.
mkfifo "$T/feed" || fail "mkfifo feed"
"$ABTALLY" publish --brokers "$BS" --topic live - <"$T/feed" 2>"$T/int.err" &
PUBPID=$!
exec 4>"$T/feed"
cat "$T/log.jsonl" >&4
wait_for "$T/int.err" "topic 'live' did not exist" 20
kill -INT "$PUBPID"
i=0
while kill -0 "$PUBPID" 2>/dev/null && [ $i -lt 150 ]; do sleep 0.1; i=$((i + 1)); done
if kill -0 "$PUBPID" 2>/dev/null; then
    kill -KILL "$PUBPID" 2>/dev/null
    fail "publish still running 15 s after SIGINT"
fi
wait "$PUBPID"
rc=$?
PUBPID=
exec 4>&-
[ $rc -eq 1 ] || fail "interrupted publish exited $rc, not 1"
grep -q '^abtally: publish: interrupted at <stdin>:' "$T/int.err" || fail "interruption not reported"

# --- stdin closed: the broker keeps running until signalled, then exits 0 quickly
exec 3>&-
"$ABTALLY" publish --brokers "$BS" --topic events "$T/log.jsonl" 2>"$T/eof.err" || fail "publish after stdin EOF exited $?"
kill -TERM "$BPID"
i=0
while kill -0 "$BPID" 2>/dev/null && [ $i -lt 150 ]; do sleep 0.1; i=$((i + 1)); done
kill -0 "$BPID" 2>/dev/null && fail "broker still running 15 s after SIGTERM"
wait "$BPID"
rc=$?
BPID=
[ $rc -eq 0 ] || fail "broker exited $rc after SIGTERM"
exit 0
