#!/bin/sh
# 0100-replay-reference: abtally's join checked against an independent reference.
#
# For each case in fixtures/replay/<case>/ (config.json, input.jsonl,
# expected.json), this test
#   1. re-runs tests/reference/join_ref.py on the committed fixture and requires
#      byte-for-byte the committed expected.json, so the fixture, the reference
#      and the expected output cannot drift apart silently;
#   2. runs `abtally replay --final-only` and compares every field the reference
#      computes (units, metric rows, integrity counters, time) with
#      expected.json: counts exactly, numbers to 1e-9 relative; it also requires
#      exit status 0, "final": true and accepted + sum(rejected) == lines_read,
#      and, where abtally reports a z interval for a mean metric, that its
#      width matches the reference's sample variances (n - 1);
#   3. reorders the log with `make_fixture.py shuffle` (each event moved by less
#      than the 1 h lateness bound, first occurrences of ids kept first), under
#      two seeds, and requires the same final counts and means (1e-9) from
#      abtally, and the same expected output from the reference;
#   4. feeds the two-arm log gzipped (same expected output), and with a line
#      over the 1 MiB limit spliced in (compared with the reference run on that
#      file: too_long counted, nothing else changed).
#
# What is independent about the reference (tests/reference/join_ref.py): it is
# written from DESIGN.md (and README.md where DESIGN.md is silent) in Python
# with the standard library only, and shares no code, parser or data structure
# with abtally. It is not incremental: it reads the whole log, keeps every
# event, and joins each unit from its complete lists, so it has no watermark,
# pending list, sweep, hashing, moving exposure or id-forgetting; times are
# exact integer microseconds from Python's own calendar; sums use math.fsum and
# means and variances are two-pass, where abtally uses Welford co-moments. The
# two agree only if both implement the same rules.
#
# POSIX sh; $ABTALLY is the binary; run from the repository root; exit 0 = pass.
set -u
ABTALLY=${ABTALLY:-build/abtally}
REF=tests/reference
PYTHONDONTWRITEBYTECODE=1
export PYTHONDONTWRITEBYTECODE
tmp=$(mktemp -d "${TMPDIR:-/tmp}/abtally-0100.XXXXXX") || exit 1
trap 'rm -rf "$tmp"' EXIT INT TERM
fail=0

command -v python3 >/dev/null 2>&1 || { echo "0100: python3 is required" >&2; exit 1; }

