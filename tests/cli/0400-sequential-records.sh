#!/bin/sh
# Sequential monitoring in the records of replay.
#  - spending: the looks taken at every day of event time, each bound frozen
#    when taken, equal the bounds 'abtally plan --fractions' computes for the
#    same fractions (both are checked against R's rpact 3.3.4 in test_seq and
#    0300-plan.sh); a metric is "crossed" exactly when |z| reached the bound of
#    a look, and stays crossed;
#  - mixture: the always-valid p never rises and the always-valid interval
#    only narrows from record to record (running minimum and intersection);
#  - sequence: the confidence sequence likewise only narrows.
set -eu
. tests/cli-lib.sh
"$A" simulate -q --units 12000 --days 10 --seed 11 --conversion 0.25 --effect order_value=0.4 \
    --config-out "$T/base.json" --out "$T/log.jsonl"
python3 - "$T" <<'PY'
import json, sys
t = sys.argv[1]
c = json.load(open(t + "/base.json"))
# planned below the units the log holds: the fraction reaches 1 before the end
c["sequential"] = {"method": "spending", "shape": "obf", "planned_units": 10000}
json.dump(c, open(t + "/spend.json", "w"))
c["sequential"] = {"method": "mixture", "planned_units": 12000}
json.dump(c, open(t + "/mix.json", "w"))
c["sequential"] = {"method": "sequence", "planned_units": 12000}
json.dump(c, open(t + "/seq.json", "w"))
PY
"$A" replay --config "$T/spend.json" "$T/log.jsonl" > "$T/spend.out"
tail -n 1 "$T/spend.out" | python3 -c '
import json, sys
r = json.loads(sys.stdin.read())
print(",".join("%.17g" % l["fraction"] for l in r["looks"]))' > "$T/fractions"
grep -q ',1$' "$T/fractions" || fail "the looks did not reach fraction 1: $(cat "$T/fractions")"
"$A" plan --fractions "$(cat "$T/fractions")" --spending obf --alpha 0.05 --json > "$T/plan.json"
python3 - "$T/spend.out" "$T/plan.json" <<'PY' || fail "spending looks"
import json, sys
recs = [json.loads(l) for l in open(sys.argv[1])]
plan = json.load(open(sys.argv[2]))
looks = recs[-1]["looks"]
assert len(looks) == len(plan["looks"]) >= 3, (len(looks), len(plan["looks"]))
for a, b in zip(looks, plan["looks"]):
    assert abs(a["z"] - b["z"]) < 1e-9, (a, b)
    assert abs(a["alpha_cumulative"] - b["alpha_cumulative"]) < 1e-12, (a, b)
bound_at = {l["time"]: l["z"] for l in looks}
crossed = {}
for r in recs:
    for m in r["metrics"]:
        key = (m["metric"], m["arm"])
        if crossed.get(key):
            assert m["verdict"].startswith("crossed"), ("a crossing must stand", key, r["time"])
        if r["time"] in bound_at and m["verdict"] != "burn-in" and m["z"] is not None:
            hit = abs(m["z"]) >= bound_at[r["time"]]
            if hit:
                crossed[key] = True
            if not crossed.get(key):
                assert m["verdict"] == "running", (key, r["time"], m)
            else:
                assert m["verdict"].startswith("crossed"), (key, r["time"], m)
# the simulated 40% effect on order value is found
assert crossed.get(("order_value", "treatment")), "order_value did not cross"
PY
for method in mix seq; do
    "$A" replay --config "$T/$method.json" "$T/log.jsonl" > "$T/$method.out"
    python3 - "$T/$method.out" "$method" <<'PY' || fail "$method records"
import json, sys
recs = [json.loads(l) for l in open(sys.argv[1])]
key = "cs" if sys.argv[2] == "seq" else "ci_always"
prev = {}
for r in recs:
    for m in r["metrics"]:
        k = (m["metric"], m["arm"])
        lo, hi = m[key]
        lo = float("-inf") if lo is None else lo
        hi = float("inf") if hi is None else hi
        p = m["p_always"]
        if k in prev:
            plo, phi, pp = prev[k]
            assert lo >= plo and hi <= phi, ("the interval widened", k, r["time"])
            assert p <= pp, ("the always-valid p rose", k, r["time"])
        prev[k] = (lo, hi, p)
final = recs[-1]["metrics"][0]
assert final["metric"] == "order_value" and final[key][0] > 0, final
assert final["verdict"] == "crossed-upper", final
PY
done
echo ok
