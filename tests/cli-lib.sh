# Shared helpers for the command-line tests (sourced, POSIX sh).
# Every test runs in its own temporary directory $T, removed on exit, and
# only ever signals the processes it started.

A=${ABTALLY:-$PWD/build/abtally}
T=$(mktemp -d)
PIDS=""
cleanup() {
    for p in $PIDS; do kill -TERM "$p" 2>/dev/null || true; done
    for p in $PIDS; do wait "$p" 2>/dev/null || true; done
    rm -rf "$T"
}
trap cleanup EXIT

fail() {
    echo "FAIL: $*" >&2
    exit 1
}

# Waits (up to $2 tenths of a second) until the shell condition $1 holds.
wait_for() {
    i=0
    while ! eval "$1"; do
        i=$((i + 1))
        [ "$i" -gt "${2:-300}" ] && return 1
        sleep 0.1
    done
    return 0
}

# Starts the embedded broker with topic $1 ("name:partitions"); sets BS.
start_broker() {
    "$A" broker --topic "$1" > "$T/bootstrap" 2> "$T/broker.err" &
    PIDS="$PIDS $!"
    wait_for '[ -s "$T/bootstrap" ]' 200 || fail "broker did not start: $(cat "$T/broker.err")"
    BS=$(head -n 1 "$T/bootstrap")
}

# Client settings for the embedded broker: fast rebalances (see README, "Testing").
KAFKA_TEST="--kafka session.timeout.ms=6000 --kafka heartbeat.interval.ms=500 --kafka reconnect.backoff.max.ms=1000 --kafka fetch.wait.max.ms=20"

# Writes a config and an invented log of $1 lines (a fictional tea shop's
# banner experiment) to $T/exp.json and $T/log.jsonl.
make_log() {
    cat > "$T/exp.json" <<'JSON'
{"experiment":"tea-banner","arms":[{"name":"control","weight":1},{"name":"treatment","weight":1}],
 "window":{"start":"2026-11-02T00:00:00Z","end":"2026-11-20T00:00:00Z"},
 "metrics":[{"name":"cups","type":"mean","event":"cup","attribution_hours":72},
            {"name":"bought","type":"binary","event":"cup"},
            {"name":"cups_per_visit","type":"ratio","numerator":"cup","denominator":"visit"}],
 "covariate":{"pre_days":2}}
JSON
    awk -v n="$1" 'BEGIN {
      srand(11);
      for (i = 0; i < n; i++) {
        u = int(rand() * n / 10); s = 86400 + int(i * 10 * 86400 / n);
        d = 1 + int(s / 86400); h = int((s % 86400) / 3600); m = int((s % 3600) / 60); sec = s % 60;
        t = sprintf("2026-11-%02dT%02d:%02d:%02dZ", d, h, m, sec);
        r = rand();
        if (r < 0.15) printf "{\"kind\":\"assign\",\"time\":\"%s\",\"unit\":\"u%d\",\"exp\":\"tea-banner\",\"arm\":\"%s\",\"id\":\"a%d\"}\n", t, u, (u % 2 ? "treatment" : "control"), i;
        else if (r < 0.55) printf "{\"kind\":\"outcome\",\"time\":\"%s\",\"unit\":\"u%d\",\"metric\":\"cup\",\"value\":%.2f,\"id\":\"c%d\"}\n", t, u, rand() * 6, i;
        else if (r < 0.999) printf "{\"kind\":\"outcome\",\"time\":\"%s\",\"unit\":\"u%d\",\"metric\":\"visit\"}\n", t, u;
        else print "{broken";
      } }' > "$T/log.jsonl"
}

# Compares two JSON-lines files of records: integers and strings exactly,
# floats to 1e-9 relative; "$3" lists keys to skip (comma-separated).
same_records() {
    python3 - "$1" "$2" "${3:-}" <<'PY'
import json, sys
skip = set(k for k in sys.argv[3].split(",") if k)
a = [json.loads(l) for l in open(sys.argv[1])]
b = [json.loads(l) for l in open(sys.argv[2])]
def close(x, y, path):
    if isinstance(x, dict):
        assert x.keys() == y.keys(), (path, x.keys() ^ y.keys())
        for k in x:
            if k not in skip:
                close(x[k], y[k], path + "." + k)
    elif isinstance(x, list):
        assert len(x) == len(y), path
        for i, (p, q) in enumerate(zip(x, y)):
            close(p, q, "%s[%d]" % (path, i))
    elif isinstance(x, float) and isinstance(y, float):
        assert abs(x - y) <= 1e-9 * max(abs(x), abs(y)), (path, x, y)
    else:
        assert x == y, (path, x, y)
assert len(a) == len(b), ("record count", len(a), len(b))
for i, (x, y) in enumerate(zip(a, b)):
    close(x, y, "record %d" % i)
PY
}
