#!/bin/sh
# The core does no I/O and never ends the process: its files may not name
# Kafka, stdio streams, printing, exit or abort (snprintf into memory is fine).
# Adapters (source, state, engine, render, kafka, sig, cmd_*) are not checked.
set -eu
cd "$(dirname "$0")/.."
CORE="moments ledger bigmem timefmt hash stats seq seqrun readout report rebucket simulate"
bad=0
for m in $CORE; do
    f=src/$m.c
    [ -f "$f" ] || continue
    # strip comments and string literals roughly: look at code lines only
    hits=$(sed -e 's|/\*.*\*/||g' -e 's|"[^"]*"|""|g' "$f" |
        grep -nE 'rdkafka\.h|\bFILE\b|(^|[^sn])printf *\(|\bfputs\b|\bfwrite\b|\bfopen\b|\bexit *\(|\babort *\(|\bgetenv\b' || true)
    if [ -n "$hits" ]; then
        echo "check-layering: $f does I/O or ends the process:" >&2
        echo "$hits" | sed 's/^/    /' >&2
        bad=1
    fi
done
[ "$bad" -eq 0 ] && echo "check-layering: the core ($CORE) does no I/O"
exit "$bad"
