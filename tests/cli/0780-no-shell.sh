#!/bin/sh
# No shell is ever invoked by abtally itself: the binary imports none of the
# C library's ways to run a program (system, popen, the exec family,
# posix_spawn, fork). Checked on the dynamic symbols the binary needs (its
# own code is linked in whole, so every call it could make is listed there).
set -eu
. tests/cli-lib.sh
command -v nm > /dev/null || { echo "skip: nm not installed"; exit 0; }
nm -D --undefined-only "$A" | awk '{print $NF}' | sed 's/@.*//' > "$T/imports"
[ -s "$T/imports" ] || fail "no dynamic symbols found in $A"
grep -q '^fopen' "$T/imports" || fail "the symbol list looks wrong (no fopen)"
bad=$(grep -E '^(system|popen|execl|execle|execlp|execv|execve|execvp|execvpe|fexecve|posix_spawn|posix_spawnp|fork|vfork|clone|wordexp)$' "$T/imports" || true)
[ -z "$bad" ] || fail "abtally imports: $(echo "$bad" | tr '\n' ' ')"
echo ok
