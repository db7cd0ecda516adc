#!/bin/sh
# abtally simulate, measured back by abtally check:
#  (a) a 5% effect on order_value and no faults: check exits 0, the verdict is
#      sound, and the measured lift of order_value is near 5% (inside lift_ci
#      and within 3 standard errors); converted and page_errors near 0;
#  (b) lost treatment assignments: check exits 3 with an "srm" reason and
#      orphan outcomes;
#  (c) duplicates, multi-arm units and malformed lines show in the integrity
#      counters at about the counts simulate reports on stderr;
#  (d) self-selection: a "balance" reason (doubtful, exit 0), which (a) lacks;
#  (e) lines written up to 30 minutes late: the final summary equals that of
#      the same log in time order (abtally's order independence; the SRM
#      segments are compared as a set, as they are listed in arrival order);
# plus determinism, the .gz output, the config, --help and usage errors.
# Run with $ABTALLY pointing at the binary; exit 0 = pass. Uses python3's json.
set -u
ABTALLY=${ABTALLY:-build/abtally}
tmp=$(mktemp -d) || exit 1
trap 'rm -rf "$tmp"' EXIT
fails=0

fail() {
    echo "FAIL: $*"
    fails=$((fails + 1))
}

# readout NAME: runs check on $tmp/NAME.jsonl with $tmp/NAME.json into
# $tmp/NAME.out; sets rc to check's exit status.
readout() {
    "$ABTALLY" check --config "$tmp/$1.json" --format json "$tmp/$1.jsonl" >"$tmp/$1.out" 2>"$tmp/$1.err"
    rc=$?
}

# inspect NAME PYTHON: runs PYTHON with r = the readout of NAME and s = the
# simulate summary line; PYTHON prints one line per problem.
inspect() {
    python3 - "$tmp/$1.out" "$tmp/$1.sum" "$2" <<'EOF'
import json, re, sys
try:
    r = json.load(open(sys.argv[1]))
except Exception as ex:
    print("readout is not JSON: %s" % ex)
    sys.exit(0)
s = open(sys.argv[2]).read()
def injected(pat):
    m = re.search(pat, s)
    return int(m.group(1)) if m else -1
def reasons():
    return [x["check"] for x in r["integrity"]["reasons"]]
def row(metric):
    return [m for m in r["metrics"] if m["metric"] == metric][0]
def near(got, want, rel, absol=0):
    return abs(got - want) <= rel * want + absol
exec(sys.argv[3])
EOF
}

# expect NAME PYTHON: fails with each line inspect prints.
expect() {
    out=$(inspect "$1" "$2")
    [ -z "$out" ] || fail "$1: $out"
}

sim() {
    name=$1
    shift
    "$ABTALLY" simulate "$@" --config-out "$tmp/$name.json" -o "$tmp/$name.jsonl" 2>"$tmp/$name.sum"
    src=$?
    [ "$src" -eq 0 ] || fail "simulate $*: exit $src ($(cat "$tmp/$name.sum"))"
}

# (a) an effect on order_value, no faults
sim a --units 50000 --conversion 0.3 --effect order_value=0.05 --seed 2
readout a
[ "$rc" -eq 0 ] || fail "(a) check: exit $rc, expected 0 ($(cat "$tmp/a.err"))"
expect a '
if r["integrity"]["verdict"] != "sound":
    print("verdict %s, reasons %s" % (r["integrity"]["verdict"], reasons()))
if "balance" in reasons():
    print("a balance reason without self-selection")
m = row("order_value")
lo, hi = m["lift_ci"]
se = (hi - lo) / 2 / 1.959964
if not lo <= 0.05 <= hi:
    print("order_value lift_ci %s does not hold the simulated 0.05" % m["lift_ci"])
if abs(m["lift"] - 0.05) > 3 * se:
    print("order_value lift %g is more than 3 SE (%g) from 0.05" % (m["lift"], se))
for name in ("converted", "page_errors"):
    x = row(name)
    if not x["lift_ci"][0] <= 0 <= x["lift_ci"][1]:
        print("%s lift_ci %s excludes 0 though no effect was simulated" % (name, x["lift_ci"]))
if r["integrity"]["rejected"] and sum(r["integrity"]["rejected"].values()):
    print("rejected lines without the malformed fault: %s" % r["integrity"]["rejected"])
'

