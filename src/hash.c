/*
 * hash.c — SipHash-2-4 from the description in Aumasson & Bernstein,
 * "SipHash: a fast short-input PRF" (2012). tests/test_hash.c checks it
 * against the paper's test vector (appendix A).
 */
#include "hash.h"

#include <string.h>

const struct hash_key HASH_KEY_DEFAULT = {UINT64_C(0x616274616c6c7931), UINT64_C(0x756e69742d696473)};

#define ROTL(x, b) (uint64_t)(((x) << (b)) | ((x) >> (64 - (b))))
#define SIPROUND                                                                         \
    do {                                                                                 \
        v0 += v1; v1 = ROTL(v1, 13); v1 ^= v0; v0 = ROTL(v0, 32);                        \
        v2 += v3; v3 = ROTL(v3, 16); v3 ^= v2;                                           \
        v0 += v3; v3 = ROTL(v3, 21); v3 ^= v0;                                           \
        v2 += v1; v1 = ROTL(v1, 17); v1 ^= v2; v2 = ROTL(v2, 32);                        \
    } while (0)

/* The 8 bytes at p as a little-endian number (one load on most machines). */
static uint64_t load64(const unsigned char *p)
{
    uint64_t v;
    memcpy(&v, p, sizeof v);
#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ == __ORDER_BIG_ENDIAN__
    v = __builtin_bswap64(v);
#endif
    return v;
}

uint64_t siphash24(const struct hash_key *key, const void *data, size_t len)
{
    const unsigned char *in = data;
    uint64_t v0 = UINT64_C(0x736f6d6570736575) ^ key->k0;
    uint64_t v1 = UINT64_C(0x646f72616e646f6d) ^ key->k1;
    uint64_t v2 = UINT64_C(0x6c7967656e657261) ^ key->k0;
    uint64_t v3 = UINT64_C(0x7465646279746573) ^ key->k1;
    size_t end = len - len % 8;
    for (size_t i = 0; i < end; i += 8) {
        uint64_t m = load64(in + i);
        v3 ^= m;
        SIPROUND;
        SIPROUND;
        v0 ^= m;
    }
    uint64_t b = (uint64_t)len << 56;
    const unsigned char *t = in + end;
    switch (len % 8) { /* the last 0..7 bytes, little-endian */
    case 7: b |= (uint64_t)t[6] << 48; /* fall through */
    case 6: b |= (uint64_t)t[5] << 40; /* fall through */
    case 5: b |= (uint64_t)t[4] << 32; /* fall through */
    case 4: b |= (uint64_t)t[3] << 24; /* fall through */
    case 3: b |= (uint64_t)t[2] << 16; /* fall through */
    case 2: b |= (uint64_t)t[1] << 8;  /* fall through */
    case 1: b |= (uint64_t)t[0]; break;
    default: break;
    }
    v3 ^= b;
    SIPROUND;
    SIPROUND;
    v0 ^= b;
    v2 ^= 0xff;
    SIPROUND;
    SIPROUND;
    SIPROUND;
    SIPROUND;
    return v0 ^ v1 ^ v2 ^ v3;
}
