#!/bin/sh
# abtally srm: the sample-ratio mismatch test from counts, its JSON output and
# its usage errors. Reference values: SciPy 1.10.1 (/usr/bin/python3), e.g.
#   scipy.stats.chisquare([600, 400], [500, 500])
#     -> statistic 40.0, pvalue 2.5396285894708634e-10
#   scipy.stats.chisquare([5100, 2400, 2500], [5000, 2500, 2500])
#     -> statistic 6.0, pvalue 0.04978706836786395
#   scipy.stats.chisquare([50210, 30480, 19310], [50000, 30000, 20000])
#     -> statistic 32.367, pvalue 9.366886376406722e-08
#   scipy.stats.binomtest(1, 9, 0.5).pvalue -> 0.0390625
# Run with $ABTALLY pointing at the binary; exit 0 = pass.
set -u
ABTALLY=${ABTALLY:-build/abtally}
tmp=$(mktemp -d) || exit 1
trap 'rm -rf "$tmp"' EXIT
fails=0

fail() {
    echo "FAIL: $*"
    fails=$((fails + 1))
}

# json_field JSON KEY: the raw value of KEY in a flat JSON object.
json_field() {
    printf '%s\n' "$1" | sed -n "s/.*\"$2\":\([^,}]*\).*/\1/p"
}

# close ACTUAL EXPECTED RELTOL: succeeds when |a - e| <= tol * |e|.
close() {
    awk -v a="$1" -v e="$2" -v t="$3" 'BEGIN {
        if (a == "" || a == "null") exit 1
        d = a - e; if (d < 0) d = -d
        m = e < 0 ? -e : e
        exit !(d <= t * m)
    }'
}

# check_json "ARGS" chi2 df p test
check_json() {
    args=$1
    # shellcheck disable=SC2086
    out=$("$ABTALLY" srm $args --json 2>"$tmp/err")
    rc=$?
    [ "$rc" -eq 0 ] || fail "srm $args --json: exit $rc ($(cat "$tmp/err"))"
    close "$(json_field "$out" chi2)" "$2" 1e-12 || fail "srm $args: chi2 in '$out', expected $2"
    [ "$(json_field "$out" df)" = "$3" ] || fail "srm $args: df in '$out', expected $3"
    close "$(json_field "$out" p)" "$4" 1e-10 || fail "srm $args: p in '$out', expected $4"
    [ "$(json_field "$out" test)" = "\"$5\"" ] || fail "srm $args: test in '$out', expected $5"
}

check_json "600 400" 40 1 2.5396285894708634e-10 chi2
check_json "5100 2400 2500 --weights 0.5,0.25,0.25" 6 2 0.04978706836786395 chi2
check_json "5100 2400 2500 --weights 0.5 0.25 0.25" 6 2 0.04978706836786395 chi2
check_json "50210 30480 19310 -w 5 3 2" 32.367 2 9.366886376406722e-08 chi2
check_json "1 8" 5.4444444444444446 1 0.0390625 binomial

# the JSON is one object that starts with the contract's fields
out=$("$ABTALLY" srm 600 400 --json)
case $out in
'{"chi2":40,"df":1,"p":'*'}') ;;
*) fail "srm 600 400 --json printed '$out'" ;;
esac
[ "$(json_field "$out" alarm)" = true ] || fail "600/400 should raise the alarm: '$out'"

# the readable default
out=$("$ABTALLY" srm 5100 2400 2500 --weights 0.5,0.25,0.25) || fail "text output: exit $?"
printf '%s\n' "$out" | grep -q '^p  *0.0498 (chi-square test)$' || fail "text output: '$out'"
printf '%s\n' "$out" | grep -q '^verdict  *no mismatch' || fail "text output verdict: '$out'"

# no units: the numbers are null, not garbage
out=$("$ABTALLY" srm 0 0 --json) || fail "srm 0 0: exit $?"
[ "$(json_field "$out" p)" = null ] || fail "srm 0 0: '$out'"

# --help teaches with an example and exits 0
"$ABTALLY" srm --help >"$tmp/help" || fail "--help: exit $?"
grep -q 'example' "$tmp/help" || fail "--help has no example"
"$ABTALLY" srm --version | grep -q '^abtally ' || fail "--version"

# usage errors: exit 2, one line "abtally: srm: ..." on stderr, nothing on stdout
for args in "600" "600 400 --bogus" "600 400 --weights" "600 400 --weights 1 1 1"; do
    # shellcheck disable=SC2086
    "$ABTALLY" srm $args >"$tmp/out" 2>"$tmp/err"
    rc=$?
    [ "$rc" -eq 2 ] || fail "srm $args: exit $rc, expected 2"
    [ "$(wc -l <"$tmp/err")" -eq 1 ] || fail "srm $args: stderr is not one line: $(cat "$tmp/err")"
    grep -q '^abtally: srm: ' "$tmp/err" || fail "srm $args: message '$(cat "$tmp/err")'"
    [ -s "$tmp/out" ] && fail "srm $args: wrote to stdout"
done

# bad numbers: exit 1, one line
for args in "600 -400" "600 4.5" "600 abc" "600 400 --weights 1,0" "600 400 --threshold 2"; do
    # shellcheck disable=SC2086
    "$ABTALLY" srm $args >"$tmp/out" 2>"$tmp/err"
    rc=$?
    [ "$rc" -eq 1 ] || fail "srm $args: exit $rc, expected 1"
    [ "$(wc -l <"$tmp/err")" -eq 1 ] || fail "srm $args: stderr is not one line: $(cat "$tmp/err")"
    grep -q '^abtally: srm: ' "$tmp/err" || fail "srm $args: message '$(cat "$tmp/err")'"
done

[ "$fails" -eq 0 ]