# compare EXPECTED GOT LABEL CONFIG: every field of EXPECTED except
# "reference_only" must be in GOT (abtally's last line), equal (strings,
# integers, booleans, null) or within 1e-9 relative (other numbers).
compare() {
    python3 - "$1" "$2" "$3" "$4" <<'EOF'
import json, sys
exp_path, got_path, label, cfg_path = sys.argv[1:5]
with open(exp_path) as f:
    exp = json.load(f)
with open(got_path) as f:
    lines = [l for l in f.read().splitlines() if l.strip()]
if not lines:
    sys.exit("%s: abtally printed nothing" % label)
got = json.loads(lines[-1])
bad = []

def close(e, g):
    if isinstance(e, bool) or isinstance(g, bool) or e is None or g is None:
        return e is g or e == g and type(e) is type(g)
    if isinstance(e, int) and isinstance(g, int):
        return e == g
    if float(e) == float(g):
        return True
    return abs(e - g) <= 1e-9 * max(abs(e), abs(g))

def walk(e, g, path):
    if isinstance(e, dict):
        if not isinstance(g, dict):
            bad.append("%s: expected an object, got %r" % (path, g))
            return
        for k, v in e.items():
            if path == "" and k == "reference_only":
                continue
            if k not in g:
                bad.append("%s.%s: missing (expected %r)" % (path, k, v))
            else:
                walk(v, g[k], "%s.%s" % (path, k))
    elif isinstance(e, list):
        if not isinstance(g, list) or len(g) != len(e):
            bad.append("%s: expected %d entries, got %r" % (path, len(e), g))
            return
        for i, (a, b) in enumerate(zip(e, g)):
            walk(a, b, "%s[%d]" % (path, i))
    elif isinstance(e, (int, float)) and not isinstance(e, bool):
        if not isinstance(g, (int, float)) or isinstance(g, bool) or not close(e, g):
            bad.append("%s: expected %r, got %r" % (path, e, g))
    elif e != g:
        bad.append("%s: expected %r, got %r" % (path, e, g))

walk(exp, got, "")

# The sample variances (n - 1) the reference computes are not printed by
# abtally, but for a mean metric under the z test the interval is
# diff +- z(1 - alpha/2) * sqrt(s1^2/n1 + s0^2/n0) (METHODS.md), so its width
# gives s1^2/n1 + s0^2/n0 back. Checked where abtally reports that test.
per = {(r["metric"], r["arm"]): r
       for r in exp.get("reference_only", {}).get("per_arm", [])}
with open(cfg_path) as f:
    cfg = json.load(f)
if per:
    from statistics import NormalDist
    z = NormalDist().inv_cdf(1 - cfg.get("alpha", 0.05) / 2)
    control = cfg.get("control", "control")
    for row in got.get("metrics", []):
        if row.get("type") != "mean" or row.get("test") != "z":
            continue
        ci = row.get("ci")
        t, c = per.get((row["metric"], row["arm"])), per.get((row["metric"], control))
        if not (isinstance(ci, list) and len(ci) == 2 and None not in ci and t and c
                and t.get("var") is not None and c.get("var") is not None):
            continue
        want = t["var"] / t["n"] + c["var"] / c["n"]
        have = ((ci[1] - ci[0]) / (2 * z)) ** 2
        if abs(have - want) > 1e-9 * max(abs(want), abs(have)):
            bad.append("%s/%s: the ci implies s1^2/n1 + s0^2/n0 = %r, the reference has %r"
                       % (row["metric"], row["arm"], have, want))

if got.get("final") is not True:
    bad.append(".final: the last line is not the final summary")
integ = got.get("integrity", {})
try:
    total = integ["accepted"] + sum(integ["rejected"].values())
    if total != integ["lines_read"]:
        bad.append("accepted %d + rejected %d != lines_read %d"
                   % (integ["accepted"], total - integ["accepted"], integ["lines_read"]))
except (KeyError, TypeError, AttributeError) as x:
    bad.append("integrity: cannot check accepted + rejected = lines_read (%s)" % x)
for b in bad:
    print("%s: %s" % (label, b))
sys.exit(1 if bad else 0)
EOF
}

