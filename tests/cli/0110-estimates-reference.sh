#!/bin/sh
# 0110-estimates-reference: abtally's estimates, SRM tests and balance checks
# against an independent reference (issue 3: "on a log with faults, every
# estimate field equals an independent computation to 1e-6 relative").
#
# The reference is tests/reference/estimates_ref.py, run here at test time on
# the very logs abtally reads. It takes the per-unit values of join_ref.py
# (the independent join reference of 0100) and computes every field from them
# alone, in Python's standard library: two-pass means, variances and
# covariances (math.fsum), the normal quantile of statistics.NormalDist,
# normal tails from math.erfc, chi-square tails in closed form (Abramowitz &
# Stegun 26.4.4-5), Student's t from the incomplete beta continued fraction
# (Numerical Recipes sec. 6.4; cross-checked once against SciPy 1.10.1, values
# recorded in estimates_ref.py, re-checked by `estimates_ref.py selftest`),
# exact binomial and hypergeometric sums (math.comb, fractions), hashlib.
#
# Cases (each a config and a log with faults: duplicates, multi-arm units,
# out-of-window assignments, malformed lines of every reason, ...):
#   fixtures/replay/crumbly-two-arm    2 arms, >= 100 units each: the z path;
#                                      a guardrail (better: lower), a secondary
#   fixtures/replay/crumbly-three-arm  3 arms of < 100 units: the Welch-t path
#   crumbly-pantry (built here by make_fixture.py's generator, seed 20270303)
#                                      4 arms, weights 3:3:1:1 in the log but
#                                      45/30/12.5/12.5 in the config (an SRM,
#                                      chi-square df 3, positive logBF with
#                                      srm.prior 30), alpha 0.1, z and Welch t
#                                      side by side, guardrails of every type
#                                      and both directions (binary ones on
#                                      Fisher's exact test), secondary metrics
#                                      of every type (Benjamini-Hochberg)
#   crumbly-segments (built here)      2 arms, attrs on every assignment, a
#                                      platform sent mostly to control: SRM by
#                                      segment and by day with Holm; a rare
#                                      binary guardrail no treatment unit has
#                                      (Agresti-Caffo interval, Fisher's exact
#                                      p and p_harm); a multi-arm unit whose attrs
#                                      and day no counted unit shares, and a
#                                      unit whose attrs are on a later (not the
#                                      exposure) assignment
#
# For each case abtally runs as `replay --final-only`, as `replay` (every
# record) and as `check --format json`; the test requires
#   1. of each final record: for every metric row, diff, ci, p, p_adjusted,
#      test, df, lift, lift_ci, cuped_diff, cuped_ci, var_reduction, p_harm,
#      harm, better, type, role equal to the reference within 1e-6 relative
#      (a quantity that is 0 up to rounding, e.g. 15/45 - 18/54, may differ by
#      1e-9 of its interval's width); srm chi2, df, p, test, alarm; by_day in
#      day order and by_segment as a set (abtally lists segments in arrival
#      order) with units, p and Holm-adjusted p; integrity.balance_smd;
#   2. the sequential SRM: p_seq <= exp(-logBF) of the final counts (the
#      always-valid p is a running minimum over records); in the full replay,
#      every record's p_seq is the running minimum of exp(-logBF) computed by
#      the reference from that record's own unit counts (Lindon & Malek 2022,
#      prior c * pi, c = srm.prior, default 100), and its chi2 and p are the
#      reference's for those counts; check's p_seq equals the full replay's;
#   3. the three final records agree with one another exactly on every
#      estimate field (p_seq: see 2), and check exits 3 exactly when the
#      verdict is "failed", else 0;
#   4. the cases still exercise what they are meant to: the z, welch_t and
#      fisher tests, every metric type, guardrails of both directions, the
#      binomial SRM test, and p_seq below 1 somewhere.
#
# POSIX sh; $ABTALLY is the binary; run from the repository root; exit 0 = pass.
set -u
ABTALLY=${ABTALLY:-build/abtally}
REF=tests/reference
PYTHONDONTWRITEBYTECODE=1
export PYTHONDONTWRITEBYTECODE
tmp=$(mktemp -d "${TMPDIR:-/tmp}/abtally-0110.XXXXXX") || exit 1
trap 'rm -rf "$tmp"' EXIT INT TERM
fail=0

