#!/bin/sh
# Runs each libFuzzer harness named on the command line for $FUZZ_SECONDS
# seconds (default 60), on a working corpus in $1/corpus/<target> seeded from
# fixtures/fuzz/<target>/. Any crash, leak, timeout (>20 s per input),
# out-of-memory (>2 GB) or sanitizer report fails the run; the input that
# caused it is kept as $1/artifacts/<target>-crash-... and its report shown.
# Prints one summary line per target: executions, coverage, corpus size.
set -u
B=$1
shift
SECS=${FUZZ_SECONDS:-60}
mkdir -p "$B/artifacts" "$B/logs"
failed=""
for t in "$@"; do
    name=${t#fuzz_}
    seeds=fixtures/fuzz/$name
    mkdir -p "$B/corpus/$name"
    dict=""
    [ -f "fuzz/$name.dict" ] && dict="-dict=fuzz/$name.dict"
    maxlen=""
    [ -f "fuzz/$name.maxlen" ] && maxlen="-max_len=$(cat "fuzz/$name.maxlen")"
    log=$B/logs/$name.log
    # shellcheck disable=SC2086
    ASAN_OPTIONS=detect_leaks=1:abort_on_error=1:symbolize=1 \
    UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 \
    "$B/$t" -max_total_time="$SECS" -error_exitcode=77 -timeout=20 -rss_limit_mb=2048 \
        -print_final_stats=1 -artifact_prefix="$B/artifacts/$name-" $dict $maxlen \
        "$B/corpus/$name" "$seeds" > "$log" 2>&1
    rc=$?
    execs=$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" | tail -n 1)
    last=$(grep -E '^#[0-9]+' "$log" | tail -n 1)
    cov=$(printf '%s\n' "$last" | sed -n 's/.*cov: \([0-9]*\).*/\1/p')
    ft=$(printf '%s\n' "$last" | sed -n 's/.*ft: \([0-9]*\).*/\1/p')
    corp=$(printf '%s\n' "$last" | sed -n 's/.*corp: \([0-9]*\).*/\1/p')
    if [ "$rc" -eq 0 ]; then
        echo "fuzz: PASS $name: ${execs:-?} runs in ${SECS}s, coverage ${cov:-?} edges, ${ft:-?} features, corpus ${corp:-?}"
    else
        echo "fuzz: FAIL $name (exit $rc); log $log; artifacts:"
        ls "$B/artifacts" | grep "^$name-" | sed "s|^|    $B/artifacts/|"
        grep -E 'ERROR|SUMMARY|runtime error|invariant|differs|refused|==[0-9]+==' "$log" | head -n 30 | sed 's/^/    /'
        failed="$failed $name"
    fi
done
if [ -n "$failed" ]; then
    echo "fuzz: failed:$failed"
    exit 1
fi
echo "fuzz: all ${#} targets clean"
