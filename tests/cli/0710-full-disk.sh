#!/bin/sh
# A full disk during a snapshot: a 1 MiB tmpfs is the state directory; a
# small state fits, then a larger one (about 3 MB) cannot be written. The
# replay must fail (exit 1) with one clear error naming the snapshot file and
# the cause, the previous snapshot must be intact (byte for byte, and it
# still loads), and no temporary or partial file may be left behind.
# Needs root to mount the tmpfs; skipped with a message otherwise.
set -eu
. tests/cli-lib.sh
M=$T/small
mkdir -p "$M"
if ! mount -t tmpfs -o size=1m,mode=0700 abtally-test "$M" 2>/dev/null; then
    echo "skip: cannot mount a tmpfs here (needs root and mount permission)"
    exit 0
fi
trap 'umount "$M" 2>/dev/null || umount -l "$M" 2>/dev/null; cleanup' EXIT
cat > "$T/exp.json" <<'JSON'
{"experiment":"tea-banner","arms":[{"name":"control","weight":1},{"name":"treatment","weight":1}],
 "window":{"start":"2026-11-02T00:00:00Z","end":"2026-11-20T00:00:00Z"},
 "metrics":[{"name":"cups","type":"mean","event":"cup"}]}
JSON
gen() {
    awk -v n="$1" 'BEGIN { for (i = 0; i < n; i++)
      printf "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:%02d:%02dZ\",\"unit\":\"u%d\",\"exp\":\"tea-banner\",\"arm\":\"%s\",\"id\":\"a%d\"}\n", (i / 60) % 60, i % 60, i, (i % 2 ? "treatment" : "control"), i }'
}
gen 2000 > "$T/small.jsonl"
gen 60000 > "$T/big.jsonl"
S=$M/st
F=$S/replay-0-of-1.abstate
"$A" replay --config "$T/exp.json" --final-only --save-state "$S" "$T/small.jsonl" > "$T/small.out" ||
    fail "the small state does not fit"
cp "$F" "$T/before.abstate"
rc=0
"$A" replay --config "$T/exp.json" --final-only --save-state "$S" "$T/big.jsonl" > "$T/big.out" 2> "$T/big.err" || rc=$?
[ "$rc" -eq 1 ] || fail "a full disk gave exit $rc, not 1"
[ "$(wc -l < "$T/big.err")" -eq 1 ] || fail "expected one error line, got: $(cat "$T/big.err")"
grep -q "replay-0-of-1.abstate" "$T/big.err" || fail "the error does not name the file: $(cat "$T/big.err")"
grep -q "No space left on device" "$T/big.err" || fail "the error does not name the cause: $(cat "$T/big.err")"
grep -q "previous snapshot is kept" "$T/big.err" || fail "the error does not say the old state is kept: $(cat "$T/big.err")"
cmp -s "$F" "$T/before.abstate" || fail "the previous snapshot changed"
[ "$(ls -A "$S")" = "replay-0-of-1.abstate" ] || fail "files left behind: $(ls -A "$S")"
"$A" check --config "$T/exp.json" --state "$S" --no-record --format json > "$T/check.json" || [ $? -eq 3 ] ||
    fail "the previous snapshot no longer loads"
python3 -c 'import json,sys; assert json.load(open(sys.argv[1]))["integrity"]["lines_read"] == 2000' "$T/check.json" ||
    fail "the previous snapshot reads back wrong"
cat "$T/big.err" | sed "s|$T/||"
echo ok
