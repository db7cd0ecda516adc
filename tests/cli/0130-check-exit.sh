#!/bin/sh
# 0130-check-exit: `abtally check` exit codes and verdicts (issue 3 acceptance:
# "check exits 0 on a sound log and 3 on a log that lost 8% of one arm's
# assignment events"), on logs written by the reference fixture generator
# (tests/reference/make_fixture.py's Log: its time and number spellings,
# arrival order shuffled by up to 50 minutes), not by abtally's own simulator
# (tests/cli/0600-simulate-check.sh covers that one).
#
# Invented scenario: Crumbly Lane tests a "bake-off" banner; 20,000 units,
# exactly 10,000 per arm (a shuffled list, so the sound log's chi-square is 0),
# each assigned once, with sessions, orders, page errors and pre-period
# activity (so CUPED and the balance check run).
#   sound            check exit 0, verdict "sound", no reasons; --strict also 0
#   lost assignment  800 of the 10,000 treatment arm's assignment lines (8%)
#                    removed: exit 3, verdict "failed",
#                    an "srm" reason of severity fail; the units and the SRM
#                    chi-square p equal those of the known counts 10000/9200
#                    computed by tests/reference/estimates_ref.py
#                    (chi2 = 2 * 400^2 / 9600 = 33.33, p < 0.001)
#   doubtful         the sound log plus, for 0.5% of the units, a second
#                    assignment (same arm) a day before the window: only an
#                    "outside_window" warning, verdict "doubtful", exit 0, and
#                    exit 3 with --strict
# POSIX sh; $ABTALLY is the binary; run from the repository root; exit 0 = pass.
set -u
ABTALLY=${ABTALLY:-build/abtally}
PYTHONDONTWRITEBYTECODE=1
export PYTHONDONTWRITEBYTECODE
tmp=$(mktemp -d "${TMPDIR:-/tmp}/abtally-0130.XXXXXX") || exit 1
trap 'rm -rf "$tmp"' EXIT INT TERM
fail=0

command -v python3 >/dev/null 2>&1 || { echo "0130: python3 is required" >&2; exit 1; }

python3 - "$tmp" <<'EOF' || { echo "building the logs failed"; exit 1; }
import json, os, random, sys
sys.path.insert(0, "tests/reference")
import join_ref
import make_fixture as mf

out = sys.argv[1]
cfg = {
    "experiment": "crumbly-bake-off",
    "arms": [{"name": "control", "weight": 1}, {"name": "bake_off_banner", "weight": 1}],
    "control": "control",
    "window": {"start": "2027-07-05T00:00:00Z", "end": "2027-07-12T00:00:00Z"},
    "metrics": [
        {"name": "order_value", "type": "mean", "event": "order_value", "attribution_hours": 168},
        {"name": "converted", "type": "binary", "event": "order_value", "attribution_hours": 168},
        {"name": "value_per_session", "type": "ratio", "numerator": "order_value",
         "denominator": "session", "attribution_hours": 168},
        {"name": "page_errors", "type": "mean", "event": "page_error", "role": "guardrail",
         "better": "lower"},
    ],
    "covariate": {"pre_days": 7},
    "alpha": 0.05,
    "srm": {"threshold": 0.001},
}
rng = random.Random(20270705)
w0 = join_ref.config_time(cfg["window"]["start"])
w1 = join_ref.config_time(cfg["window"]["end"])
D, H, M = mf.DAY, mf.HOUR, mf.MIN
arms = ["control"] * 10000 + ["bake_off_banner"] * 10000
rng.shuffle(arms)

log = mf.Log(rng)  # the generator's own line writer
assign_items = {"control": [], "bake_off_banner": []}
units = []
for i, arm in enumerate(arms):
    u = "c%05d" % i
    expo = w0 + rng.randrange(w1 - w0 - 2 * H)
    units.append((u, arm, expo))
    it = log.add("assign", expo, u, exp=cfg["experiment"], arm=arm)
    assign_items[arm].append(it)
    for t in (expo - rng.randrange(1, 7 * D), expo + rng.randrange(1, 6 * D)):
        if rng.random() < 0.7:
            log.add("outcome", t, u, metric="session")
        if rng.random() < 0.25:
            log.add("outcome", t + rng.randrange(M, 20 * M), u, metric="order_value",
                    value=round(rng.lognormvariate(3.0, 0.5), 2))
        if rng.random() < 0.04:
            log.add("outcome", t + rng.randrange(M), u, metric="page_error")

