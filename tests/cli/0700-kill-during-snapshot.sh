#!/bin/sh
# SIGKILL while a snapshot is being written: the previous snapshot stays
# loadable. A state of 200,000 units (about 24 MB) is saved by 'replay
# --save-state'; then, four times, a replay of a longer log starts writing a
# new snapshot over it and is killed with SIGKILL the moment its temporary
# file appears (mid-write). Each time the directory must still load ('check
# --state'), and the snapshot under the real name must be either the
# previous one, byte for byte, or the complete new one (if the kill came
# after the rename) — never a mix. The hidden temporary file a kill leaves
# behind is ignored by every reader.
set -eu
. tests/cli-lib.sh
cat > "$T/exp.json" <<'JSON'
{"experiment":"tea-banner","arms":[{"name":"control","weight":1},{"name":"treatment","weight":1}],
 "window":{"start":"2026-11-02T00:00:00Z","end":"2026-11-20T00:00:00Z"},
 "metrics":[{"name":"cups","type":"mean","event":"cup","attribution_hours":72},
            {"name":"bought","type":"binary","event":"cup"},
            {"name":"cups_per_visit","type":"ratio","numerator":"cup","denominator":"visit"}]}
JSON
# an invented log: one assignment and one outcome (both with ids) per unit
awk -v n=200000 'BEGIN { for (i = 0; i < n; i++) { s = 86400 + int(i * 86400 / n);
  h = int(s % 86400 / 3600); m = int(s % 3600 / 60);
  printf "{\"kind\":\"assign\",\"time\":\"2026-11-02T%02d:%02d:%02dZ\",\"unit\":\"u%d\",\"exp\":\"tea-banner\",\"arm\":\"%s\",\"id\":\"a%d\"}\n", h, m, s % 60, i, (i % 2 ? "treatment" : "control"), i;
  printf "{\"kind\":\"outcome\",\"time\":\"2026-11-02T%02d:%02d:%02dZ\",\"unit\":\"u%d\",\"metric\":\"cup\",\"value\":%d,\"id\":\"c%d\"}\n", h, m, s % 60, i, i % 7, i } }' > "$T/log.jsonl"
total=$(wc -l < "$T/log.jsonl")
S=$T/st
F=$S/replay-0-of-1.abstate
head -n $((total / 2)) "$T/log.jsonl" > "$T/part.jsonl"
"$A" replay --config "$T/exp.json" --final-only --save-state "$S" "$T/part.jsonl" > /dev/null
[ -f "$F" ] || fail "no first snapshot"
[ "$(stat -c %s "$F")" -gt 10000000 ] || fail "the state is too small to be written slowly: $(stat -c %s "$F") bytes"
# lines_read of the state in DIR
lines_of() {
    "$A" check --config "$T/exp.json" --state "$1" --no-record --format json > "$T/check.json" 2> "$T/check.err" ||
        [ $? -eq 3 ] || fail "the state no longer loads: $(cat "$T/check.err")"
    python3 -c 'import json,sys; print(json.load(open(sys.argv[1]))["integrity"]["lines_read"])' "$T/check.json"
}
hits=0
cur=$((total / 2))
for k in 1 2 3 4; do
    cp "$F" "$T/prev.abstate"
    n=$((total / 2 + k * total / 10))
    head -n "$n" "$T/log.jsonl" > "$T/part.jsonl"
    "$A" replay --config "$T/exp.json" --final-only --save-state "$S" "$T/part.jsonl" > /dev/null 2>&1 &
    R=$!
    PIDS="$PIDS $R"
    # wait (busy, up to ~60 s) for a new temporary file, then kill at once
    before=$(ls -a "$S" | grep -c '\.tmp$' || true)
    i=0
    while [ "$(ls -a "$S" | grep -c '\.tmp$' || true)" -le "$before" ]; do
        i=$((i + 1))
        kill -0 "$R" 2>/dev/null || break
        [ "$i" -gt 60000 ] && fail "no temporary file appeared"
    done
    kill -KILL "$R" 2>/dev/null || true
    wait "$R" 2>/dev/null || true
    got=$(lines_of "$S")
    if [ "$(ls -a "$S" | grep -c '\.tmp$' || true)" -gt "$before" ]; then
        # killed before the rename: the old snapshot, untouched
        hits=$((hits + 1))
        cmp -s "$F" "$T/prev.abstate" || fail "round $k: killed mid-write, but the snapshot changed"
        [ "$got" -eq "$cur" ] || fail "round $k: the previous snapshot reads back $got lines, not $cur"
    else
        # killed after the rename (or finished): the complete new snapshot
        [ "$got" -eq "$n" ] || fail "round $k: the snapshot holds $got lines, not the new $n"
        cur=$n
    fi
done
[ "$hits" -ge 1 ] || fail "no kill landed while a snapshot was being written (0 of 4)"
# merge reads the directory too, ignoring the leftover temporary files
"$A" merge --config "$T/exp.json" "$S" > /dev/null 2> "$T/merge.err" || fail "merge: $(cat "$T/merge.err")"
echo "ok ($hits of 4 kills landed mid-write)"
