#!/bin/sh
# 50 MB of random bytes (fixed seed) as input to replay: every line is
# rejected and counted (accepted 0; rejected = lines read = the number of
# newline-separated lines), every line reaches the quarantine with its
# reason, memory stays bounded (peak RSS under 200 MB) and the exit status
# is 0.
set -eu
. tests/cli-lib.sh
make_log 10 # only the config is used
python3 - "$T/random.bin" <<'PY'
import random, sys
data = random.Random(20261103).randbytes(50 * 1024 * 1024)
open(sys.argv[1], "wb").write(data)
PY
python3 - "$A" "$T" <<'PY' || fail "random input"
import json, resource, subprocess, sys
A, T = sys.argv[1], sys.argv[2]
data = open(T + "/random.bin", "rb").read()
lines = data.count(b"\n") + (0 if data.endswith(b"\n") else 1)
with open(T + "/out.json", "wb") as out, open(T + "/err.txt", "wb") as err:
    rc = subprocess.call([A, "replay", "--config", T + "/exp.json", "--final-only",
                          "--quarantine", T + "/quarantine.tsv", T + "/random.bin"], stdout=out, stderr=err)
peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
assert rc == 0, ("exit", rc, open(T + "/err.txt").read())
s = json.load(open(T + "/out.json"))
i = s["integrity"]
rejected = sum(i["rejected"].values())
assert i["lines_read"] == lines, ("lines_read", i["lines_read"], "lines", lines)
assert i["accepted"] == 0, ("accepted", i["accepted"])
assert rejected == lines, ("rejected", rejected, "lines", lines)
q = 0
with open(T + "/quarantine.tsv", "rb") as f:
    for row in f:
        q += 1
assert q == lines, ("quarantined", q, "lines", lines)
limit = 200
assert peak_mb < limit, ("peak RSS MB", peak_mb)
print("ok: %d lines, all rejected (%s), peak RSS %.0f MB" %
      (lines, ", ".join("%s %d" % kv for kv in sorted(i["rejected"].items()) if kv[1]), peak_mb))
PY
