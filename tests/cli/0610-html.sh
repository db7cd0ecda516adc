#!/bin/sh
# check --format html: a simulated experiment with a real effect on
# order_value and lost treatment assignments from day 6 (an SRM fault).
#  (a) check --format html --out F exits as check --format json does;
#  (b) F is well-formed (python3's html.parser: every tag closed in order),
#      self-contained (no script, no URL, no external reference);
#  (c) it holds the verdict of the JSON record and its reasons, an SVG chart
#      with a title and description per primary metric and arm, the daily
#      units chart, one sentence per metric and arm, the integrity checklist;
#  (d) without --out the page goes to stdout; a bad --format is a usage error;
#  (e) optional: tests/render-chromium.sh renders F to PNG and checks that it
#      is not blank (skipped with a message when chromium is absent).
# Run with $ABTALLY pointing at the binary; exit 0 = pass.
set -u
ABTALLY=${ABTALLY:-build/abtally}
here=$(cd "$(dirname "$0")" && pwd)
tmp=$(mktemp -d) || exit 1
trap 'rm -rf "$tmp"' EXIT
fails=0

fail() {
    echo "FAIL: $*"
    fails=$((fails + 1))
}

"$ABTALLY" simulate --units 8000 --days 10 --effect order_value=0.3 --fault lose-assign:treatment:0.3:6 \
    --seed 11 --config-out "$tmp/exp.json" -o "$tmp/log.jsonl" 2>"$tmp/sim.err" ||
    { echo "FAIL: simulate: $(cat "$tmp/sim.err")"; exit 1; }

"$ABTALLY" check --config "$tmp/exp.json" --format json "$tmp/log.jsonl" >"$tmp/rec.json" 2>"$tmp/json.err"
jrc=$?
"$ABTALLY" check --config "$tmp/exp.json" --format html --out "$tmp/readout.html" "$tmp/log.jsonl" \
    >"$tmp/html.out" 2>"$tmp/html.err"
hrc=$?
# (a)
[ "$jrc" -eq 3 ] || fail "(a) check --format json: exit $jrc, expected 3 for lost assignments ($(cat "$tmp/json.err"))"
[ "$hrc" -eq "$jrc" ] || fail "(a) check --format html: exit $hrc, json gave $jrc ($(cat "$tmp/html.err"))"
[ -s "$tmp/html.out" ] && fail "(a) --out F: something went to stdout"
[ -s "$tmp/readout.html" ] || { echo "FAIL: (a) no HTML written"; exit 1; }

