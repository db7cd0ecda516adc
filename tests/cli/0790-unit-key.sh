#!/bin/sh
# Unit ids are stored only as keyed hashes. States never hold unit ids as
# text; with --unit-key FILE they hold SipHash-2-4 values under the file's
# secret key, which nobody without the key can link to ids: the hash of an id
# under the default key is found in a state made without --unit-key and not
# in one made with it. A state made with a key is read only with the same key
# (refused without it, with another key, and an unkeyed state is refused with
# a key), each with a clear error; the summaries with and without a key agree.
set -eu
. tests/cli-lib.sh
make_log 4000
# fixed test keys (a real key: head -c 32 /dev/urandom > FILE)
printf 'invented-test-key-one-0123456789' > "$T/k1"
printf 'invented-key-two' > "$T/k2"
printf 'too-short' > "$T/short"
"$A" replay --config "$T/exp.json" --final-only --save-state "$T/plain" "$T/log.jsonl" > "$T/plain.out"
"$A" replay --config "$T/exp.json" --final-only --unit-key "$T/k1" --save-state "$T/keyed" "$T/log.jsonl" > "$T/keyed.out"
same_records "$T/keyed.out" "$T/plain.out" || fail "the summary depends on the key"
P=$T/plain/replay-0-of-1.abstate
K=$T/keyed/replay-0-of-1.abstate
for f in "$P" "$K"; do
    if grep -q '"u1[0-9]"' "$f" || grep -aq 'u12[0-9]' "$f"; then fail "$f holds unit ids as text"; fi
done
python3 - "$P" "$K" <<'PY' || fail "hash check"
import struct, sys
def rotl(x, b): return ((x << b) | (x >> (64 - b))) & 0xffffffffffffffff
def siphash24(k0, k1, m):
    v0, v1, v2, v3 = k0 ^ 0x736f6d6570736575, k1 ^ 0x646f72616e646f6d, k0 ^ 0x6c7967656e657261, k1 ^ 0x7465646279746573
    def rnd(v0, v1, v2, v3):
        v0 = (v0 + v1) & 0xffffffffffffffff; v1 = rotl(v1, 13) ^ v0; v0 = rotl(v0, 32)
        v2 = (v2 + v3) & 0xffffffffffffffff; v3 = rotl(v3, 16) ^ v2
        v0 = (v0 + v3) & 0xffffffffffffffff; v3 = rotl(v3, 21) ^ v0
        v2 = (v2 + v1) & 0xffffffffffffffff; v1 = rotl(v1, 17) ^ v2; v2 = rotl(v2, 32)
        return v0, v1, v2, v3
    n = len(m) - len(m) % 8
    for i in range(0, n, 8):
        w = struct.unpack("<Q", m[i:i + 8])[0]
        v3 ^= w; v0, v1, v2, v3 = rnd(*rnd(v0, v1, v2, v3)); v0 ^= w
    b = (len(m) & 0xff) << 56
    for i, c in enumerate(m[n:]): b |= c << (8 * i)
    v3 ^= b; v0, v1, v2, v3 = rnd(*rnd(v0, v1, v2, v3)); v0 ^= b
    v2 ^= 0xff
    for _ in range(4): v0, v1, v2, v3 = rnd(v0, v1, v2, v3)
    return v0 ^ v1 ^ v2 ^ v3
# the project's fixed default key (hash.c)
K0, K1 = 0x616274616c6c7931, 0x756e69742d696473
plain, keyed = open(sys.argv[1], "rb").read(), open(sys.argv[2], "rb").read()
found_plain = found_keyed = 0
for u in range(0, 400, 7):
    h = struct.pack("<Q", siphash24(K0, K1, b"u%d" % u))
    found_plain += h in plain
    found_keyed += h in keyed
assert found_plain >= 20, ("default-key hashes found in the unkeyed state", found_plain)
assert found_keyed == 0, ("default-key hashes found in the keyed state", found_keyed)
print("default-key hashes: %d found in the unkeyed state, %d in the keyed one" % (found_plain, found_keyed))
PY
# read back only with the same key
refused() {
    rc=0
    "$A" check --config "$T/exp.json" --no-record "$@" > /dev/null 2> "$T/err" || rc=$?
    [ "$rc" -eq 1 ] || fail "check $*: exit $rc, not 1"
    grep -q "$MSG" "$T/err" || fail "check $*: unclear error: $(cat "$T/err")"
}
MSG="made with a secret unit key; give the same --unit-key FILE"; refused --state "$T/keyed"
MSG="made with a different unit key"; refused --state "$T/keyed" --unit-key "$T/k2"
MSG="made without --unit-key"; refused --state "$T/plain" --unit-key "$T/k1"
MSG="holds 9 bytes, at least 16 are needed"; refused --state "$T/keyed" --unit-key "$T/short"
MSG="unit key '$T/none': No such file"; refused --state "$T/keyed" --unit-key "$T/none"
MSG="unit key '$T': not a regular file"; refused --state "$T/keyed" --unit-key "$T"
"$A" check --config "$T/exp.json" --state "$T/keyed" --unit-key "$T/k1" --no-record --format json > "$T/check.json" ||
    [ $? -eq 3 ] || fail "check with the right key failed"
"$A" check --config "$T/exp.json" --unit-key "$T/k1" --format json "$T/log.jsonl" > "$T/check-log.json" ||
    [ $? -eq 3 ] || fail "check of a log with a key failed"
python3 - "$T/check.json" "$T/check-log.json" "$T/plain.out" <<'PY' || fail "keyed readouts differ"
import json, sys
a, b, c = (json.load(open(p)) for p in sys.argv[1:4])
assert a["units"] == b["units"] == c["units"], (a["units"], b["units"], c["units"])
assert a["integrity"]["lines_read"] == b["integrity"]["lines_read"] == c["integrity"]["lines_read"]
PY
# any file of at least 16 bytes is a key, text included
printf '%s' 'a0b1c2d3e4f5a6b7c8d9e0f1a2b3c4d5' > "$T/hexkey"
"$A" replay --config "$T/exp.json" --unit-key "$T/hexkey" --final-only "$T/log.jsonl" > /dev/null 2> "$T/err" ||
    fail "a text key file was refused: $(cat "$T/err")"
echo ok