# (b) lost treatment assignments
sim b --units 20000 --fault lose-assign:treatment:0.08 --seed 3
readout b
[ "$rc" -eq 3 ] || fail "(b) check: exit $rc, expected 3"
expect b '
if "srm" not in reasons():
    print("no srm reason: %s" % reasons())
if r["integrity"]["verdict"] != "failed":
    print("verdict %s" % r["integrity"]["verdict"])
if r["integrity"]["orphan_outcomes"] <= 0:
    print("no orphan outcomes")
lost = injected(r"\((\d+) assignments dropped\)")
units = sum(r["units"].values())
if lost <= 0 or units != 20000 - lost:
    print("%d units counted, %d assignments dropped of 20000" % (units, lost))
'

# (c) duplicates, multi-arm units and malformed lines
sim c --units 20000 --fault duplicate:0.01 --fault multi-arm:0.005 --fault malformed:0.004 --seed 4
readout c
[ "$rc" -eq 0 ] || [ "$rc" -eq 3 ] || fail "(c) check: exit $rc"
expect c '
i = r["integrity"]
d = injected(r"duplicate [^(]*\((\d+) lines\)")
if d <= 0 or i["duplicates"] != d:
    print("duplicates %d, injected %d" % (i["duplicates"], d))
u = injected(r"multi-arm [^(]*\((\d+) units\)")
if u <= 0 or not near(i["multi_arm_units"], u, 0.05, 2) or i["multi_arm_units"] > u:
    print("multi_arm_units %d, injected %d" % (i["multi_arm_units"], u))
for reason in ("not_json", "missing_field", "bad_time", "bad_type"):
    k = injected(reason + r" (\d+)")
    if k <= 0 or i["rejected"][reason] != k:
        print("rejected %s %d, injected %d" % (reason, i["rejected"][reason], k))
for check in ("duplicates", "multi_arm", "rejected"):
    if check not in reasons():
        print("no %s reason: %s" % (check, reasons()))
lines = injected(r"units \([^)]*\), (\d+) lines")
if i["lines_read"] != lines:
    print("lines_read %d, simulate wrote %d" % (i["lines_read"], lines))
'

# (d) self-selection by activity: only covariate balance shows it
sim d --units 20000 --fault self-select:0.3 --seed 5
readout d
[ "$rc" -eq 0 ] || fail "(d) check: exit $rc, expected 0"
expect d '
if r["integrity"]["verdict"] != "doubtful":
    print("verdict %s" % r["integrity"]["verdict"])
if "balance" not in reasons():
    print("no balance reason: %s" % reasons())
if "srm" in reasons():
    print("an srm reason: self-selection keeps the weights on average")
'

# (e) late lines within the default 1h lateness change nothing in the summary
#     but the record of the sequential looks
sim e0 --units 20000 --seed 6
sim e1 --units 20000 --seed 6 --fault late:0.3:30m
cmp -s "$tmp/e0.json" "$tmp/e1.json" || fail "(e) the configs differ"
cmp -s "$tmp/e0.jsonl" "$tmp/e1.jsonl" && fail "(e) the late fault did not reorder the log"
sort "$tmp/e0.jsonl" >"$tmp/e0.sorted"
sort "$tmp/e1.jsonl" | cmp -s - "$tmp/e0.sorted" || fail "(e) the late log holds other lines"
readout e0
readout e1
cp "$tmp/e0.out" "$tmp/e1.base"
expect e1 '
base = json.load(open(sys.argv[1].replace("e1.out", "e1.base")))
late = injected(r"late [^(]*\((\d+) lines\)")
if late < 1000:
    print("only %d late lines" % late)
# The sequential looks are decisions taken with the data known at each look
# (README, "Sequential testing"), so they are left out; everything else of
# the final summary must not depend on arrival order within the lateness.
SEQ = {"looks", "info", "z", "bound", "verdict", "p_always", "ci_always", "cs", "p_seq"}
def diff(x, y, path):
    if isinstance(x, dict) and isinstance(y, dict):
        for k in sorted((set(x) | set(y)) - SEQ):
            yield from diff(x.get(k), y.get(k), path + "." + k)
    elif isinstance(x, list) and isinstance(y, list) and len(x) == len(y):
        for k, (p, q) in enumerate(zip(x, y)):
            yield from diff(p, q, "%s[%d]" % (path, k))
    elif x != y:
        yield "%s: %s in time order, %s with late lines" % (path, x, y)
