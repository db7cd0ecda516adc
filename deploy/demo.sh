#!/bin/sh
# make demo: replays the bundled invented log of a fictional bakery's
# checkout experiment and prints the final summary.
set -eu
BUILD=${1:-build}
case=fixtures/replay/bakery
if [ ! -f "$case/input.jsonl" ]; then
    echo "demo: $case/input.jsonl is missing" >&2
    exit 1
fi
echo "== abtally replay on $case/input.jsonl (an invented shop's experiment)"
"$BUILD/abtally" replay --config "$case/config.json" --final-only "$case/input.jsonl"
