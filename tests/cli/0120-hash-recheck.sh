#!/bin/sh
# 0120-hash-recheck: the assignment re-check (config "hash") against buckets
# computed independently with Python's hashlib.
#
# The expected arm of each unit is computed here, in Python, with hashlib:
# the string hash.format with "{salt}" and "{unit}" replaced (default
# "{salt}{unit}"), encoded as UTF-8, hashed with sha256 or md5; the first 8
# bytes of the digest read as a big-endian unsigned integer, modulo
# hash.buckets; the arm is the one whose "buckets": [first, end) holds it
# (include/rebucket.h states this rule; nothing of abtally computes the
# expected values).
#
# Two designs of the invented Crumbly Lane shop:
#   A  sha256, 2 arms [0, 50) and [50, 100) of 100 buckets, default format;
#   B  md5, 3 arms [0, 400), [400, 600), [600, 800) of 1000 buckets (800-999 a
#      holdout: no arm), format "crumbly/{unit}/{salt}", unit ids with non-ASCII
#      letters (raw UTF-8 and \u escapes), a salt with spaces.
# For each, a sound log (every assignment names the arm the hash gives; some
# units assigned twice; assignments of another experiment and outcomes) must
# give hash_mismatch 0, hash_checked = the in-window assignments, no "hash"
# reason, verdict sound and `check` exit 0. A faulty copy adds: units whose only
# assignment names a wrong arm, a unit assigned twice to a wrong arm (2
# mismatches: the check counts assignments, as its message "N of M assignments"
# says), a unit whose second assignment names another arm (multi-arm; 1
# mismatch), a holdout unit assigned to an arm (design B) -- and, none of which
# may count: a wrong assignment outside the window, the duplicate (same id) of
# a wrong line, another experiment's assignment, an unknown arm. It must give
# exactly the number of mismatching in-window assignments, a "hash" reason of
# severity fail, verdict failed and `check` exit 3; `replay --final-only`
# prints the same counts. tests/reference/estimates_ref.py (its own hashlib
# code, over join_ref.py's accepted events) must agree on both counts.
#
# POSIX sh; $ABTALLY is the binary; run from the repository root; exit 0 = pass.
set -u
ABTALLY=${ABTALLY:-build/abtally}
PYTHONDONTWRITEBYTECODE=1
export PYTHONDONTWRITEBYTECODE
tmp=$(mktemp -d "${TMPDIR:-/tmp}/abtally-0120.XXXXXX") || exit 1
trap 'rm -rf "$tmp"' EXIT INT TERM
fail=0

command -v python3 >/dev/null 2>&1 || { echo "0120: python3 is required" >&2; exit 1; }

python3 - "$tmp" <<'EOF' || { echo "building the logs failed"; exit 1; }
import hashlib, json, os, random, re, sys

out = sys.argv[1]
T0 = 1811980800  # 2027-06-03T00:00:00Z
H = 3600


