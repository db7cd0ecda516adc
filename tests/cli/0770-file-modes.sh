#!/bin/sh
# Files that may hold personal data are created readable by their owner
# only, whatever the umask: snapshot files (0600) and their directory
# (0700), the quarantine of rejected lines (0600, it keeps lines verbatim),
# a merged state (0600), and what 'check --state' records in the state
# directory (0600). Run with umask 000, so only the modes abtally asks for
# count.
set -eu
. tests/cli-lib.sh
make_log 3000
umask 000
mode() { stat -c %a "$1"; }
"$A" replay --config "$T/exp.json" --final-only --save-state "$T/st" --quarantine "$T/q.tsv" \
    "$T/log.jsonl" > /dev/null
[ "$(mode "$T/st")" = 700 ] || fail "state directory mode $(mode "$T/st"), not 700"
[ "$(mode "$T/st/replay-0-of-1.abstate")" = 600 ] || fail "state file mode $(mode "$T/st/replay-0-of-1.abstate"), not 600"
[ -s "$T/q.tsv" ] || fail "no rejected line reached the quarantine"
[ "$(mode "$T/q.tsv")" = 600 ] || fail "quarantine mode $(mode "$T/q.tsv"), not 600"
"$A" merge --config "$T/exp.json" --out "$T/merged.abstate" "$T/st" > /dev/null
[ "$(mode "$T/merged.abstate")" = 600 ] || fail "merged state mode $(mode "$T/merged.abstate"), not 600"
"$A" check --config "$T/exp.json" --state "$T/st" > /dev/null || [ $? -eq 3 ] || fail "check --state failed"
for f in "$T"/st/*; do
    [ "$(mode "$f")" = 600 ] || fail "$(basename "$f") in the state directory has mode $(mode "$f"), not 600"
done
echo "ok ($(ls "$T/st" | tr '\n' ' '))"
