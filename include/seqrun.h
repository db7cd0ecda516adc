/*
 * seqrun.h — sequential monitoring of a running experiment: the state that
 * lives from one record (or one `check`) to the next, per metric and arm.
 *
 *   spending  looks at every sequential.look_every of event time (and at the
 *             final summary); the information fraction is units so far over
 *             sequential.planned_units; each look's bound is frozen
 *             (seq_monitor); a metric "crosses" when |z| ≥ bound (one-sided:
 *             in the direction of "better", default higher) and stays crossed.
 *   mixture   mSPRT: log Λ at every record, the always-valid p as a running
 *             minimum, the always-valid interval as a running intersection.
 *             τ² from sequential.tau, or else fixed once, at the first record
 *             after burn-in, as seq_msprt_tau2 of the variance scaled to
 *             planned_units — the nuisance variance, never the effect.
 *   sequence  the asymptotic confidence sequence (running intersection),
 *             computed by the same half-width with τ² = ρ²σ²; ρ² from
 *             sequential.rho or tuned to planned_units.
 * No verdict before sequential.burn_in units in each arm of a comparison.
 * Pure: no I/O (seqrun_to_json / seqrun_from_json convert for the caller).
 */
#ifndef ABTALLY_SEQRUN_H
#define ABTALLY_SEQRUN_H

#include <jansson.h>
#include <stdbool.h>
#include <stdint.h>

#include "config.h"
#include "report.h"
#include "seq.h"
#include "stats.h"

enum seq_verdict { SV_RUNNING = 0, SV_UPPER, SV_LOWER, SV_BURN_IN };

struct seq_cell {
    int verdict;        /* enum seq_verdict */
    double info;        /* spending: information fraction; mixture/sequence: 1/V */
    double z;           /* diff / se */
    double bound;       /* spending: the bound of the latest look */
    double p_always;    /* mixture: running minimum of e^{−logΛ} */
    double lo, hi;      /* mixture/sequence: running intersection of the intervals */
    double tau2;        /* mixture: the fixed mixing variance (0 before it is set) */
};

#define SEQRUN_MAX_LOOKS 1000

struct seqrun {
    const struct config *cfg;
    struct seq_monitor mon;
    bool mon_ok;
    int n_looks;
    struct seq_look looks[SEQRUN_MAX_LOOKS];
    int64_t look_time[SEQRUN_MAX_LOOKS];
    int64_t next_look;  /* event time of the next planned look */
    struct seq_cell cell[CONFIG_MAX_METRICS][CONFIG_MAX_ARMS];
};

/* Starts monitoring (no looks). AB_EINPUT when the design is invalid. */
int seqrun_init(struct seqrun *s, const struct config *cfg, struct err *e);

/* Updates the state with the estimates of a record at event time `time`
 * (effects from the readout: diff and se per metric and arm). `final`: the
 * final summary (spending: a look whenever the fraction moved). */
void seqrun_update(struct seqrun *s, const struct tallies *t, const struct effect (*eff)[CONFIG_MAX_ARMS],
                   int64_t time, bool final);

/* The record's "sequential" fields of one metric and arm, or NULL when the
 * method is none. */
json_t *seqrun_cell_json(const struct seqrun *s, int m, int a);

/* The look schedule so far (for the record and the state). */
json_t *seqrun_looks_json(const struct seqrun *s);

/* Persisted form (check --state keeps it in DIR/sequential.json). */
json_t *seqrun_to_json(const struct seqrun *s);
int seqrun_from_json(struct seqrun *s, const json_t *j, struct err *e);

const char *seq_verdict_name(int v);

#endif
