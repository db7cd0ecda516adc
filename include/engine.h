/*
 * engine.h — the one path from event lines to output records, shared by
 * `replay` and `watch`: decode → ledger (one per partition) → records at
 * event-time boundaries → final summary.
 *
 * A record for boundary B (a multiple of `every` since the epoch, after
 * window.start) reflects, for every partition, the events the partition held
 * before its first event at or after B: the partition's tallies are captured
 * at that moment, and the record is emitted once every partition has passed B
 * (or is idle, i.e. caught up with its log). For a log in time order this is
 * exactly the events before B, however the log is split into partitions and
 * however the consumer interleaves them, so live and replay print the same
 * records (running tallies merge in a different order: equal to rounding; the
 * final summary is recomputed canonically and is identical). The final
 * summary comes last, with "final": true.
 */
#ifndef ABTALLY_ENGINE_H
#define ABTALLY_ENGINE_H

#include <stdbool.h>
#include <stdint.h>
#include <stdio.h>

#include <jansson.h>

#include "config.h"
#include "event.h"
#include "ledger.h"
#include "report.h"
#include "seqrun.h"

struct engine_opts {
    const char *config_path;
    int64_t every_us;       /* record cadence in event time (default 1 day) */
    int64_t lateness_us;    /* default 1 hour */
    int64_t horizon_us;     /* id memory, default 24 hours */
    const char *quarantine; /* file for rejected lines, or NULL */
    uint32_t shard, n_shards;
    bool final_only;        /* print only the final summary */
    const char *unit_key;   /* --unit-key FILE: secret key for hashing unit ids, or NULL
                               for the fixed default key (see engine_read_unit_key) */
};

struct engine {
    struct config cfg;
    struct layout lay;
    struct decoder *dec;
    struct ledger **parts;
    int n_parts;
    int64_t every_us;
    int64_t tmax;      /* latest event time seen over all partitions */
    double p_seq;      /* always-valid SRM p so far (running minimum over records) */
    int64_t *pmax;     /* per partition: latest event time seen */
    bool *idle;        /* per partition: caught up with its log */
    struct pending_rec {
        int64_t b;            /* boundary time */
        struct tallies acc;   /* captures of the partitions that passed b */
        bool *got;            /* per partition: captured */
    } *pend;
    int n_pend;
    int64_t tmax_emitted; /* latest boundary opened */
    struct seqrun *seq;   /* sequential monitoring across records (owned) */
    bool final_only;
    FILE *out;         /* records go here (stdout); NULL: not printed */
    FILE *quar;        /* quarantine, or NULL */
    /* optional: called with each record's JSON text (no newline) */
    int (*on_record)(void *ctx, const char *json, size_t len);
    void *on_record_ctx;
};

/* Sets defaults in *o. */
void engine_opts_default(struct engine_opts *o);

/* The minimum size of a --unit-key file; its first UNIT_KEY_BYTES bytes are the key. */
#define UNIT_KEY_BYTES 16

/* Reads the SipHash key for unit ids from the file at path: its first
 * UNIT_KEY_BYTES bytes (k0 then k1, little-endian). Returns AB_OK, or
 * AB_EINPUT with *e naming the file when it cannot be read, is not a regular
 * file or is shorter than UNIT_KEY_BYTES. Never puts key bytes in a message. */
int engine_read_unit_key(const char *path, struct hash_key *key, struct err *e);

/* Loads the config and makes n_parts empty ledgers; with o->unit_key, unit
 * ids are hashed with the key read from that file. */
int engine_init(struct engine *en, const struct engine_opts *o, int n_parts, struct err *e);
void engine_release(struct engine *en);

/* Sizes the engine for n partitions with no ledger yet (watch assigns them). */
int engine_set_parts(struct engine *en, int n, struct err *e);

/* Partition p has caught up with its log (true) or received data (false);
 * pending records may be emitted. */
int engine_part_idle(struct engine *en, int p, bool idle, struct err *e);

/* Emits every pending record with the partitions' current tallies for those
 * not yet captured (before a partition changes owner, and at the end). */
int engine_flush_pending(struct engine *en, struct err *e);

/* Takes one line of partition `part`; src and lineno name its position for
 * the quarantine. Returns AB_OK, or AB_EINPUT on a runtime failure (out of
 * memory, output failure) with *e filled. Bad lines are never failures. */
int engine_line(struct engine *en, int part, const char *line, size_t len, bool too_long,
                const char *src, uint64_t lineno, struct err *e);

/* Emits the record at time `time` (final: canonical tallies). */
int engine_emit(struct engine *en, int64_t time, bool final, struct err *e);

/* Builds the record of the engine's ledgers without printing it (for check).
 * *out is owned by the caller; *verdict receives the integrity verdict. */
int engine_record(struct engine *en, int64_t time, bool final, json_t **out, int *verdict,
                  struct err *e);

struct source;

/* Feeds every line of the file at path ("-": stdin) to partition 0. When tick
 * is not NULL it is called every 65536 lines (for a progress line). *bytes
 * (may be NULL) receives the bytes of the file consumed. */
int engine_read_file(struct engine *en, const char *path,
                     void (*tick)(void *ctx, const struct source *s, uint64_t lines), void *ctx,
                     uint64_t *bytes, struct err *e);

/* Settles the ledgers and emits the final summary. */
int engine_finish(struct engine *en, struct err *e);

#endif
