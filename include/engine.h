/*
 * engine.h — the one path from event lines to output records, shared by
 * `replay` and `watch`: decode → ledger (one per partition) → records at
 * event-time boundaries → final summary.
 *
 * A record for boundary B (a multiple of `every` since the epoch, after
 * window.start) is emitted when the stream first passes B, before the event
 * that passed it is applied: for a log in time order it reflects exactly the
 * events before B. The final summary comes last, with "final": true.
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

struct engine_opts {
    const char *config_path;
    int64_t every_us;       /* record cadence in event time (default 1 day) */
    int64_t lateness_us;    /* default 1 hour */
    int64_t horizon_us;     /* id memory, default 24 hours */
    const char *quarantine; /* file for rejected lines, or NULL */
    uint32_t shard, n_shards;
    bool final_only;        /* print only the final summary */
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
    bool final_only;
    FILE *out;         /* records go here (stdout) */
    FILE *quar;        /* quarantine, or NULL */
    /* optional: called with each record's JSON text (no newline) */
    int (*on_record)(void *ctx, const char *json, size_t len);
    void *on_record_ctx;
};

/* Sets defaults in *o. */
void engine_opts_default(struct engine_opts *o);

/* Loads the config and makes n_parts empty ledgers. */
int engine_init(struct engine *en, const struct engine_opts *o, int n_parts, struct err *e);
void engine_release(struct engine *en);

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

/* Settles the ledgers and emits the final summary. */
int engine_finish(struct engine *en, struct err *e);

#endif
