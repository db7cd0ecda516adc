/*
 * ledger.h — the per-unit join and the per-arm tallies.
 *
 * A ledger takes decoded events (event.h) and keeps, per randomization unit,
 * its exposure (earliest in-window assignment), its arm, and per metric its
 * window value and pre-period covariate (DESIGN.md "Join rules"); per arm it
 * keeps the co-moments every estimate is computed from (moments.h), updated
 * incrementally whenever a unit's value changes.
 *
 * Unit ids and event ids are kept only as 64-bit SipHash values (hash.h).
 * Order: events may arrive up to `lateness` (event time) out of order; to stay
 * order-independent within that bound, a unit keeps the raw outcomes it may
 * still need (pre-period candidates before exposure, everything while its
 * exposure could still move) in a pending list, released once the watermark
 * (latest event time − lateness) has passed. One ledger holds one partition
 * of the units; ledgers of disjoint units merge exactly (report.h).
 *
 * The module does no I/O. Ownership: the ledger owns everything it allocates;
 * it borrows the config and the layout, which must outlive it.
 */
#ifndef ABTALLY_LEDGER_H
#define ABTALLY_LEDGER_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "config.h"
#include "event.h"
#include "hash.h"
#include "moments.h"

#define ARM_NONE 0xFF
#define NO_TIME INT64_MAX

/* What the config compiles to: where each metric's values sit in a unit record
 * and which metrics each outcome name feeds. Shared by all ledgers of a run. */
struct layout {
    const struct config *cfg;
    int nv[CONFIG_MAX_METRICS];       /* variables per metric (moments.h layout) */
    int off[CONFIG_MAX_METRICS];      /* offset of the metric's values, in doubles */
    int n_values;                     /* doubles per unit record */
    size_t rec_size;                  /* bytes per unit record */
    int n_events;                     /* distinct outcome names the metrics use */
    char *event_names[2 * CONFIG_MAX_METRICS];
    /* per outcome name: which (metric, part) it feeds; part 0 = value or numerator, 1 = denominator */
    int n_targets[2 * CONFIG_MAX_METRICS];
    struct target { int metric, part; } targets[2 * CONFIG_MAX_METRICS][CONFIG_MAX_METRICS];
    struct hash_key unit_key;         /* key for hashing unit ids */
    int64_t lateness_us;              /* how far out of order events may arrive */
    int64_t dedup_horizon_us;         /* how long event ids are remembered */
    uint32_t shard, n_shards;         /* keep units with hash % n_shards == shard (n_shards 1: all) */
    uint64_t digest;                  /* fingerprint of what the ledger's layout depends on */
};

/* Integrity counters; all add up across ledgers. */
struct counters {
    uint64_t lines;                        /* lines read */
    uint64_t accepted;                     /* lines decoded into an event */
    uint64_t rejected[REJ_COUNT];          /* rejected lines by reason */
    uint64_t assignments;                  /* assignments of this experiment */
    uint64_t other_experiment;             /* assignments of other experiments (ignored) */
    uint64_t outside_window;               /* assignments outside [window.start, window.end) */
    uint64_t late_assignments;             /* assignments later than the lateness bound */
    uint64_t outcomes;                     /* outcomes of a configured metric */
    uint64_t ignored_outcomes;             /* outcomes no metric uses */
    uint64_t orphan_outcomes;              /* outcomes after window.start with no exposure yet at their
                                              time (never exposed, or before exposure − pre) */
    uint64_t other_shard;                  /* events of units in other shards (replay --shard) */
    uint64_t duplicates;                   /* lines whose id was seen before */
    uint64_t dup_by_arm[CONFIG_MAX_ARMS];  /* duplicates of units counted in an arm, by arm
                                              (judged once the unit's exposure is settled) */
    uint64_t multi_arm_units;              /* units assigned to more than one arm */
    uint64_t multi_by_arm[CONFIG_MAX_ARMS];/* multi-arm units, counted in each arm they named */
    uint64_t units_seen[CONFIG_MAX_ARMS];  /* units ever exposed in each arm (incl. multi-arm) */
    uint64_t hash_checked;                 /* assignments whose arm was recomputed from the hash */
    uint64_t hash_mismatch;                /* ... and named another arm than the hash gives */
};

/* a ← a + b, field by field (every field is a uint64_t count). */
void counters_add(struct counters *a, const struct counters *b);