def write(name, items):
    items = sorted(items, key=lambda it: it[0])
    mf.write_lines(os.path.join(out, name), [it[1] for it in items])

with open(os.path.join(out, "config.json"), "w") as f:
    json.dump(cfg, f, indent=1)
write("sound.jsonl", log.items)

# 8% of the treatment arm's assignment lines lost
lost = set(map(id, rng.sample(assign_items["bake_off_banner"], 800)))
write("lost.jsonl", [it for it in log.items if id(it) not in lost])

# 0.5% of the units with an extra assignment (same arm) a day before the window
extra = mf.Log(rng)
for u, arm, expo in rng.sample(units, 100):
    extra.add("assign", w0 - D + rng.randrange(12 * H), u, exp=cfg["experiment"], arm=arm)
write("doubtful.jsonl", log.items + extra.items)
EOF

# run NAME [OPTIONS]: check --format json on $tmp/NAME.jsonl; sets rc
run() {
    name=$1
    shift
    "$ABTALLY" check --config "$tmp/config.json" --format json "$@" "$tmp/$name.jsonl" \
        >"$tmp/$name.out" 2>"$tmp/$name.err"
    rc=$?
}

# expect NAME PYTHON: PYTHON sees r (check's JSON record) and R
# (tests/reference/estimates_ref.py); prints one line per problem.
expect() {
    out=$(python3 - "$tmp/$1.out" "$2" <<'EOF'
import json, sys
sys.path.insert(0, "tests/reference")
import estimates_ref as R
try:
    r = json.load(open(sys.argv[1]))
except Exception as x:  # noqa: BLE001
    print("output is not JSON: %s" % x)
    sys.exit(0)
reasons = {x["check"]: x["severity"] for x in r["integrity"]["reasons"]}
verdict = r["integrity"]["verdict"]
exec(sys.argv[2])
EOF
)
    [ -z "$out" ] || { echo "$1: $out"; fail=1; }
}

run sound
[ "$rc" -eq 0 ] || { echo "sound: check exited $rc, expected 0 ($(head -2 "$tmp/sound.err"))"; fail=1; }
expect sound '
if verdict != "sound" or reasons:
    print("verdict %s, reasons %r; expected sound, none" % (verdict, r["integrity"]["reasons"]))
if r["units"] != {"control": 10000, "bake_off_banner": 10000}:
    print("units %r, the log holds 10000 per arm" % r["units"])
'
run sound --strict
[ "$rc" -eq 0 ] || { echo "sound --strict: check exited $rc, expected 0"; fail=1; }

run lost
[ "$rc" -eq 3 ] || { echo "lost: check exited $rc, expected 3 ($(head -2 "$tmp/lost.err"))"; fail=1; }
expect lost '
if verdict != "failed" or reasons.get("srm") != "fail":
    print("verdict %s, reasons %r; expected failed with an srm failure" % (verdict, reasons))
if r["units"] != {"control": 10000, "bake_off_banner": 9200}:
    print("units %r, expected 10000/9200 after 800 lost assignments" % r["units"])
s = R.srm_test([10000, 9200], [1, 1])   # chi2 = 2 * 400^2 / 9600
for k in ("chi2", "p"):
    if abs(r["srm"][k] - s[k]) > 1e-6 * s[k]:
        print("srm.%s = %r, reference %r" % (k, r["srm"][k], s[k]))
if not r["srm"]["alarm"] or not s["p"] < 0.001:
    print("srm alarm %r at p %r" % (r["srm"]["alarm"], r["srm"]["p"]))
'

run doubtful
[ "$rc" -eq 0 ] || { echo "doubtful: check exited $rc, expected 0"; fail=1; }
expect doubtful '
if verdict != "doubtful" or reasons != {"outside_window": "warn"}:
    print("verdict %s, reasons %r; expected doubtful with one outside_window warning" % (verdict, reasons))
if r["integrity"]["outside_window"] != 100:
    print("outside_window %r, expected 100" % r["integrity"]["outside_window"])
'
run doubtful --strict
[ "$rc" -eq 3 ] || { echo "doubtful --strict: check exited $rc, expected 3"; fail=1; }

[ "$fail" -eq 0 ] && echo "0130-check-exit: ok"
exit "$fail"
