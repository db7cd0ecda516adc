/*
 * readout.h — the analysis of one moment of an experiment: effects per
 * metric and arm, sample-ratio tests, the integrity checks and the verdict.
 * A pure function of the merged tallies and the config (no I/O).
 *
 * Checks and their defaults (config "integrity"; README lists the sources):
 *   srm            overall SRM p < srm.threshold                     → fail
 *   srm_day        SRM of each first-exposure day, Holm-adjusted     → warn
 *   srm_segment    SRM of each attrs key=value, Holm-adjusted        → warn; fail if > 5% of units
 *   multi_arm      any unit in two arms                              → warn; share > multi_arm_fail → fail
 *   multi_arm_by_arm  multi-arm units not in proportion to arms      → fail
 *   outside_window share of assignments outside the window           → warn
 *   duplicates     share of duplicate lines                          → warn
 *   duplicates_by_arm duplicates not in proportion to units          → fail
 *   rejected       share of rejected lines > rejected_warn / _fail   → warn / fail
 *   late           share of assignments later than the lateness bound → warn
 *   balance        |SMD| of a metric's pre-period covariate > smd_warn → warn
 *   denominator    a ratio metric's denominator differs by arm        → warn
 *   hash           any assignment whose arm the hash does not give   → fail
 */
#ifndef ABTALLY_READOUT_H
#define ABTALLY_READOUT_H

#include <stdbool.h>

#include "config.h"
#include "report.h"
#include "stats.h"

enum verdict { VERDICT_SOUND = 0, VERDICT_DOUBTFUL = 1, VERDICT_FAILED = 2 };
enum severity { SEV_WARN = 1, SEV_FAIL = 2 };

#define READOUT_MAX_REASONS 64

struct reason {
    char check[24];   /* e.g. "srm", "balance" */
    int severity;     /* enum severity */
    char detail[240]; /* one plain sentence with the numbers */
};

struct srm_part {
    char name[96];    /* day "2026-11-03" or segment "platform=ios" */
    double units;     /* units in it */
    double p;         /* SRM p */
    double p_adj;     /* Holm-adjusted over the days (or segments) */
    uint64_t arm_units[CONFIG_MAX_ARMS]; /* units per arm */
};

struct readout {
    struct srm_result srm;
    double srm_logbf;     /* sequential Dirichlet-multinomial log Bayes factor */
    double p_seq;         /* always-valid p: running minimum of e^{-logBF} */
    bool srm_alarm;
    struct effect eff[CONFIG_MAX_METRICS][CONFIG_MAX_ARMS];
    double p_adjusted[CONFIG_MAX_METRICS][CONFIG_MAX_ARMS]; /* Holm over primaries (guardrails: over guardrails' p_harm; secondary: BH) */
    double smd[CONFIG_MAX_METRICS];       /* covariate balance (treatment arm 1 vs control for 2 arms; max |SMD| over arms) */
    struct srm_part *days;                /* owned */
    int n_days;
    struct srm_part *segments;            /* owned */
    int n_segments;
    int verdict;
    struct reason reasons[READOUT_MAX_REASONS];
    int n_reasons;
};

/* Computes the readout. p_seq_prev: the always-valid SRM p before this
 * moment (1 at the start). Returns AB_OK or AB_EINPUT (out of memory). */
int readout_compute(struct readout *r, const struct config *cfg, const struct tallies *t,
                    double p_seq_prev);
void readout_release(struct readout *r);

const char *verdict_name(int v);

#endif
