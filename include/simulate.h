/*
 * simulate.h — the event-log generator behind `abtally simulate`.
 *
 * The scenario is invented: Greenmoss, an online plant nursery, tests a new
 * checkout page. Each unit (a shopper) first sees the experiment at a
 * uniformly random moment of the experiment days; that moment is its
 * assignment. A latent activity rate λ (sessions per day, gamma distributed)
 * drives its sessions (a Poisson process), in the pre-period before exposure
 * as after it, so the pre-period covariate correlates with the outcome. Each
 * session converts with a probability (an order with a lognormal value a few
 * minutes later) and shows a Poisson number of page errors. Treatment effects
 * are relative and multiply one model quantity in the treated arm:
 *
 *   order_value  the mean value of an order
 *   converted    the probability that a session converts
 *   page_error   the mean number of page errors per session
 *   sessions     the activity rate λ after exposure
 *
 * With only an order_value effect, the per-unit order_value metric of the
 * written config moves by exactly that relative amount.
 *
 * Faults can be injected, each from a given day on (see enum sim_fault_kind).
 * Each fault draws from its own random stream, apart from the model's, so
 * adding or removing one fault never changes the events themselves nor the
 * lines another fault picks.
 *
 * The generator does no I/O: it hands the log to a sink callback in large
 * chunks of whole lines. Output is a pure function of the options (GSL's
 * mt19937 and its distributions), the same bytes for the same seed.
 *
 * Memory: one 24-byte record per line (about 500 MB for 20M lines), held in
 * hourly buckets of blocks; each bucket is sorted and written, then freed.
 */
#ifndef ABTALLY_SIMULATE_H
#define ABTALLY_SIMULATE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "err.h"

#define SIM_MAX_ARMS 16        /* arms per simulated experiment */
#define SIM_NAME_MAX 64        /* arm and experiment names, with the NUL */
#define SIM_MAX_UNITS 100000000ULL
#define SIM_MAX_DAYS 366
#define SIM_MAX_LATE_US (INT64_C(24) * 3600 * 1000000) /* the late fault's largest delay */

/* The model quantities a relative effect can move (see the file comment). */
enum sim_metric {
    SIM_M_ORDER_VALUE = 0,
    SIM_M_CONVERTED,
    SIM_M_PAGE_ERROR,
    SIM_M_SESSIONS,
    SIM_N_METRICS
};

/* Faults and the syntax of --fault. FROM_DAY is 1-based (1: the first day of
 * the experiment); without it a line fault acts on the whole log, the
 * pre-period included. */
enum sim_fault_kind {
    SIM_F_LOSE_ASSIGN = 0, /* lose-assign:ARM:FRACTION[:FROM_DAY]  drop that share of ARM's assignments */
    SIM_F_MULTI_ARM,       /* multi-arm:FRACTION[:FROM_DAY]        a second assignment to another arm */
    SIM_F_DUPLICATE,       /* duplicate:FRACTION[:FROM_DAY]        repeat lines (same id) within a minute */
    SIM_F_MALFORMED,       /* malformed:FRACTION[:FROM_DAY]        replace lines by broken ones */
    SIM_F_LATE,            /* late:FRACTION:MAXDELAY[:FROM_DAY]    write lines up to MAXDELAY after their time */
    SIM_F_SELF_SELECT,     /* self-select:STRENGTH[:FROM_DAY]      treatment more likely for active units */
    SIM_N_FAULTS
};

/* The four kinds of broken line of the malformed fault, in the order of
 * sim_stats.malformed; each is rejected by abtally's decoder for one reason. */
enum sim_broken {
    SIM_B_NOT_JSON = 0, /* the line cut short */
    SIM_B_MISSING,      /* no "unit" field */
    SIM_B_BAD_TIME,     /* a day-month-year time */
    SIM_B_BAD_TYPE,     /* a number where a string belongs (or the reverse) */
    SIM_N_BROKEN
};

struct sim_fault {
    bool on;
    double amount;        /* the fraction of lines or units; self-select: the strength */
    int64_t max_delay_us; /* late: the largest delay */
    int from_day;         /* the fault acts on lines (units: exposures) from the start of this
                           * 1-based experiment day on; 0: on the whole log, pre-period too */
};

