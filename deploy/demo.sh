#!/bin/sh
# make demo: abtally end to end on invented data, with the embedded broker.
#  1. starts 'abtally broker' (a Kafka-protocol broker on loopback);
#  2. simulates a two-week checkout experiment of Greenmoss, an invented
#     online plant nursery: the new checkout raises order value by 12%, and
#     from day 9 on, 30% of the treatment's assignment events are lost;
#  3. publishes the log, keyed by unit;
#  4. runs 'abtally watch --drain' (state in build/demo/state);
#  5. prints the terminal readout and writes the HTML readout;
#  6. stops the broker.
set -eu
BUILD=${1:-build}
A="$BUILD/abtally"
D="$BUILD/demo"
rm -rf "$D"
mkdir -p "$D"
BROKER=""
stop_broker() {
    [ -n "$BROKER" ] && kill -TERM "$BROKER" 2>/dev/null && wait "$BROKER" 2>/dev/null
    BROKER=""
}
trap stop_broker EXIT INT TERM

step() { printf '\n\033[1m== %s\033[0m\n' "$*"; }

step "1. starting the embedded broker (topic 'events', 6 partitions)"
"$A" broker --topic events:6 > "$D/bootstrap" 2> "$D/broker.log" &
BROKER=$!
i=0
while [ ! -s "$D/bootstrap" ]; do
    i=$((i + 1))
    [ "$i" -gt 100 ] && { echo "demo: the broker did not start:" >&2; cat "$D/broker.log" >&2; exit 1; }
    sleep 0.1
done
BS=$(head -n 1 "$D/bootstrap")
echo "broker at $BS"

step "2. simulating 14 days of Greenmoss's checkout experiment"
"$A" simulate --units 15000 --days 14 --seed 5 --conversion 0.25 \
    --effect order_value=0.12 \
    --fault lose-assign:treatment:0.3:9 \
    --config-out "$D/experiment.json" --out "$D/events.jsonl"
echo "log: $D/events.jsonl ($(wc -l < "$D/events.jsonl") lines); config: $D/experiment.json"

step "3. publishing the log into the topic, keyed by unit"
"$A" publish --brokers "$BS" --topic events "$D/events.jsonl"

step "4. watching the topic until it is drained (state in $D/state)"
"$A" watch --config "$D/experiment.json" --brokers "$BS" --topic events \
    --state "$D/state" --drain \
    --kafka session.timeout.ms=6000 --kafka heartbeat.interval.ms=500 \
    --kafka fetch.wait.max.ms=20 > "$D/records.jsonl"
echo "$(wc -l < "$D/records.jsonl") records in $D/records.jsonl (the last is the final summary)"
stop_broker

step "5. the daily readout"
rc=0
"$A" check --config "$D/experiment.json" --state "$D/state" || rc=$?
"$A" check --config "$D/experiment.json" --state "$D/state" --no-record \
    --series "$D/records.jsonl" --format html --out "$D/readout.html" || true
echo
echo "exit status of check: $rc (0 sound or doubtful, 3 failed)"
echo "HTML readout: $(cd "$D" && pwd)/readout.html"