for dir in fixtures/replay/*/; do
    dir=${dir%/}
    case=$(basename "$dir")
    if [ ! -f "$dir/input.jsonl" ] || [ ! -f "$dir/config.json" ] || [ ! -f "$dir/expected.json" ]; then
        continue
    fi

    # 1. the reference still produces the committed expected output
    if ! python3 "$REF/join_ref.py" --config "$dir/config.json" "$dir/input.jsonl" \
            >"$tmp/$case.ref.json"; then
        echo "$case: join_ref.py failed"; fail=1; continue
    fi
    if ! cmp -s "$tmp/$case.ref.json" "$dir/expected.json"; then
        echo "$case: join_ref.py output differs from the committed expected.json:"
        diff "$dir/expected.json" "$tmp/$case.ref.json" | head -20
        fail=1
    fi

    # 2. abtally agrees with the reference
    "$ABTALLY" replay --config "$dir/config.json" --final-only "$dir/input.jsonl" \
        >"$tmp/$case.out" 2>"$tmp/$case.err"
    rc=$?
    if [ "$rc" -ne 0 ]; then
        echo "$case: abtally replay exited $rc:"; head -5 "$tmp/$case.err"; fail=1; continue
    fi
    compare "$dir/expected.json" "$tmp/$case.out" "$case" "$dir/config.json" || fail=1

    # 3. arrival order within the lateness bound does not change the summary
    for seed in 1 2; do
        shuf="$tmp/$case.shuffled-$seed.jsonl"
        python3 "$REF/make_fixture.py" shuffle --seed "$seed" "$dir/input.jsonl" "$shuf" || {
            echo "$case: shuffle failed"; fail=1; continue; }
        if cmp -s "$shuf" "$dir/input.jsonl"; then
            echo "$case: the shuffle left the log unchanged"; fail=1
        fi
        if ! python3 "$REF/join_ref.py" --config "$dir/config.json" "$shuf" \
                >"$tmp/$case.ref-$seed.json" ||
            ! cmp -s "$tmp/$case.ref-$seed.json" "$dir/expected.json"; then
            echo "$case (shuffle $seed): the reference itself changed its answer"; fail=1
        fi
        "$ABTALLY" replay --config "$dir/config.json" --final-only "$shuf" \
            >"$tmp/$case.out-$seed" 2>"$tmp/$case.err-$seed"
        rc=$?
        if [ "$rc" -ne 0 ]; then
            echo "$case (shuffle $seed): abtally replay exited $rc:"; head -5 "$tmp/$case.err-$seed"
            fail=1; continue
        fi
        compare "$dir/expected.json" "$tmp/$case.out-$seed" "$case (shuffle $seed)" "$dir/config.json" ||
            fail=1
        # and the two runs of abtally agree with each other on every count and mean
        compare_self=$(python3 - "$tmp/$case.out" "$tmp/$case.out-$seed" <<'EOF'
import json, sys
a = json.loads(open(sys.argv[1]).read().splitlines()[-1])
b = json.loads(open(sys.argv[2]).read().splitlines()[-1])
def num_close(x, y):
    if x is None or y is None:
        return x is y
    return x == y or abs(x - y) <= 1e-9 * max(abs(x), abs(y))
out = []
if a["units"] != b["units"]:
    out.append("units %r != %r" % (a["units"], b["units"]))
for ra, rb in zip(a["metrics"], b["metrics"]):
    for k in ("n", "control_n"):
        if ra.get(k) != rb.get(k):
            out.append("%s/%s %s: %r != %r" % (ra["metric"], ra["arm"], k, ra.get(k), rb.get(k)))
    for k in ("mean", "control_mean"):
        if not num_close(ra.get(k), rb.get(k)):
            out.append("%s/%s %s: %r != %r" % (ra["metric"], ra["arm"], k, ra.get(k), rb.get(k)))
if len(a["metrics"]) != len(b["metrics"]):
    out.append("metric rows: %d != %d" % (len(a["metrics"]), len(b["metrics"])))
print("\n".join(out))
EOF
)
        if [ -n "$compare_self" ]; then
            echo "$case (shuffle $seed): abtally's summary depends on arrival order:"
            echo "$compare_self"
            fail=1
        fi
    done
done

# 4. the same log gzipped, and with a line over the 1 MiB limit spliced in (too
# long to keep in the repository): abtally must agree with the reference run on
# that very file (too_long counted, everything else unchanged).
dir=fixtures/replay/crumbly-two-arm
if [ -f "$dir/input.jsonl" ]; then
    python3 - "$dir/input.jsonl" "$tmp/variant.jsonl.gz" "$tmp/long.jsonl" <<'EOF'
import gzip, sys
src, gz, long_path = sys.argv[1:4]
data = open(src, "rb").read()
with open(gz, "wb") as f:
    with gzip.GzipFile(fileobj=f, mode="wb", mtime=0) as g:
        g.write(data)
lines = data.split(b"\n")
big = (b'{"kind":"outcome","time":"2027-03-03T12:00:00Z","unit":"u0001","metric":"visit",'
       b'"note":"' + b"crumbs " * 160000 + b'"}')
lines.insert(len(lines) // 2, big)
open(long_path, "wb").write(b"\n".join(lines))
EOF
    "$ABTALLY" replay --config "$dir/config.json" --final-only "$tmp/variant.jsonl.gz" \
        >"$tmp/gz.out" 2>"$tmp/gz.err" || { echo "gz: abtally failed"; head -5 "$tmp/gz.err"; fail=1; }
    compare "$dir/expected.json" "$tmp/gz.out" "crumbly-two-arm (.gz)" "$dir/config.json" || fail=1
    python3 "$REF/join_ref.py" --config "$dir/config.json" "$tmp/long.jsonl" >"$tmp/long.ref.json" ||
        { echo "too_long: join_ref.py failed"; fail=1; }
    python3 -c 'import json,sys; sys.exit(json.load(open(sys.argv[1]))["integrity"]["rejected"]["too_long"] != 1)' \
        "$tmp/long.ref.json" || { echo "too_long: the reference did not count the long line"; fail=1; }
    "$ABTALLY" replay --config "$dir/config.json" --final-only "$tmp/long.jsonl" \
        >"$tmp/long.out" 2>"$tmp/long.err" || { echo "too_long: abtally failed"; head -5 "$tmp/long.err"; fail=1; }
    compare "$tmp/long.ref.json" "$tmp/long.out" "crumbly-two-arm (too_long line)" \
        "$dir/config.json" || fail=1
fi

[ "$fail" -eq 0 ] && echo "0100-replay-reference: ok"
exit "$fail"