# (b), (c)
out=$(python3 - "$tmp/readout.html" "$tmp/rec.json" <<'EOF'
import html, json, re, sys
from html.parser import HTMLParser

page = open(sys.argv[1], encoding="utf-8").read()
rec = json.load(open(sys.argv[2]))
VOID = {"meta", "br", "input", "hr", "img", "link", "col", "wbr", "area", "base", "source", "track", "embed"}
problems = []

class Page(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.svgs, self.says, self.texts = [], [], [], []
        self.cur_say = None
        self.vword = None
        self.in_vword = False
        self.titles = set()
        self.descs = set()
        self.title_id = None
    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "script":
            problems.append("a <script> element")
        for k, v in attrs:
            if k in ("src", "href") and v and not v.startswith("#"):
                problems.append("external reference %s=%r" % (k, v))
            if k.startswith("on"):
                problems.append("an event handler attribute %s" % k)
        if tag == "svg":
            self.svgs.append(a)
        if tag == "p" and "say" in a.get("class", "").split():
            self.cur_say = []
        if tag == "h2" and a.get("class") == "vword":
            self.in_vword = True
        if tag == "title" and a.get("id"):
            self.titles.add(a["id"])
        if tag == "desc" and a.get("id"):
            self.descs.add(a["id"])
        if tag not in VOID:
            self.stack.append((tag, self.getpos()))
    def handle_startendtag(self, tag, attrs):
        if tag == "script":
            problems.append("a <script> element")
    def handle_endtag(self, tag):
        if not self.stack:
            problems.append("</%s> at %s closes nothing" % (tag, self.getpos()))
            return
        top, pos = self.stack.pop()
        if top != tag:
            problems.append("</%s> at %s closes <%s> opened at %s" % (tag, self.getpos(), top, pos))
        if tag == "p" and self.cur_say is not None:
            self.says.append("".join(self.cur_say))
            self.cur_say = None
        if tag == "h2":
            self.in_vword = False
    def handle_data(self, data):
        self.texts.append(data)
        if self.cur_say is not None:
            self.cur_say.append(data)
        if self.in_vword:
            self.vword = (self.vword or "") + data

p = Page()
p.feed(page)
p.close()
if p.stack:
    problems.append("never closed: %s" % ", ".join("<%s> at %s" % t for t in p.stack[:5]))
if re.search(r"https?:|//[a-z0-9.-]+\.[a-z]{2,}/|@import|url\((?!#)", page, re.I):
    problems.append("a URL or an external reference in the page")
if not page.startswith("<!DOCTYPE html>"):
    problems.append("no doctype")

verdict = rec["integrity"]["verdict"]
if (p.vword or "").strip() != verdict:
    problems.append("verdict shown %r, record says %r" % (p.vword, verdict))
text = html.unescape("".join(p.texts))
for r in rec["integrity"]["reasons"]:
    if r["detail"] not in text:
        problems.append("reason not shown: %s" % r["detail"])
if "srm" not in [r["check"] for r in rec["integrity"]["reasons"]]:
    problems.append("the simulated fault gave no srm reason (test setup)")

charts = [s for s in p.svgs if "chart" in s.get("class", "").split()]
effect = [s for s in charts if "effect" in s.get("class", "").split()]
days = [s for s in charts if "days" in s.get("class", "").split()]
rows = rec["metrics"]
primaries = [m for m in rows if m.get("role") == "primary"]
if len(effect) < len(primaries) or len(effect) != len(rows):
    problems.append("%d effect charts for %d rows (%d primary)" % (len(effect), len(rows), len(primaries)))
if len(days) != 1:
    problems.append("%d daily units charts" % len(days))
for s in charts:
    if s.get("role") != "img" or not s.get("aria-label") or "viewbox" not in s:
        problems.append("chart without role, label or viewBox: %s" % s)
    ids = (s.get("aria-labelledby") or "").split()
    if len(ids) != 2 or ids[0] not in p.titles or ids[1] not in p.descs:
        problems.append("chart without its title and description: %s" % s.get("aria-label"))
    if "width" in s or "height" in s:
        problems.append("a chart with a fixed size: %s" % s.get("aria-label"))
for m in primaries:
    if not re.search(r'data-metric="%s" data-arm="%s"' % (re.escape(html.escape(m["metric"])),
                                                           re.escape(html.escape(m["arm"]))), page):
        problems.append("no chart figure for %s/%s" % (m["metric"], m["arm"]))

# one sentence per metric and arm: its name, the arm, the interval, the caution
if len(p.says) != len(rows):
    problems.append("%d sentences for %d rows" % (len(p.says), len(rows)))
for m in rows:
    s = [x for x in p.says if x.startswith(m["metric"])]
    if not s:
        problems.append("no sentence for %s" % m["metric"]); continue
    s = s[0]
    if m["arm"] not in s or "interval" not in s:
        problems.append("sentence for %s lacks the arm or the interval: %s" % (m["metric"], s))
    if "sequential test" not in s:
        problems.append("sentence for %s does not say what the sequential test says: %s" % (m["metric"], s))
    if verdict == "failed" and "cannot be trusted" not in s:
        problems.append("sentence for %s lacks the integrity caution: %s" % (m["metric"], s))
ov = [m for m in rows if m["metric"] == "order_value"][0]
want = "%.1f%% %s" % (abs(ov["lift"]) * 100, "higher" if ov["lift"] > 0 else "lower")
if not any(want in x for x in p.says):
    problems.append("no sentence says order_value is %s" % want)

# the checklist shows the failed srm check and passed ones
for needle in ("Units per arm match the weights", "Every unit is in one arm only", "Few rejected lines",
               "lines read"):
    if needle not in text:
        problems.append("checklist lacks %r" % needle)
if not re.search(r'<tr class="fail"><td class="st"><span class="tag s-fail">[^<]*fail</span></td><td><strong>'
                 r'Units per arm match the weights', page):
    problems.append("srm is not shown as failed in the checklist")
if "@media print" not in page or "@media (max-width" not in page:
    problems.append("no print or phone layout")
for line in problems:
    print(line)
EOF
)
[ -z "$out" ] || fail "(b/c) $out"

# (d)
"$ABTALLY" check --config "$tmp/exp.json" --format html "$tmp/log.jsonl" >"$tmp/stdout.html" 2>/dev/null
head -c 15 "$tmp/stdout.html" | grep -q '<!DOCTYPE html>' || fail "(d) no page on stdout without --out"
cmp -s "$tmp/stdout.html" "$tmp/readout.html" || fail "(d) stdout and --out pages differ"
"$ABTALLY" check --config "$tmp/exp.json" --format pdf "$tmp/log.jsonl" >/dev/null 2>"$tmp/usage.err"
urc=$?
[ "$urc" -eq 2 ] || fail "(d) --format pdf: exit $urc, expected 2"
grep -q "html" "$tmp/usage.err" || fail "(d) the usage error does not name html: $(cat "$tmp/usage.err")"

# (e)
sh "$here/../render-chromium.sh" "$tmp/readout.html" "$tmp/png"
crc=$?
if [ "$crc" -eq 77 ]; then
    :
elif [ "$crc" -ne 0 ]; then
    fail "(e) the page did not render in chromium"
fi

[ "$fails" -eq 0 ]
