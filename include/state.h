/*
 * state.h — snapshot files: one ledger plus where it stands in its source.
 *
 * A snapshot file is
 *   "ABTSTATE" | u32 version | u32 meta length | meta (JSON) | ledger section | u32 CRC-32
 * where the CRC (zlib's crc32) covers every byte before it. Files are written
 * atomically: a temporary file in the same directory (mode 0600), fsync,
 * rename over the old name, fsync of the directory. A crash leaves either the
 * old snapshot or the new one, never a partial file under the real name.
 * Loading checks the magic, version, CRC, the config fingerprint and the
 * unit key before a byte of the ledger is trusted.
 *
 * Unit ids are hashed with the layout's unit key (hash.h). A state made with
 * a secret key (--unit-key) carries the key's fingerprint in its meta
 * ("unit_key": SipHash of a fixed text under the key, 16 hex digits) and is
 * version 2; a state made with the default key has no such field and is
 * version 1. A state is loaded only with the key it was made with.
 */
#ifndef ABTALLY_STATE_H
#define ABTALLY_STATE_H

#include <stddef.h>
#include <stdint.h>

#include "err.h"
#include "ledger.h"

#define STATE_SUFFIX ".abstate"
#define STATE_VERSION 2         /* newest version: states made with --unit-key */
#define STATE_VERSION_UNKEYED 1 /* states made with the default unit key */

/* Where a ledger's events came from. */
struct state_meta {
    char source[16];      /* "replay" or "kafka" */
    char topic[256];      /* kafka: topic */
    int32_t partition;    /* kafka: partition; replay: shard index */
    int32_t n_shards;     /* replay: shard count (1: whole log) */
    int64_t offset;       /* kafka: next offset to read; -1 if none */
    int64_t lateness_us;
    int64_t horizon_us;
};

/* Writes dir/name (name ends in STATE_SUFFIX) atomically. */
int state_save(const char *dir, const char *name, const struct state_meta *meta,
               const struct ledger *l, const struct layout *lay, struct err *e);

/* Loads one snapshot file made with the same config layout. */
int state_load(const char *path, const struct layout *lay, struct state_meta *meta,
               struct ledger **out, struct err *e);

/* Lists dir's snapshot files (sorted); *paths is malloc'ed, free with state_list_free. */
int state_list(const char *dir, char ***paths, size_t *n, struct err *e);
void state_list_free(char **paths, size_t n);

#endif