d = sorted(diff(base, r, "summary"), key=lambda x: not x.startswith("summary.metrics"))
if d:
    print("%d fields differ with late lines, e.g. %s" % (len(d), "; ".join(d[:4])))
'

# determinism: the same seed gives the same bytes, another seed others; .gz
"$ABTALLY" simulate -q --units 3000 --seed 9 --fault duplicate:0.01 >"$tmp/s1" || fail "simulate to stdout"
"$ABTALLY" simulate -q --units 3000 --seed 9 --fault duplicate:0.01 -o "$tmp/s2.jsonl.gz" || fail "simulate .gz"
"$ABTALLY" simulate -q --units 3000 --seed 10 --fault duplicate:0.01 >"$tmp/s3" || fail "simulate seed 10"
gzip -dc "$tmp/s2.jsonl.gz" | cmp -s - "$tmp/s1" || fail "the .gz output differs from stdout for one seed"
cmp -s "$tmp/s1" "$tmp/s3" && fail "seeds 9 and 10 gave the same log"

# the summary line and --quiet
"$ABTALLY" simulate --units 10 >/dev/null 2>"$tmp/q" || fail "simulate --units 10"
grep -q '^simulate: 10 units (control [0-9]*, treatment [0-9]*), [0-9]* lines .*faults: none$' "$tmp/q" ||
    fail "summary line: $(cat "$tmp/q")"
"$ABTALLY" simulate --units 10 --quiet >/dev/null 2>"$tmp/q"
[ -s "$tmp/q" ] && fail "--quiet printed: $(cat "$tmp/q")"

# the config: arms, weights, window, planned units
"$ABTALLY" simulate -q --units 500 --days 7 --start 2027-03-01 --arms ctl,a,b --weights 2,1,1 \
    --pre-days 0 --experiment green-1 --config-out "$tmp/k.json" >/dev/null || fail "simulate 3 arms"
python3 - "$tmp/k.json" <<'EOF' || fail "3-arm config"
import json, sys
c = json.load(open(sys.argv[1]))
assert c["experiment"] == "green-1", c
assert [a["name"] for a in c["arms"]] == ["ctl", "a", "b"] and c["control"] == "ctl", c
assert [a["weight"] for a in c["arms"]] == [2, 1, 1], c
assert c["window"] == {"start": "2027-03-01T00:00:00Z", "end": "2027-03-08T00:00:00Z"}, c
assert "covariate" not in c and c["sequential"]["planned_units"] == 500, c
assert [m["name"] for m in c["metrics"]] == ["order_value", "converted", "value_per_session", "page_errors"]
EOF

# --help teaches with an example and names every fault
"$ABTALLY" simulate --help >"$tmp/help" || fail "--help: exit $?"
for word in example lose-assign multi-arm duplicate malformed late self-select --config-out; do
    grep -q -- "$word" "$tmp/help" || fail "--help does not mention $word"
done
"$ABTALLY" --help | grep -q '^  simulate ' || fail "abtally --help does not list simulate"

# usage errors: exit 2, one line "abtally: simulate: ..." on stderr, nothing on stdout
for args in "--units 0" "--units x" "--days 0" "--start 2026-13-01" "--arms control" \
    "--arms a,a" "--weights 1,2,3" "--weights 1,-1" "--effect order_value" \
    "--effect basket=0.1" "--effect order_value=-1" "--effect control:order_value=0.1" \
    "--fault lose-assign:nobody:0.1" "--fault lose-assign:treatment:1.5" "--fault late:0.1" \
    "--fault late:0.1:forever" "--fault duplicate:0.1:15" "--fault duplicate:0.1:0" \
    "--fault melt:0.1" "--fault duplicate:0.1 --fault duplicate:0.2" "--conversion 2" \
    "--effect converted=30" "--bogus" "--units" "stray"; do
    # shellcheck disable=SC2086
    "$ABTALLY" simulate $args >"$tmp/out" 2>"$tmp/err"
    rc=$?
    [ "$rc" -eq 2 ] || fail "simulate $args: exit $rc, expected 2"
    [ "$(wc -l <"$tmp/err")" -eq 1 ] || fail "simulate $args: stderr is not one line: $(cat "$tmp/err")"
    grep -q '^abtally: simulate: ' "$tmp/err" || fail "simulate $args: message '$(cat "$tmp/err")'"
    [ -s "$tmp/out" ] && fail "simulate $args: wrote to stdout"
done

[ "$fails" -eq 0 ]
