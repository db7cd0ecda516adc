#!/bin/sh
# Runs every cmocka binary in $1/tests and every command-line test in
# tests/cli/*.sh, then prints one closing line "tests: N passed, M failed".
# A cmocka binary counts its own tests; a command-line script counts as one.
BUILD=${1:-build}
pass=0
fail=0
failed=""
export ABTALLY="$PWD/$BUILD/abtally"
export CMOCKA_MESSAGE_OUTPUT=stdout
# a test that hangs fails instead (generous: the sanitizer build is several times slower)
TIMEOUT=""
command -v timeout > /dev/null && TIMEOUT="timeout ${ABTALLY_TEST_TIMEOUT:-900}"
for t in "$BUILD"/tests/test_*; do
    [ -x "$t" ] || continue
    out=$($TIMEOUT "$t" 2>&1)
    rc=$?
    [ "$rc" -eq 124 ] && out="$out
[  ERROR   ] $(basename "$t"): timed out after ${ABTALLY_TEST_TIMEOUT:-900} s"
    printf '%s\n' "$out" | grep -E '^\[ *(PASSED|FAILED|  FAILED|==========) *\]|^\[  ERROR|^\[  FAILED' | sed "s|^|$(basename "$t"): |"
    n=$(printf '%s\n' "$out" | sed -n 's/^\[  PASSED  \] \([0-9]*\) test.*/\1/p' | awk '{s+=$1} END {print s+0}')
    f=$(printf '%s\n' "$out" | sed -n 's/^\[  FAILED  \] \([0-9]*\) test.*/\1/p' | awk '{s+=$1} END {print s+0}')
    pass=$((pass + n))
    if [ "$rc" -ne 0 ] || [ "$f" -ne 0 ]; then
        [ "$f" -eq 0 ] && f=1
        fail=$((fail + f))
        failed="$failed $(basename "$t")"
        printf '%s\n' "$out" | sed 's/^/    /' | tail -40
    fi
done
for s in tests/cli/*.sh; do
    [ -f "$s" ] || continue
    if out=$(sh "$s" 2>&1); then
        pass=$((pass + 1))
        echo "cli: PASS $(basename "$s")"
    else
        fail=$((fail + 1))
        failed="$failed $(basename "$s")"
        echo "cli: FAIL $(basename "$s")"
        printf '%s\n' "$out" | sed 's/^/    /' | tail -40
    fi
done
[ -n "$failed" ] && echo "failed:$failed"
echo "tests: $pass passed, $fail failed"
[ "$fail" -eq 0 ]
