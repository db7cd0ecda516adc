#!/bin/sh
# Extreme values are data, not crashes: 1e308 and -0 as values (accepted;
# the sums stay finite where they can, and 1e400 is not_finite), a 100 KB
# unit id (accepted, joined like any other), invalid UTF-8 and deeply nested
# JSON (100,000 '[': not_json, no stack overflow), a line just over the 1 MiB
# limit (too_long), times at the edges of the accepted years. A config with
# thousands of arms is refused with an error naming the limit of 64 arms.
set -eu
. tests/cli-lib.sh
make_log 10 # only the config is used
python3 - "$T/in.jsonl" <<'PY'
import sys
big = "u" + "x" * 100 * 1024
L = []
def ev(kind, unit, t="2026-11-05T10:00:00Z", **kw):
    fields = ['"kind":"%s"' % kind, '"time":"%s"' % t, '"unit":"%s"' % unit]
    fields += ['"%s":%s' % (k, v) for k, v in kw.items()]
    return "{" + ",".join(fields) + "}"
L.append(ev("assign", big, exp='"tea-banner"', arm='"treatment"'))
L.append(ev("outcome", big, "2026-11-05T11:00:00Z", metric='"cup"', value="1e308"))
L.append(ev("outcome", big, "2026-11-05T11:00:01Z", metric='"visit"', value="-0"))
L.append(ev("assign", "u-small", exp='"tea-banner"', arm='"control"'))
L.append(ev("outcome", "u-small", "2026-11-05T12:00:00Z", metric='"cup"', value="-0.0"))
L.append(ev("outcome", "u-small", "2026-11-05T12:00:00Z", metric='"cup"', value="-1e308"))
L.append(ev("outcome", "u-small", "2026-11-05T12:00:00Z", metric='"cup"', value="4.9e-324"))
L.append(ev("outcome", "u-small", "2026-11-05T12:00:00Z", metric='"cup"', value="1e400"))      # not_finite
L.append(ev("outcome", "u-small", "2026-11-05T12:00:00Z", metric='"cup"', value="-1e400"))     # not_finite
L.append(ev("outcome", "u-small", "1900-01-01T00:00:00Z", metric='"cup"'))                     # accepted, pre-period
L.append(ev("outcome", "u-small", "9999-12-31T23:59:59Z", metric='"cup"'))              # accepted
L.append(ev("outcome", "u-small", "1899-12-31T23:59:59Z", metric='"cup"'))                     # bad_time
L.append(ev("outcome", "u-small", "10000-01-01T00:00:00Z", metric='"cup"'))                    # bad_time
L.append('{"kind":"outcome","time":1e308,"unit":"u1","metric":"cup"}')                         # bad_time
L.append('{"kind":"outcome","time":-0,"unit":"u1","metric":"cup"}')                            # accepted: 1970
L.append('{"kind":"outcome","time":"2026-11-05T12:00:00Z","unit":"u\xff\xfe","metric":"cup"}')  # not_json (bytes below)
L.append("[" * 100000)                                                                         # not_json
L.append('{"a":' * 100000)                                                                     # not_json
L.append('{"kind":"outcome","time":"2026-11-05T12:00:00Z","unit":"u1","metric":"cup","pad":"' + "p" * (1024 * 1024) + '"}')  # too_long
L.append('{"kind":"outcome","time":"2026-11-05T12:00:00Z","unit":"u\\ud800","metric":"cup"}')  # lone surrogate: not_json
with open(sys.argv[1], "wb") as f:
    for l in L:
        f.write(l.encode("utf-8", "surrogateescape") if "\xff" not in l else
                l.replace("\xff\xfe", "").encode().replace(b'"u"', b'"u\xff\xfe"'))
        f.write(b"\n")
PY
"$A" replay --config "$T/exp.json" --final-only --quarantine "$T/q.tsv" "$T/in.jsonl" > "$T/out.json" 2> "$T/err" ||
    fail "replay: exit $?: $(cat "$T/err")"
python3 - "$T/out.json" "$T/q.tsv" <<'PY' || fail "extreme values"
import json, sys
def no_constant(c):
    raise ValueError("not JSON: " + c)
s = json.loads(open(sys.argv[1]).read(), parse_constant=no_constant)  # no NaN or Infinity
i = s["integrity"]
r = {k: v for k, v in i["rejected"].items() if v}
assert i["lines_read"] == 20, i["lines_read"]
assert r == {"not_finite": 2, "bad_time": 3, "not_json": 4, "too_long": 1}, r
assert i["accepted"] == 10, i["accepted"]
assert s["units"] == {"control": 1, "treatment": 1}, s["units"]
m = {(x["metric"], x["arm"]): x for x in s["metrics"]}
cups = m[("cups", "treatment")]
assert cups["mean"] == 1e308, cups          # the 100 KB unit's 1e308 cup
assert cups["control_mean"] is None or cups["control_mean"] <= 0, cups
reasons = [l.split(b"\t")[2] for l in open(sys.argv[2], "rb")]
assert len(reasons) == 10, len(reasons)
print("ok:", r)
PY
# thousands of arms: refused, naming the limit
python3 -c '
import json
print(json.dumps({"experiment": "many", "arms": [{"name": "a%d" % i, "weight": 1} for i in range(5000)],
  "window": {"start": "2026-11-02T00:00:00Z", "end": "2026-11-09T00:00:00Z"},
  "metrics": [{"name": "m", "type": "mean", "event": "e"}]}))' > "$T/many.json"
rc=0
"$A" replay --config "$T/many.json" "$T/in.jsonl" > /dev/null 2> "$T/err" || rc=$?
[ "$rc" -eq 1 ] || fail "5000 arms: exit $rc, not 1"
grep -q "key 'arms': has 5000 arms; the limit is 64" "$T/err" || fail "5000 arms: unclear error: $(cat "$T/err")"
# a config nested 100,000 deep: refused, no crash
python3 -c 'print("[" * 100000)' > "$T/deep.json"
rc=0
"$A" replay --config "$T/deep.json" "$T/in.jsonl" > /dev/null 2> "$T/err" || rc=$?
[ "$rc" -eq 1 ] || fail "a deeply nested config: exit $rc, not 1"
echo ok
