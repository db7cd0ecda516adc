#!/bin/sh
# render-chromium.sh PAGE.html [OUTDIR]
#
# Renders an HTML readout with headless Chromium (Debian's `chromium`) at a
# desktop width (1200 px) and a phone width (390 px), writes the screenshots
# to OUTDIR (default: a temporary directory, removed at exit) and checks that
# neither is blank: the PNG is decoded (python3, zlib only) and must hold
# many distinct colours, the colour of the charts' interval band over a
# real area, and the colour of the verdict's mark.
#
# Exit status: 0 rendered and not blank; 1 failed; 77 skipped (no chromium,
# no python3), with a message. Nothing is fetched: the page is a local file
# and Chromium runs with networking features off.
set -u
page=${1:?usage: render-chromium.sh PAGE.html [OUTDIR]}
case $page in /*) ;; *) page=$PWD/$page ;; esac
[ -f "$page" ] || { echo "render-chromium: '$page': no such file" >&2; exit 1; }

browser=""
for b in chromium chromium-browser; do
    if command -v "$b" >/dev/null 2>&1; then
        browser=$b
        break
    fi
done
if [ -z "$browser" ]; then
    echo "render-chromium: skipped: chromium is not installed (apt-get install chromium)"
    exit 77
fi
command -v python3 >/dev/null 2>&1 || { echo "render-chromium: skipped: no python3"; exit 77; }

work=$(mktemp -d) || exit 1
trap 'rm -rf "$work"' EXIT
out=${2:-$work}
mkdir -p "$out" || exit 1

shot() { # shot WIDTH HEIGHT PNG
    profile=$(mktemp -d "$work/profile.XXXXXX") || return 1
    timeout 90 "$browser" --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
        --disable-background-networking --disable-component-update --disable-sync \
        --disable-default-apps --disable-extensions --hide-scrollbars --mute-audio \
        --user-data-dir="$profile" --screenshot="$3" --window-size="$1,$2" \
        "file://$page" >"$work/chromium.log" 2>&1
    rc=$?
    rm -rf "$profile"
    if [ ! -s "$3" ]; then
        echo "render-chromium: chromium wrote no screenshot (exit $rc):" >&2
        tail -5 "$work/chromium.log" >&2
        return 1
    fi
    return 0
}

# check PNG: decodes it and judges whether the page was drawn.
check() {
    python3 - "$1" <<'EOF'
import struct, sys, zlib

path = sys.argv[1]
data = open(path, "rb").read()
if data[:8] != b"\x89PNG\r\n\x1a\n":
    print("not a PNG"); sys.exit(1)
pos, idat, hdr = 8, [], None
while pos < len(data):
    n, kind = struct.unpack(">I4s", data[pos:pos + 8])
    body = data[pos + 8:pos + 8 + n]
    if kind == b"IHDR":
        hdr = struct.unpack(">IIBBBBB", body)
    elif kind == b"IDAT":
        idat.append(body)
    pos += 12 + n
w, h, depth, ctype, _, _, interlace = hdr
if depth != 8 or ctype not in (2, 6) or interlace:
    print("unexpected PNG format depth=%d type=%d interlace=%d" % (depth, ctype, interlace)); sys.exit(1)
bpp = 4 if ctype == 6 else 3
raw = zlib.decompress(b"".join(idat))
stride = w * bpp
prev = bytearray(stride)
colours = {}
for y in range(h):
    f = raw[y * (stride + 1)]
    line = bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
    if f == 1:
        for i in range(bpp, stride):
            line[i] = (line[i] + line[i - bpp]) & 255
    elif f == 2:
        line = bytearray((a + b) & 255 for a, b in zip(line, prev))
    elif f == 3:
        for i in range(stride):
            left = line[i - bpp] if i >= bpp else 0
            line[i] = (line[i] + ((left + prev[i]) >> 1)) & 255
    elif f == 4:
        for i in range(stride):
            a = line[i - bpp] if i >= bpp else 0
            b = prev[i]
            c = prev[i - bpp] if i >= bpp else 0
            p = a + b - c
            pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
            line[i] = (line[i] + (a if pa <= pb and pa <= pc else b if pb <= pc else c)) & 255
    for x in range(0, stride, bpp):
        k = bytes(line[x:x + 3])
        colours[k] = colours.get(k, 0) + 1
    prev = line

def near(rgb, tol=6):
    return sum(c for k, c in colours.items() if all(abs(k[i] - rgb[i]) <= tol for i in range(3)))

band = near((0xc9, 0xd4, 0xe9))          # the interval band of the effect charts
marks = max(near((0x2e, 0x6a, 0x4e)),   # sound
            near((0x8f, 0x5f, 0x00)),   # doubtful
            near((0xa3, 0x30, 0x2d)))   # failed
problems = []
if len(colours) < 16:
    problems.append("only %d distinct colours" % len(colours))
if band < 500:
    problems.append("interval band colour on %d pixels" % band)
if marks < 200:
    problems.append("verdict colour on %d pixels" % marks)
print("%dx%d, %d colours, band %d px, verdict mark %d px%s" %
      (w, h, len(colours), band, marks, ("; " + "; ".join(problems)) if problems else ""))
sys.exit(1 if problems else 0)
EOF
}

fails=0
for size in 1200x2600 390x3200; do
    wd=${size%x*}
    ht=${size#*x}
    png="$out/readout-$wd.png"
    if ! shot "$wd" "$ht" "$png"; then
        fails=$((fails + 1))
        continue
    fi
    if msg=$(check "$png"); then
        echo "render-chromium: $wd px wide: $msg"
    else
        echo "render-chromium: $wd px wide looks blank or broken: $msg" >&2
        fails=$((fails + 1))
    fi
done
[ "$fails" -eq 0 ]