struct sim_opts {
    uint64_t units;            /* units exposed over the experiment */
    int days;                  /* experiment days: the window [start, start + days) */
    int pre_days;              /* days of pre-period activity before each exposure */
    int64_t start_us;          /* window start, µs since the epoch (UTC midnight) */
    char experiment[SIM_NAME_MAX];
    int n_arms;
    char arms[SIM_MAX_ARMS][SIM_NAME_MAX]; /* arms[0] is the control */
    double weights[SIM_MAX_ARMS];          /* positive; normalized by sim_run */
    double effect[SIM_MAX_ARMS][SIM_N_METRICS]; /* relative effect per arm (row 0 unused) */
    uint64_t seed;

    /* the model (defaults from sim_opts_default) */
    double sessions_per_day;   /* mean of λ */
    double activity_shape;     /* gamma shape of λ (smaller: more spread between units) */
    double conversion;         /* probability that a session converts */
    double order_value;        /* mean value of an order */
    double order_sigma;        /* lognormal σ of an order's value */
    double errors_per_session; /* mean page errors per session */

    struct sim_fault fault[SIM_N_FAULTS];
    struct sim_fault lose[SIM_MAX_ARMS]; /* lose-assign, per arm (fault[SIM_F_LOSE_ASSIGN] unused) */
};

/* What a run produced, for the summary line and for tests. */
struct sim_stats {
    uint64_t units;
    uint64_t units_by_arm[SIM_MAX_ARMS]; /* by the unit's first (drawn) arm */
    uint64_t lines;                      /* lines written, broken ones and repeats included */
    uint64_t assignments;                /* assignment lines written intact (repeats excluded) */
    uint64_t outcomes;                   /* outcome lines written intact (repeats excluded) */
    uint64_t lost_assignments;           /* lose-assign: assignments dropped */
    uint64_t lost_by_arm[SIM_MAX_ARMS];
    uint64_t multi_arm_units;            /* units given a second assignment */
    uint64_t duplicates;                 /* repeated lines */
    uint64_t malformed[SIM_N_BROKEN];    /* broken lines by kind */
    uint64_t late;                       /* lines written after their time */
    uint64_t capped_units;               /* units whose events hit the per-unit cap */
};

/* Receives the log: len bytes of whole lines. Returns 0, or non-zero to stop
 * the run (sim_run then returns AB_EINPUT). */
typedef int (*sim_sink)(void *ctx, const char *buf, size_t len);

/* The defaults of `abtally simulate` (20000 units, 14 days from 2026-11-02,
 * control/treatment 50/50, 14 pre-period days, seed 1, no effects, no faults). */
void sim_opts_default(struct sim_opts *o);

/* Sets the arms from "a,b,..." (names of [A-Za-z0-9_.-], distinct, the first
 * the control) with equal weights; clears effects and lose-assign faults.
 * Returns AB_OK or AB_EUSAGE with the reason in *e. */
int sim_set_arms(struct sim_opts *o, const char *list, struct err *e);
/* Sets the weights from "w1,w2,..." (positive, one per arm). */
int sim_set_weights(struct sim_opts *o, const char *list, struct err *e);
/* Applies "[ARM:]METRIC=REL" (REL > -1; no ARM: every arm but the control). */
int sim_parse_effect(struct sim_opts *o, const char *spec, struct err *e);
/* Applies one fault spec (syntax at enum sim_fault_kind). Arms and days must
 * be set first. A fault given twice (lose-assign: twice for one arm) is an error. */
int sim_parse_fault(struct sim_opts *o, const char *spec, struct err *e);
/* Checks the whole option set (ranges, conversion * (1 + effect) <= 1, ...). */
int sim_validate(const struct sim_opts *o, struct err *e);

/* Generates the log into sink. *st (may be NULL) receives the counts.
 * Returns AB_OK, AB_EUSAGE for invalid options, or AB_EINPUT when out of
 * memory or when the sink refused (the message in *e). */
int sim_run(const struct sim_opts *o, sim_sink sink, void *ctx, struct sim_stats *st,
            struct err *e);

/* Writes the experiment config matching the log (DESIGN.md schema, one JSON
 * object and a newline) into buf[0..n). Returns the length it needs (without
 * the NUL), like snprintf; the text is complete when that is < n. */
size_t sim_config_json(const struct sim_opts *o, char *buf, size_t n);

/* The name of a fault kind ("lose-assign", ...), of a metric ("order_value",
 * ...) and of a broken-line kind (the decoder's reason, "not_json", ...). */
const char *sim_fault_name(int kind);
const char *sim_metric_name(int m);
const char *sim_broken_name(int b);

#endif
