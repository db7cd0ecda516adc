/*
 * hash.h — SipHash-2-4 (Aumasson & Bernstein 2012), a keyed 64-bit hash.
 *
 * Unit ids and event ids are stored as 64-bit SipHash values, never as text:
 * the state stays small and holds no raw ids. With the default key the hash is
 * fixed across runs and machines (shards and snapshots rely on that); a secret
 * key (`--unit-key`) makes the stored values unlinkable to the ids.
 */
#ifndef ABTALLY_HASH_H
#define ABTALLY_HASH_H

#include <stddef.h>
#include <stdint.h>

struct hash_key {
    uint64_t k0, k1;
};

/* The fixed default key. */
extern const struct hash_key HASH_KEY_DEFAULT;

uint64_t siphash24(const struct hash_key *key, const void *data, size_t len);

#endif