/* Units by segment: the attrs of the assignment that set the exposure,
 * as "key=value" pairs sorted by key and joined by the byte 0x1f. */
#define SEG_MAX 1024            /* distinct segments kept; more go to SEG_OTHER */
#define SEG_OTHER "(other)"
struct seg_row {
    char *name;
    uint64_t units[CONFIG_MAX_ARMS];
};

/* Units by first-exposure day (days since the epoch, UTC). */
struct day_row {
    int64_t day;
    uint64_t units[CONFIG_MAX_ARMS];
};

struct ledger;

/* Compiles the config into a layout. lateness and horizon in µs. Returns AB_OK or AB_EINPUT. */
int layout_init(struct layout *lay, const struct config *cfg, int64_t lateness_us,
                int64_t dedup_horizon_us, struct err *e);
void layout_release(struct layout *lay);

/* A new empty ledger, or NULL when out of memory. */
struct ledger *ledger_new(const struct layout *lay);
void ledger_free(struct ledger *l);

/* Applies one decoded event. Returns REJ_NONE, or REJ_UNKNOWN_ARM (the caller
 * counts it as a rejected line). Out of memory returns -1 (on this call or a
 * later one: the join of an event may happen a few events later, see
 * ledger.c "Lookahead"; every other function sees every event passed in).
 * Counts lines, accepted and duplicates itself; the caller counts rejections
 * via ledger_reject. */
int ledger_apply(struct ledger *l, const struct event *ev);

/* Counts one line rejected by the decoder. */
void ledger_reject(struct ledger *l, enum reject r);

/* Ends the stream: the watermark moves past every event, pending outcomes are
 * settled (orphans counted). Further events are still accepted. */
void ledger_finish(struct ledger *l);

/* Read access for the report. */
const struct counters *ledger_counters(const struct ledger *l);
const struct moments *ledger_moments(const struct ledger *l, int metric, int arm);
uint64_t ledger_units(const struct ledger *l, int arm);
int64_t ledger_max_time(const struct ledger *l);
size_t ledger_days(const struct ledger *l, const struct day_row **rows);
size_t ledger_segments(const struct ledger *l, const struct seg_row **rows);
size_t ledger_n_records(const struct ledger *l);
size_t ledger_memory(const struct ledger *l);

/* ledger_memory by part, in bytes of capacity (for the benchmark). */
struct ledger_mem {
    size_t records;  /* unit records (room made for) */
    size_t index;    /* open-addressing index of the records */
    size_t pending;  /* pending-outcome arena */
    size_t ids;      /* event ids: the ring and the table */
    size_t other;    /* multi-arm table, day rows, lookahead ring */
    size_t n_records;/* unit records in use */
};
void ledger_memory_parts(const struct ledger *l, struct ledger_mem *m);

/* For tests: makes the next growth of the unit records, and of the pending
 * blocks, move them to new address space, as growth past their reserves
 * (4M records of 64 bytes, 256 MiB of blocks) does on a large log. */
void ledger_trim_reserves(struct ledger *l);

/* Calls fn for every unit counted in the tallies (exposed, one arm), in table
 * order, with its key, arm and the per-metric variables (layout offsets). */
void ledger_each_unit(const struct ledger *l,
                      void (*fn)(void *ctx, uint64_t key, int arm, const double *values), void *ctx);

/* Serialization of a ledger (for snapshots). ledger_save streams the state
 * through `w` (returns 0 on success); the byte order is the machine's. */
typedef int (*ledger_write_fn)(void *ctx, const void *p, size_t n);
int ledger_save(const struct ledger *l, ledger_write_fn w, void *ctx);
/* Rebuilds a ledger from buf[0..len) written by ledger_save with the same
 * layout. Every count and index is checked against the buffer and the layout:
 * malformed input gives NULL and a message, never a crash. */
struct ledger *ledger_load(const struct layout *lay, const void *buf, size_t len, struct err *e);

/* Moves every unit of src into dst (the two must hold disjoint units: a unit
 * in both is an error) and adds src's counters and tallies; src is left
 * unchanged. Used to combine shard or partition states into one. */
int ledger_absorb(struct ledger *dst, const struct ledger *src, struct err *e);

/* The variables of metric m for a unit's stored values (cap applied). */
void layout_vector(const struct layout *lay, int m, const double *values, double *v);

#endif
