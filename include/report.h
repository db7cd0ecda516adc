/*
 * report.h — from ledgers to the output record (DESIGN.md "Output").
 *
 * A record merges any number of ledgers holding disjoint units (one per
 * partition or shard). Running records merge the incremental tallies; the
 * final summary recomputes every tally from the unit values in the order of
 * their keys, so it is the same number for the same units whatever the
 * partitioning or the arrival order. Builds Jansson values; prints nothing.
 */
#ifndef ABTALLY_REPORT_H
#define ABTALLY_REPORT_H

#include <jansson.h>
#include <stdbool.h>
#include <stdint.h>

#include "ledger.h"

/* Tallies of one run, merged over ledgers. */
struct tallies {
    uint64_t units[CONFIG_MAX_ARMS];
    struct moments *mom;  /* [metric * CONFIG_MAX_ARMS + arm]; owned */
    struct counters cnt;
    struct day_row *days; /* sorted by day; owned */
    size_t n_days;
    struct seg_row *segs; /* names owned */
    size_t n_segs;
    int64_t max_time;
};

/* The moments of metric m in arm a. */
#define TALLY_MOM(t, m, a) (&(t)->mom[(m) * CONFIG_MAX_ARMS + (a)])

/* Merges n ledgers (NULL entries are skipped) into *t. canonical: recompute the moments in key order.
 * Returns AB_OK or AB_EINPUT (out of memory). */
int tallies_collect(struct tallies *t, const struct layout *lay, struct ledger *const *ls, int n,
                    bool canonical, struct err *e);
/* acc ← acc + t (running tallies of disjoint ledgers). AB_OK or AB_EINPUT. */
int tallies_add(struct tallies *acc, const struct tallies *t, const struct layout *lay);
void tallies_release(struct tallies *t);

struct readout;
struct seqrun;

/* The output record at event time `time`; NULL when out of memory. seq may be NULL. */
json_t *report_record(const struct layout *lay, const struct tallies *t, const struct readout *r,
                      const struct seqrun *seq, int64_t time, bool final);

/* A JSON number, or null when x is not finite. */
json_t *json_num(double x);

#endif