command -v python3 >/dev/null 2>&1 || { echo "0110: python3 is required" >&2; exit 1; }

python3 "$REF/estimates_ref.py" selftest >"$tmp/selftest" 2>&1 ||
    { echo "estimates_ref.py selftest failed:"; cat "$tmp/selftest"; fail=1; }

# ---------------------------------------------------------------- generated cases

mkdir -p "$tmp/crumbly-pantry" "$tmp/crumbly-segments"
python3 - "$tmp/crumbly-pantry" <<'EOF' || { echo "building crumbly-pantry failed"; fail=1; }
# Crumbly Lane's pantry test: four arms, built with make_fixture.py's generator
# (its faults and time spellings included), seed 20270303.
import copy, json, os, sys
sys.path.insert(0, "tests/reference")
import make_fixture as mf

out = sys.argv[1]
spec = {
    "seed": 20270303,
    "units": 420,
    "config": {
        "experiment": "crumbly-pantry",
        "arms": [{"name": "control", "weight": 3}, {"name": "pantry_shelf", "weight": 3},
                 {"name": "one_tap", "weight": 1}, {"name": "sticky_basket", "weight": 1}],
        "control": "control",
        "window": {"start": "2027-04-05T00:00:00Z", "end": "2027-04-12T00:00:00Z"},
        "metrics": [
            {"name": "basket_value", "type": "mean", "event": "basket_value",
             "attribution_hours": 72},
            {"name": "purchased", "type": "binary", "event": "basket_value",
             "attribution_hours": 72},
            {"name": "value_per_visit", "type": "ratio", "numerator": "basket_value",
             "denominator": "visit", "attribution_hours": 168},
            {"name": "visits", "type": "mean", "event": "visit", "role": "guardrail",
             "better": "higher"},
            {"name": "had_error", "type": "binary", "event": "checkout_error",
             "attribution_hours": 24, "role": "guardrail", "better": "lower"},
            {"name": "errors_per_visit", "type": "ratio", "numerator": "checkout_error",
             "denominator": "visit", "role": "guardrail", "better": "lower"},
            {"name": "oven_credit_micros", "type": "mean", "event": "oven_credit",
             "role": "secondary"},
            {"name": "bought_credit", "type": "binary", "event": "oven_credit",
             "role": "secondary"},
            {"name": "basket_value_capped", "type": "mean", "event": "basket_value",
             "cap": 60, "role": "secondary"},
        ],
        "covariate": {"pre_days": 5},
        "alpha": 0.1,
        "srm": {"threshold": 0.001, "prior": 30},
    },
}
cfg, items = mf.build("crumbly-pantry", spec)
# The log follows 3:3:1:1; the config abtally reads says 45/30/12.5/12.5.
cfg = copy.deepcopy(cfg)
cfg["arms"][0]["weight"], cfg["arms"][1]["weight"] = 3.6, 2.4
with open(os.path.join(out, "config.json"), "w") as f:
    json.dump(cfg, f, indent=2)
mf.write_lines(os.path.join(out, "input.jsonl"), [it[1] for it in items])
EOF

