/*
 * rebucket.h — recomputing a unit's arm from the assignment hash described
 * in the config ("hash": function, salt, buckets, format; "buckets" per arm).
 *
 * The hashed string is hash.format with "{salt}" replaced by the salt and
 * "{unit}" by the unit id (default "{salt}{unit}"), as UTF-8 bytes. The
 * bucket is the first 8 bytes of the digest read as a big-endian unsigned
 * 64-bit integer, modulo hash.buckets. The arm is the one whose [first, end)
 * bucket range holds it. Functions: "sha256" and "md5" (OpenSSL libcrypto).
 */
#ifndef ABTALLY_REBUCKET_H
#define ABTALLY_REBUCKET_H

#include <stddef.h>
#include <stdint.h>

#include "config.h"

/* A digest context to reuse across calls (no allocation per unit), or NULL
 * when out of memory; rebucket_ctx_free(NULL) does nothing. */
void *rebucket_ctx_new(void);
void rebucket_ctx_free(void *ctx);

/* The bucket of a unit id; UINT64_MAX when hashing failed. ctx comes from
 * rebucket_ctx_new, or is NULL for a context made for this one call. */
uint64_t rebucket_bucket(const struct config *cfg, void *ctx, const char *unit, size_t n);

/* The arm index the hash gives the unit, or -1 when no arm's range holds it. */
int rebucket_arm(const struct config *cfg, void *ctx, const char *unit, size_t n);

#endif
