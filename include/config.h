/*
 * config.h — the experiment config (JSON; the schema is in DESIGN.md and the
 * README). config_load validates everything: every error names the key and
 * what is wrong, unknown keys are errors, weights are normalized to sum 1.
 */
#ifndef ABTALLY_CONFIG_H
#define ABTALLY_CONFIG_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "err.h"
#include "moments.h"
#include "seq.h"

#define CONFIG_MAX_ARMS 64     /* arms per experiment */
#define CONFIG_MAX_METRICS 64  /* metrics per experiment */
#define CONFIG_MAX_BYTES (4 * 1024 * 1024)

enum metric_role { ROLE_PRIMARY = 0, ROLE_GUARDRAIL = 1, ROLE_SECONDARY = 2 };
enum seq_method { SEQ_NONE = 0, SEQ_SPENDING, SEQ_MIXTURE, SEQ_SEQUENCE };

struct arm_cfg {
    char *name;
    double weight; /* normalized: the weights of all arms sum to 1 */
};

struct metric_cfg {
    char *name;
    enum metric_type type;
    char *event;          /* mean, binary: the outcome "metric" it sums */
    char *numerator;      /* ratio */
    char *denominator;    /* ratio */
    enum metric_role role;
    int better;           /* +1 higher is better, -1 lower is better, 0 unstated */
    bool has_window;      /* attribution_hours given */
    int64_t window_us;    /* attribution window length */
    bool has_cap;
    double cap;           /* per-unit values above cap are set to cap */
};

struct seq_cfg {
    enum seq_method method;
    enum seq_shape shape;   /* spending */
    double gamma;           /* hsd */
    double planned_units;   /* spending: total units at information fraction 1 */
    int64_t look_every_us;  /* spending: cadence of looks in event time */
    double tau;             /* mixture: mixing sd on the effect scale (0 = from planned_units) */
    double rho;             /* sequence: tuning ρ (0 = from planned_units) */
    int sides;              /* 1 or 2 */
    int burn_in_units;      /* per arm, before any verdict */
};

struct integrity_cfg {
    double p_fail;               /* p below this in a hard check is a failure */
    double multi_arm_fail;       /* share of units in two arms that fails */
    double outside_window_warn;  /* share of assignments outside the window */
    double duplicates_warn;      /* share of duplicate lines */
    double rejected_warn;        /* share of rejected lines */
    double rejected_fail;
    double smd_warn;             /* |SMD| of the pre-period covariate */
    double late_warn;            /* share of assignments later than the lateness bound */
};

struct hash_cfg {
    bool enabled;
    int function;          /* 0 sha256, 1 md5 */
    char *salt;
    char *format;          /* how the hashed string is formed; see README */
    uint64_t buckets;
    uint64_t lo[CONFIG_MAX_ARMS], hi[CONFIG_MAX_ARMS]; /* bucket range [lo, hi) per arm */
};

struct config {
    char *experiment;
    int n_arms;
    struct arm_cfg arms[CONFIG_MAX_ARMS];
    int control;              /* index of the control arm */
    int64_t window_start, window_end;
    int n_metrics;
    struct metric_cfg metrics[CONFIG_MAX_METRICS];
    bool has_covariate;
    int64_t pre_us;           /* covariate pre-period length */
    double alpha;
    double srm_threshold;
    double srm_prior;         /* Dirichlet prior concentration c (α_a = c·π_a) */
    bool srm_sequential;      /* alarm on the always-valid p (srm.test "sequential") instead of chi-square */
    struct seq_cfg seq;
    struct integrity_cfg integ;
    struct hash_cfg hash;
};

/* Parses and validates the JSON text (len bytes; `name` is used in messages). */
int config_parse(const char *text, size_t len, const char *name, struct config *c, struct err *e);
/* Reads and parses a file. */
int config_load(const char *path, struct config *c, struct err *e);
/* Frees what config_parse allocated; safe on a zeroed or released config. */
void config_release(struct config *c);

/* Index of the arm named s[0..n), or -1. */
int config_arm_index(const struct config *c, const char *s, size_t n);

#endif