python3 - "$tmp/crumbly-segments" <<'EOF' || { echo "building crumbly-segments failed"; fail=1; }
# Crumbly Lane's delivery-slot test: two arms, attrs on every assignment; the
# "kitchen_tablet" platform is sent mostly to control (an SRM in one segment).
import json, os, random, sys
out = sys.argv[1]
rng = random.Random(20270304)
exp = "crumbly-slots"
cfg = {
    "experiment": exp,
    "arms": [{"name": "control", "weight": 1}, {"name": "evening_slots", "weight": 1}],
    "window": {"start": "2027-05-03T00:00:00Z", "end": "2027-05-07T00:00:00Z"},
    "metrics": [{"name": "basket_value", "type": "mean", "event": "basket_value",
                 "attribution_hours": 48},
                {"name": "reported_problem", "type": "binary", "event": "problem_report",
                 "role": "guardrail", "better": "lower"}],
    "covariate": {"pre_days": 2},
}
H = 3600
T0 = 1809302400  # 2027-05-03T00:00:00Z
def ts(s):
    import datetime
    return datetime.datetime.fromtimestamp(s, datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
ev = []  # (arrival key, line)
def put(key, obj):
    ev.append((key, json.dumps(obj)))
n = 0
for day in range(3):                        # units exposed on the first three days only
    for _ in range(40):
        n += 1
        u = "s%04d" % n
        plat = rng.choice(["kitchen_tablet", "phone", "phone", "web", "web"])
        if plat == "kitchen_tablet":
            arm = "control" if rng.random() < 0.85 else "evening_slots"
        else:
            arm = rng.choice(["control", "evening_slots"])
        t = T0 + day * 24 * H + rng.randrange(20 * H)
        put(t, {"kind": "assign", "time": ts(t), "unit": u, "exp": exp, "arm": arm,
                "attrs": {"platform": plat, "slot": rng.choice(["am", "pm"])}, "id": "a%d" % n})
        if arm == "control" and n % 13 == 0:  # a rare event: no treatment unit has it
            put(t + 600, {"kind": "outcome", "time": ts(t + 600), "unit": u,
                          "metric": "problem_report"})
        for k in range(rng.randrange(4)):
            to = t + rng.randrange(-30 * H, 40 * H)
            put(to, {"kind": "outcome", "time": ts(to), "unit": u, "metric": "basket_value",
                     "value": round(rng.lognormvariate(3.2, 0.5), 2), "id": "o%d-%d" % (n, k)})
# A multi-arm unit, exposed on the fourth day (no counted unit is), with attrs
# no counted unit has.
t = T0 + 3 * 24 * H + 5 * H
put(t, {"kind": "assign", "time": ts(t), "unit": "m-kiosk", "exp": exp, "arm": "control",
        "attrs": {"platform": "kiosk"}})
put(t + 2 * H, {"kind": "assign", "time": ts(t + 2 * H), "unit": "m-kiosk", "exp": exp,
                "arm": "evening_slots"})
# A unit whose first assignment to arrive carries attrs, but whose exposure is an
# earlier assignment without attrs that arrives 10 minutes later (within the
# 1 h lateness bound): its segment is that of its exposure, i.e. none.
t = T0 + 24 * H + 7 * H
put(t + 1800, {"kind": "assign", "time": ts(t + 1800), "unit": "z-late-attrs", "exp": exp,
               "arm": "evening_slots", "attrs": {"platform": "smart_fridge"}})
put(t + 2400, {"kind": "assign", "time": ts(t), "unit": "z-late-attrs", "exp": exp,
               "arm": "evening_slots"})
ev.sort(key=lambda e: e[0])
with open(os.path.join(out, "config.json"), "w") as f:
    json.dump(cfg, f, indent=2)
with open(os.path.join(out, "input.jsonl"), "w") as f:
    f.write("".join(line + "\n" for _, line in ev))
EOF

# ---------------------------------------------------------------- comparison

# compare LABEL REF FINAL_ONLY FULL CHECK CHECK_RC CONFIG: prints one line per problem.
compare() {
    python3 - "$@" <<'EOF'
import json, math, sys
sys.path.insert(0, "tests/reference")
import estimates_ref as R

label, ref_p, fo_p, full_p, chk_p, chk_rc, cfg_p = sys.argv[1:8]
ref = json.load(open(ref_p))
cfg = json.load(open(cfg_p))
bad = []

def last(path):
    lines = [l for l in open(path).read().splitlines() if l.strip()]
    return [json.loads(l) for l in lines]

try:
    fo = last(fo_p)[-1]
    stream = last(full_p)
    full = stream[-1]
    chk = json.load(open(chk_p))
except Exception as x:  # noqa: BLE001
    print("%s: abtally output unreadable: %s" % (label, x))
    sys.exit(0)

TOL = 1e-6
# fields whose absolute floor is 1e-9 of an interval's width (a quantity that is
# 0 up to rounding has no meaningful relative error)
SCALE = {"diff": "ci", "ci": "ci", "lift": "lift_ci", "lift_ci": "lift_ci",
         "cuped_diff": "cuped_ci", "cuped_ci": "cuped_ci"}

def width(row, k):
    iv = row.get(SCALE.get(k, ""), None)
    if isinstance(iv, list) and len(iv) == 2 and None not in iv:
        return abs(iv[1] - iv[0])
    return 0.0

def close(e, g, floor=0.0, tol=TOL):
    if e is None or g is None:
        return e is None and g is None
    if isinstance(e, (bool, str)) or isinstance(g, (bool, str)):
        return e == g and type(e) is type(g)
    if e == g:
        return True
    return abs(e - g) <= max(tol * max(abs(e), abs(g)), 1e-9 * floor)

ROW_KEYS = ["type", "role", "diff", "ci", "p", "p_adjusted", "test", "df", "lift", "lift_ci",
            "cuped_diff", "cuped_ci", "var_reduction", "better", "p_harm", "harm"]

def check_record(name, got):
    out = []
    gm = got.get("metrics", [])
    if [(r["metric"], r["arm"]) for r in ref["metrics"]] != \
            [(r.get("metric"), r.get("arm")) for r in gm]:
        out.append("%s: metric rows %r, expected %r" % (
            name, [(r.get("metric"), r.get("arm")) for r in gm],
            [(r["metric"], r["arm"]) for r in ref["metrics"]]))
        return out
    for r, g in zip(ref["metrics"], gm):
        for k in ROW_KEYS:
            if k not in r:
                if k in g and k in ("better", "p_harm", "harm"):
                    out.append("%s %s/%s: %s present, the metric has no direction"
                               % (name, r["metric"], r["arm"], k))
                continue
            if k not in g:
                out.append("%s %s/%s: %s missing (expected %r)" % (name, r["metric"], r["arm"], k, r[k]))
                continue
            e, v = r[k], g[k]
            fl = max(width(r, k), width(g, k))
            if k == "harm" and r.get("p_harm") is not None and abs(r["p_harm"] - cfg.get("alpha", 0.05)) < 1e-6:
                continue  # p_harm at alpha within the tolerance: either answer is right
            ok = (isinstance(v, list) and len(v) == len(e) and all(close(a, b, fl) for a, b in zip(e, v))) \
                if isinstance(e, list) else close(e, v, fl)
            if not ok:
                out.append("%s %s/%s: %s = %r, reference %r" % (name, r["metric"], r["arm"], k, v, e))
    s, gs = ref["srm"], got.get("srm", {})
    for k in ("chi2", "df", "p", "test", "alarm"):
        if s.get(k) is None and k == "alarm":
            continue
        if not close(s[k], gs.get(k)):
            out.append("%s srm.%s = %r, reference %r" % (name, k, gs.get(k), s[k]))
    gd = gs.get("by_day", [])
    if [d["day"] for d in s["by_day"]] != [d.get("day") for d in gd]:
        out.append("%s srm.by_day lists days %r, reference %r (units %r)" % (
            name, [d.get("day") for d in gd], [d["day"] for d in s["by_day"]],
            [d.get("units") for d in gd]))
    else:
        for e, g in zip(s["by_day"], gd):
            for k in ("units", "p", "p_adjusted"):
                if not close(e[k], g.get(k)):
                    out.append("%s srm.by_day %s: %s = %r, reference %r" % (name, e["day"], k, g.get(k), e[k]))
    gseg = {x.get("segment"): x for x in gs.get("by_segment", [])}
    rseg = {x["segment"]: x for x in s["by_segment"]}
    for nm in sorted(set(gseg) - set(rseg)):
        out.append("%s srm.by_segment lists %s (%r units) that no counted unit is in"
                   % (name, nm, gseg[nm].get("units")))
    for nm in sorted(set(rseg) - set(gseg)):
        out.append("%s srm.by_segment lacks %s (%d units)" % (name, nm, rseg[nm]["units"]))
    for nm in sorted(set(rseg) & set(gseg)):
        for k in ("units", "p", "p_adjusted"):
            if not close(rseg[nm][k], gseg[nm].get(k)):
                out.append("%s srm.by_segment %s: %s = %r, reference %r" % (name, nm, k, gseg[nm].get(k), rseg[nm][k]))
    gi = got.get("integrity", {})
    for m, e in ref["integrity"].get("balance_smd", {}).items():
        v = gi.get("balance_smd", {}).get(m, "missing")
        if not close(e, v if v != "missing" else None) or v == "missing":
            out.append("%s integrity.balance_smd.%s = %r, reference %r" % (name, m, v, e))
    for k in ("hash_checked", "hash_mismatch"):
        if k in ref["integrity"] and gi.get(k) != ref["integrity"][k]:
            out.append("%s integrity.%s = %r, reference %r" % (name, k, gi.get(k), ref["integrity"][k]))
    if got.get("units") != ref["units"]:
        out.append("%s units %r, reference %r" % (name, got.get("units"), ref["units"]))
    # p_seq: a running minimum over records, at most exp(-logBF) of the final counts
    bound = ref["reference_only"]["srm_p_seq_bound"]
    ps = gs.get("p_seq")
    if not isinstance(ps, (int, float)) or not 0 < ps <= bound * (1 + 1e-9):
        out.append("%s srm.p_seq = %r, above exp(-logBF_final) = %r (logBF %r, prior %r)" % (
            name, ps, bound, ref["reference_only"]["srm_logbf"], ref["reference_only"]["srm_prior"]))
    return out

for name, rec in (("replay --final-only", fo), ("replay", full), ("check", chk)):
    bad += check_record(name, rec)
    if rec.get("final") is not True:
        bad.append("%s: the record is not the final summary" % name)

# every record of the full replay: chi2, p and the running minimum of exp(-logBF)
w = ref["reference_only"]["weights"]
arms = [a["name"] for a in cfg["arms"]]
prior = ref["reference_only"]["srm_prior"]
run_min = 1.0
for rec in stream:
    counts = [rec["units"][a] for a in arms]
    lb = R.srm_logbf(counts, w, prior)
    run_min = min(run_min, math.exp(-lb)) if lb > -700 else run_min
    st = R.srm_test(counts, w)
    gs = rec.get("srm", {})
    if not close(run_min, gs.get("p_seq"), tol=1e-9):
        bad.append("replay record %s (units %r): p_seq = %r, running min of exp(-logBF) = %r"
                   % (rec.get("time"), counts, gs.get("p_seq"), run_min))
    for k in ("chi2", "p"):
        if not close(R.num(st[k]), gs.get(k)):
            bad.append("replay record %s (units %r): srm.%s = %r, reference %r"
                       % (rec.get("time"), counts, k, gs.get(k), st[k]))
if chk.get("srm", {}).get("p_seq") != full.get("srm", {}).get("p_seq"):
    bad.append("check p_seq %r != replay's final p_seq %r"
               % (chk.get("srm", {}).get("p_seq"), full.get("srm", {}).get("p_seq")))

# the three final records agree exactly on the estimate fields
def est(rec):
    rows = [{k: r.get(k) for k in ROW_KEYS + ["metric", "arm", "n", "mean", "control_n", "control_mean"]}
            for r in rec.get("metrics", [])]
    s = rec.get("srm", {})
    segs = sorted(s.get("by_segment", []), key=lambda x: x.get("segment", ""))
    return {"units": rec.get("units"), "rows": rows,
            "srm": {k: s.get(k) for k in ("chi2", "df", "p", "test", "alarm", "by_day")},
            "segments": segs,
            "balance": rec.get("integrity", {}).get("balance_smd")}
for name, rec in (("replay --final-only", fo), ("replay", full)):
    a, b = est(rec), est(chk)
    for k in a:
        if a[k] != b[k]:
            bad.append("%s and check disagree on %s" % (name, k))

verdict = chk.get("integrity", {}).get("verdict")
want_rc = 3 if verdict == "failed" else 0
if int(chk_rc) != want_rc:
    bad.append("check exited %s with verdict %r (expected %d)" % (chk_rc, verdict, want_rc))

for b in bad:
    print("%s: %s" % (label, b))
EOF
}

: >"$tmp/seen"
for dir in fixtures/replay/*/ "$tmp/crumbly-pantry/" "$tmp/crumbly-segments/"; do
    dir=${dir%/}
    case=$(basename "$dir")
    [ -f "$dir/config.json" ] && [ -f "$dir/input.jsonl" ] || continue
    if ! python3 "$REF/estimates_ref.py" --config "$dir/config.json" "$dir/input.jsonl" \
            >"$tmp/$case.ref" 2>"$tmp/$case.referr"; then
        echo "$case: estimates_ref.py failed:"; head -5 "$tmp/$case.referr"; fail=1; continue
    fi
    "$ABTALLY" replay --config "$dir/config.json" --final-only "$dir/input.jsonl" \
        >"$tmp/$case.fo" 2>"$tmp/$case.err"
    rc=$?
    [ "$rc" -eq 0 ] || { echo "$case: replay --final-only exited $rc: $(head -3 "$tmp/$case.err")"; fail=1; continue; }
    "$ABTALLY" replay --config "$dir/config.json" "$dir/input.jsonl" >"$tmp/$case.full" 2>"$tmp/$case.err"
    rc=$?
    [ "$rc" -eq 0 ] || { echo "$case: replay exited $rc: $(head -3 "$tmp/$case.err")"; fail=1; continue; }
    "$ABTALLY" check --config "$dir/config.json" --format json "$dir/input.jsonl" \
        >"$tmp/$case.chk" 2>"$tmp/$case.err"
    crc=$?
    if [ "$crc" -ne 0 ] && [ "$crc" -ne 3 ]; then
        echo "$case: check exited $crc: $(head -3 "$tmp/$case.err")"; fail=1; continue
    fi
    out=$(compare "$case" "$tmp/$case.ref" "$tmp/$case.fo" "$tmp/$case.full" "$tmp/$case.chk" "$crc" \
        "$dir/config.json")
    if [ -n "$out" ]; then
        printf '%s\n' "$out"; fail=1
    fi
    echo "$tmp/$case.ref $tmp/$case.fo" >>"$tmp/seen"
done

# 4. the cases still exercise every path they are meant to
python3 - "$tmp/seen" <<'EOF' || fail=1
import json, sys
tests, types, dirs, srm_tests, p_seq, variants = set(), set(), set(), set(), [], set()
for line in open(sys.argv[1]):
    ref_p, fo_p = line.split()
    ref = json.load(open(ref_p))
    fo = json.loads(open(fo_p).read().splitlines()[-1])
    for r in ref["metrics"]:
        tests.add(r["test"])
        types.add(r["type"])
        if r["role"] == "guardrail":
            dirs.add((r["type"], r["better"]))
    for part in ref["srm"]["by_day"] + ref["srm"]["by_segment"]:
        srm_tests.add(part["test"])
    srm_tests.add(ref["srm"]["test"])
    for v in ref["reference_only"]["binary_variants"].values():
        variants.update(v)
    p_seq.append(fo["srm"]["p_seq"])
miss = []
for want, have, what in (({"z", "welch_t", "fisher"}, tests, "tests"),
                         ({"mean", "binary", "ratio"}, types, "metric types"),
                         ({"higher", "lower"}, {d for _, d in dirs}, "guardrail directions"),
                         ({"mean", "binary", "ratio"}, {t for t, _ in dirs}, "guardrail types"),
                         ({"chi2", "binomial", "insufficient"}, srm_tests, "SRM tests"),
                         ({"fisher", "agresti_caffo"}, variants, "binary variants")):
    if not want <= have:
        miss.append("%s: %s not exercised" % (what, sorted(want - have)))
if not any(p < 1 for p in p_seq):
    miss.append("no case has p_seq < 1: the logBF bound is never tested")
for m in miss:
    print("coverage: " + m)
sys.exit(1 if miss else 0)
EOF

[ "$fail" -eq 0 ] && echo "0110-estimates-reference: ok"
exit "$fail"
