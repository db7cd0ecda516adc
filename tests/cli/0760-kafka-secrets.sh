#!/bin/sh
# --kafka secrets are never printed. The values of properties whose names
# contain "password", "secret" or "key" must not appear on stdout or stderr
# of a failing 'watch' or 'publish', whatever fails: SASL authentication
# refused by the brokers (with librdkafka's debug logging asked for), a
# client that cannot be created (a bad PEM key), a value librdkafka refuses
# for a secret property, a property without '='.
set -eu
. tests/cli-lib.sh
make_log 100
start_broker events:1
S=hunter2-secret-value
SASL="--kafka security.protocol=sasl_plaintext --kafka sasl.mechanism=PLAIN --kafka sasl.username=ann
      --kafka sasl.password=$S --kafka ssl.key.password=$S-2 --kafka debug=security,broker,conf
      --kafka log_level=7"
n=0
# Runs a command that must fail (or be stopped once it has reported an
# error), then checks that no secret appears in its output.
check_quiet() {
    n=$((n + 1))
    rc=0
    "$@" > "$T/out.$n" 2> "$T/err.$n" || rc=$?
    [ "$rc" -ne 0 ] || fail "case $n did not fail: $*"
    [ -s "$T/err.$n" ] || fail "case $n failed without a message: $*"
    if grep -q "$S" "$T/out.$n" "$T/err.$n"; then
        fail "case $n printed a secret: $(grep -h "$S" "$T/out.$n" "$T/err.$n" | head -n 3)"
    fi
}
# Starts a command in the background and stops it (SIGKILL) once it has
# reported $1 errors on stderr, then checks its output like check_quiet.
check_running() {
    want=$1
    shift
    n=$((n + 1))
    "$@" > "$T/out.$n" 2> "$T/err.$n" &
    P=$!
    PIDS="$PIDS $P"
    wait_for '[ "$(grep -c "abtally" "$T/err.$n")" -ge '"$want"' ] || ! kill -0 '"$P"' 2>/dev/null' 300 ||
        fail "case $n reported no error: $*"
    kill -KILL "$P" 2>/dev/null || true
    wait "$P" 2>/dev/null || true
    grep -q "SASL\|authentication" "$T/err.$n" || fail "case $n: no authentication error: $(head -n 3 "$T/err.$n")"
    if grep -q "$S" "$T/out.$n" "$T/err.$n"; then
        fail "case $n printed a secret: $(grep -h "$S" "$T/out.$n" "$T/err.$n" | head -n 3)"
    fi
}
# shellcheck disable=SC2086
check_running 2 "$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" $SASL
# shellcheck disable=SC2086
check_running 2 "$A" publish --brokers "$BS" --topic events $SASL "$T/log.jsonl"
# the client cannot be created (a key that is no PEM, with its passwords),
# a value librdkafka refuses for a secret property, an unknown property whose
# name says it is secret, a property mistyped without '=', and a test-only
# property with a secret-looking value: each for watch and publish
for cmd in watch publish; do
    for p in "security.protocol=ssl ssl.key.pem=$S ssl.key.password=$S ssl.keystore.password=$S" \
             "ssl_key=$S" "sasl.passwd.secret=$S" "sasl.password:$S" "test.mock.key=$S"; do
        set --
        for kv in $p; do set -- "$@" --kafka "$kv"; done
        if [ "$cmd" = watch ]; then
            check_quiet "$A" watch --config "$T/exp.json" --brokers "$BS" --topic events --state "$T/st" "$@"
        else
            check_quiet "$A" publish --brokers "$BS" --topic events "$@" "$T/log.jsonl"
        fi
        grep -q "unexpected argument\|usage:" "$T/err.$n" && fail "case $n failed for another reason: $(cat "$T/err.$n")"
        case $p in
        ssl_key=*) grep -q "ssl_key=<redacted>" "$T/err.$n" || fail "case $n: the property is not named: $(cat "$T/err.$n")" ;;
        esac
    done
done
echo "ok ($n failing runs, no secret printed)"