def ts(s):
    import datetime
    return datetime.datetime.fromtimestamp(s, datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def bucket(h, unit):
    """hashlib: format with {salt}/{unit} replaced, UTF-8, first 8 bytes big-endian, mod buckets."""
    text = "".join(h["salt"] if t == "{salt}" else unit if t == "{unit}" else t
                   for t in re.split(r"(\{salt\}|\{unit\})", h.get("format", "{salt}{unit}")))
    d = hashlib.new(h["function"], text.encode("utf-8")).digest()
    return int.from_bytes(d[:8], "big") % h["buckets"]


def arm_of(cfg, unit):
    b = bucket(cfg["hash"], unit)
    for a in cfg["arms"]:
        if a["buckets"][0] <= b < a["buckets"][1]:
            return a["name"]
    return None


DESIGNS = {
    "A": {
        "experiment": "crumbly-recipes",
        "arms": [{"name": "control", "weight": 1, "buckets": [0, 50]},
                 {"name": "recipe_cards", "weight": 1, "buckets": [50, 100]}],
        "window": {"start": "2027-06-03T00:00:00Z", "end": "2027-06-10T00:00:00Z"},
        "metrics": [{"name": "basket_value", "type": "mean", "event": "basket_value"}],
        "hash": {"function": "sha256", "salt": "crumbly-recipes-7f3a", "buckets": 100},
    },
    "B": {
        "experiment": "crumbly-crumbs",
        "arms": [{"name": "control", "weight": 2, "buckets": [0, 400]},
                 {"name": "crumb_meter", "weight": 1, "buckets": [400, 600]},
                 {"name": "crumb_badge", "weight": 1, "buckets": [600, 800]}],
        "window": {"start": "2027-06-03T00:00:00Z", "end": "2027-06-10T00:00:00Z"},
        "metrics": [{"name": "basket_value", "type": "mean", "event": "basket_value"}],
        "hash": {"function": "md5", "salt": "oven 2 / batch 9", "buckets": 1000,
                 "format": "crumbly/{unit}/{salt}"},
    },
}

for name, cfg in DESIGNS.items():
    rng = random.Random("0120-" + name)
    exp = cfg["experiment"]
    arms = [a["name"] for a in cfg["arms"]]
    lines = []  # (sort key, JSON text)
    checked = 0
    units = []
    i = 0
    while len(units) < 600:
        i += 1
        # unit ids: plain, and in design B some with non-ASCII letters
        u = "u%05d" % i if name == "A" or i % 3 else "u-crème-%05d" % i
        a = arm_of(cfg, u)
        if a is None:
            continue  # a holdout unit: never assigned in the sound log
        units.append((u, a))
    holdout = next("h%05d" % j for j in range(10 ** 6) if arm_of(cfg, "h%05d" % j) is None) \
        if name == "B" else None
    for k, (u, a) in enumerate(units):
        t = T0 + rng.randrange(6 * 24 * H)
        for r in range(1 + (k % 5 == 0)):  # every fifth unit is assigned twice
            tt = t + r * rng.randrange(H, 20 * H)
            obj = {"kind": "assign", "time": ts(tt), "unit": u, "exp": exp, "arm": a,
                   "id": "a%d-%d" % (k, r)}
            text = json.dumps(obj, ensure_ascii=(k % 2 == 0))  # \u escapes on every other line
            lines.append((tt, text))
            checked += 1
        if rng.random() < 0.5:
            to = t + rng.randrange(1, 30 * H)
            lines.append((to, json.dumps({"kind": "outcome", "time": ts(to), "unit": u,
                                          "metric": "basket_value",
                                          "value": round(rng.uniform(5, 80), 2)})))
        if k % 7 == 0:  # another experiment's assignment: its arm is not checked
            lines.append((t + 60, json.dumps({"kind": "assign", "time": ts(t + 60), "unit": u,
                                              "exp": "crumbly-other", "arm": "whatever"})))
    cfg_out = dict(cfg)
    with open(os.path.join(out, name + ".json"), "w") as f:
        json.dump(cfg_out, f, indent=1, ensure_ascii=False)
    lines.sort(key=lambda x: x[0])
    with open(os.path.join(out, name + "-sound.jsonl"), "w", encoding="utf-8") as f:
        f.write("".join(l + "\n" for _, l in lines))

    # the faulty copy
    bad = list(lines)
    wrong = 0

    def other(a):
        return [x for x in arms if x != a][0]

    singles = [(k, u, a) for k, (u, a) in enumerate(units) if k % 5 != 0]
    # units whose only assignment names a wrong arm: replace their lines
    flip = {u for _, u, _ in singles[:3]}
    bad = [(t, l.replace('"arm": "%s"' % dict(units)[json.loads(l)["unit"]],
                         '"arm": "%s"' % other(dict(units)[json.loads(l)["unit"]])))
           if json.loads(l).get("kind") == "assign" and json.loads(l)["unit"] in flip
           and json.loads(l)["exp"] == exp else (t, l) for t, l in bad]
    wrong += 3
    # a unit assigned twice, both times to a wrong arm: 2 mismatches
    u2, a2 = units[5]  # k = 5: assigned twice
    bad = [(t, l.replace('"arm": "%s"' % a2, '"arm": "%s"' % other(a2)))
           if json.loads(l).get("kind") == "assign" and json.loads(l)["unit"] == u2
           and json.loads(l)["exp"] == exp else (t, l) for t, l in bad]
    wrong += 2
    # a unit whose second in-window assignment names another arm: multi-arm, 1 mismatch
    _, u3, a3 = singles[10]
    t3 = T0 + 3 * 24 * H
    wline = json.dumps({"kind": "assign", "time": ts(t3), "unit": u3, "exp": exp,
                        "arm": other(a3), "id": "wrong-1"})
    bad.append((t3, wline))
    wrong += 1
    # ... and what must not count: its duplicate (same unit and id), a wrong
    # assignment before the window, another experiment, an unknown arm
    bad.append((t3 + 60, wline))
    _, u4, a4 = singles[11]
    bad.append((T0 - 2 * H, json.dumps({"kind": "assign", "time": ts(T0 - 2 * H), "unit": u4,
                                        "exp": exp, "arm": other(a4)})))
    bad.append((t3 + 120, json.dumps({"kind": "assign", "time": ts(t3 + 120), "unit": u4,
                                      "exp": "crumbly-other", "arm": other(a4)})))
    bad.append((t3 + 180, json.dumps({"kind": "assign", "time": ts(t3 + 180), "unit": u4,
                                      "exp": exp, "arm": "no_such_arm"})))
    if holdout:
        th = T0 + 4 * 24 * H
        bad.append((th, json.dumps({"kind": "assign", "time": ts(th), "unit": holdout,
                                    "exp": exp, "arm": "control"})))
        wrong += 1
    bad.sort(key=lambda x: x[0])
    with open(os.path.join(out, name + "-wrong.jsonl"), "w", encoding="utf-8") as f:
        f.write("".join(l + "\n" for _, l in bad))
    with open(os.path.join(out, name + ".expect"), "w") as f:
        json.dump({"sound": {"checked": checked, "mismatch": 0},
                   "wrong": {"checked": checked + 1 + (1 if holdout else 0), "mismatch": wrong}}, f)
EOF

for d in A B; do
    for v in sound wrong; do
        log="$tmp/$d-$v.jsonl"
        "$ABTALLY" check --config "$tmp/$d.json" --format json "$log" >"$tmp/$d-$v.chk" 2>"$tmp/$d-$v.err"
        rc=$?
        "$ABTALLY" replay --config "$tmp/$d.json" --final-only "$log" >"$tmp/$d-$v.rep" 2>>"$tmp/$d-$v.err" ||
            { echo "$d-$v: replay failed: $(head -3 "$tmp/$d-$v.err")"; fail=1; continue; }
        python3 tests/reference/estimates_ref.py --config "$tmp/$d.json" "$log" >"$tmp/$d-$v.ref" ||
            { echo "$d-$v: estimates_ref.py failed"; fail=1; continue; }
        out=$(python3 - "$d-$v" "$v" "$rc" "$tmp/$d.expect" "$tmp/$d-$v.chk" "$tmp/$d-$v.rep" \
            "$tmp/$d-$v.ref" <<'EOF'
import json, sys
label, variant, rc, exp_p, chk_p, rep_p, ref_p = sys.argv[1:8]
want = json.load(open(exp_p))[variant]
ref = json.load(open(ref_p))["integrity"]
bad = []
try:
    chk = json.load(open(chk_p))
    rep = json.loads(open(rep_p).read().splitlines()[-1])
except Exception as x:  # noqa: BLE001
    print("%s: unreadable output: %s" % (label, x))
    sys.exit(0)
for name, rec in (("check", chk), ("replay", rep)):
    i = rec.get("integrity", {})
    if i.get("hash_mismatch") != want["mismatch"]:
        bad.append("%s: hash_mismatch %r, expected %d (hashlib)" % (name, i.get("hash_mismatch"), want["mismatch"]))
    if i.get("hash_checked") != want["checked"]:
        bad.append("%s: hash_checked %r, expected %d in-window assignments" % (name, i.get("hash_checked"), want["checked"]))
if (ref.get("hash_mismatch"), ref.get("hash_checked")) != (want["mismatch"], want["checked"]):
    bad.append("estimates_ref.py counts %r/%r, the log was built with %r/%r"
               % (ref.get("hash_mismatch"), ref.get("hash_checked"), want["mismatch"], want["checked"]))
i = chk.get("integrity", {})
reasons = {r["check"]: r["severity"] for r in i.get("reasons", [])}
if variant == "sound":
    if "hash" in reasons:
        bad.append("a hash reason on a sound log: %r" % i["reasons"])
    if i.get("verdict") != "sound" or rc != "0":
        bad.append("verdict %r, exit %s; expected sound, 0 (reasons %r)" % (i.get("verdict"), rc, reasons))
else:
    if reasons.get("hash") != "fail":
        bad.append("no hash reason of severity fail: %r" % reasons)
    if i.get("verdict") != "failed" or rc != "3":
        bad.append("verdict %r, exit %s; expected failed, 3" % (i.get("verdict"), rc))
for b in bad:
    print("%s: %s" % (label, b))
EOF
)
        [ -z "$out" ] || { printf '%s\n' "$out"; fail=1; }
    done
done

[ "$fail" -eq 0 ] && echo "0120-hash-recheck: ok"
exit "$fail"
