/*
 * cmd_srm.c — `abtally srm`: the sample-ratio mismatch test from unit counts.
 *
 * Reads counts (and optional weights) from the command line only, runs
 * srm_test (stats.c) and prints a short text or one JSON object. Exit status:
 * 0 when the test ran (a mismatch is a result, not an error), 1 for a bad
 * number, 2 for wrong usage. Errors are one line `abtally: srm: <why>`.
 */
#include <errno.h>
#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "err.h"
#include "stats.h"

/* Counts above this are not exact in a double. */
#define SRM_MAX_COUNT 9007199254740992.0

static const char srm_usage[] =
    "usage: abtally srm COUNT COUNT... [--weights W...] [--threshold P] [--json]\n"
    "\n"
    "Checks whether units split between the arms as configured (sample-ratio\n"
    "mismatch). Give the number of distinct exposed units of each arm, in arm\n"
    "order. A mismatch means assignment or logging is broken somewhere: the\n"
    "experiment's estimates cannot be trusted until the cause is found.\n"
    "\n"
    "The test is Pearson's chi-square against the configured split, with\n"
    "arms - 1 degrees of freedom. With two arms and an expected count below 5 it\n"
    "is the exact binomial test; with more arms and so few units there is no test.\n"
    "\n"
    "options:\n"
    "  -w, --weights W...  the configured allocation: numbers after the option\n"
    "                      (--weights 2 1 1) or comma-separated (0.5,0.25,0.25);\n"
    "                      positive, one per arm, normalized to sum 1. Put the\n"
    "                      counts before this option. Default: equal split.\n"
    "  -t, --threshold P   report a mismatch when p < P (default 0.001)\n"
    "      --json          print {\"chi2\":x,\"df\":k,\"p\":x,\"test\":..,\"n\":N,\"alarm\":bool};\n"
    "                      test is \"chi2\", \"binomial\", \"insufficient\" (too few\n"
    "                      units for more than two arms) or \"none\" (no units);\n"
    "                      null where undefined\n"
    "  -h, --help          print this help\n"
    "      --version       print the version\n"
    "\n"
    "example: a 50/25/25 test that logged 5100, 2400 and 2500 units\n"
    "  $ abtally srm 5100 2400 2500 --weights 0.5,0.25,0.25\n"
    "  counts    5100 2400 2500 (N = 10000)\n"
    "  expected  5000 2500 2500\n"
    "  chi2      6 on 2 df\n"
    "  p         0.0498 (chi-square test)\n"
    "  verdict   no mismatch at p < 0.001\n";

/* Parsed command line. */
struct srm_args {
    double *counts;   /* counts[0..nc) */
    int nc;
    double *weights;  /* weights[0..nw) */
    int nw;
    double threshold; /* mismatch when p < threshold */
    int json;         /* print JSON */
};

/* Parses a whole-number count into *out. Returns 0 or AB_EINPUT (reported). */
static int parse_count(const char *s, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (end == s || *end || errno || !isfinite(v) || v < 0 || v != floor(v) || v > SRM_MAX_COUNT)
        return cli_error(AB_EINPUT, "srm: count '%s' is not a whole number >= 0", s);
    *out = v;
    return AB_OK;
}

/* Appends the comma-separated positive numbers of s to a->weights. */
static int parse_weights(const char *s, struct srm_args *a)
{
    const char *p = s;
    for (;;) {
        const char *comma = strchr(p, ',');
        size_t len = comma ? (size_t)(comma - p) : strlen(p);
        char buf[64];
        if (len == 0 || len >= sizeof buf)
            return cli_error(AB_EINPUT, "srm: weights '%s': '%.*s' is not a positive number", s,
                             (int)(len < 32 ? len : 32), p);
        memcpy(buf, p, len);
        buf[len] = 0;
        char *end;
        errno = 0;
        double v = strtod(buf, &end);
        if (end == buf || *end || errno || !isfinite(v) || !(v > 0))
            return cli_error(AB_EINPUT, "srm: weight '%s' is not a positive number", buf);
        a->weights[a->nw++] = v;
        if (!comma)
            return AB_OK;
        p = comma + 1;
    }
}

/* True when s reads as a negative number (getopt would take it for an option). */
static int is_negative_number(const char *s)
{
    if (s[0] != '-' || !s[1])
        return 0;
    char *end;
    (void)strtod(s, &end);
    return end != s && (*end == 0 || *end == ',');
}

static int parse_args(int argc, char **argv, struct srm_args *a)
{
    static const struct option longopts[] = {
        {"weights", required_argument, NULL, 'w'},
        {"threshold", required_argument, NULL, 't'},
        {"json", no_argument, NULL, 'j'},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, 'V'},
        {NULL, 0, NULL, 0},
    };
    for (int i = 1; i < argc; i++)
        if (is_negative_number(argv[i]))
            return cli_error(AB_EINPUT, "srm: '%s': counts and weights must not be negative", argv[i]);

    int in_weights = 0, c;
    opterr = 0;
    optind = 0; /* glibc: start a fresh scan */
    /* '-': non-options come back in order as code 1, so numbers that follow
     * --weights can be told from the counts before it; ':': report a missing
     * argument as ':' */
    while ((c = getopt_long(argc, argv, "-:w:t:h", longopts, NULL)) != -1) {
        int rc = AB_OK;
        switch (c) {
        case 1:
            if (in_weights)
                rc = parse_weights(optarg, a);
            else
                rc = parse_count(optarg, &a->counts[a->nc++]);
            break;
        case 'w':
            rc = parse_weights(optarg, a);
            in_weights = 1;
            break;
        case 't': {
            char *end;
            errno = 0;
            a->threshold = strtod(optarg, &end);
            if (end == optarg || *end || errno || !(a->threshold > 0 && a->threshold < 1))
                rc = cli_error(AB_EINPUT, "srm: threshold '%s' is not a number in (0, 1)", optarg);
            in_weights = 0;
            break;
        }
        case 'j':
            a->json = 1;
            in_weights = 0;
            break;
        case 'h':
            return -1;
        case 'V':
            return -2;
        case ':':
            return cli_error(AB_EUSAGE, "srm: option '%s' needs a value (try 'abtally srm --help')",
                             argv[optind - 1]);
        default:
            if (optopt)
                return cli_error(AB_EUSAGE, "srm: unknown option '-%c' (try 'abtally srm --help')", optopt);
            return cli_error(AB_EUSAGE, "srm: unknown option '%s' (try 'abtally srm --help')",
                             argv[optind - 1]);
        }
        if (rc != AB_OK)
            return rc;
    }
    for (; optind < argc; optind++) /* after "--" */
        if (parse_count(argv[optind], &a->counts[a->nc++]) != AB_OK)
            return AB_EINPUT;
    if (a->nc < 2)
        return cli_error(AB_EUSAGE, "srm: need the counts of at least two arms (try 'abtally srm --help')");
    if (a->nw && a->nw != a->nc)
        return cli_error(AB_EUSAGE, "srm: %d weights for %d arms (give one weight per arm, after the counts)",
                         a->nw, a->nc);
    return AB_OK;
}

/* A double as JSON: %.17g, or null when not finite. */
static const char *json_num(char *buf, size_t len, double v)
{
    if (!isfinite(v))
        return "null";
    snprintf(buf, len, "%.17g", v);
    return buf;
}

static const char *test_name(int test)
{
    switch (test) {
    case SRM_TEST_CHI2:
        return "chi2";
    case SRM_TEST_BINOMIAL:
        return "binomial";
    case SRM_TEST_INSUFFICIENT:
        return "insufficient";
    default:
        return "none";
    }
}

static void print_json(const struct srm_result *r, double threshold)
{
    char b1[32], b2[32], b3[32], b4[32];
    const char *alarm = isnan(r->p) ? "null" : r->p < threshold ? "true" : "false";
    printf("{\"chi2\":%s,\"df\":%s,\"p\":%s,\"test\":\"%s\",\"n\":%s,\"alarm\":%s}\n",
           json_num(b1, sizeof b1, r->chi2), json_num(b2, sizeof b2, r->df), json_num(b3, sizeof b3, r->p),
           test_name(r->test), json_num(b4, sizeof b4, r->n), alarm);
}

static void print_text(const struct srm_args *a, const struct srm_result *r)
{
    double sw = 0;
    for (int i = 0; i < a->nc; i++)
        sw += a->nw ? a->weights[i] : 1.0;
    printf("counts   ");
    for (int i = 0; i < a->nc; i++)
        printf(" %.0f", a->counts[i]);
    printf(" (N = %.0f)\nexpected ", r->n);
    for (int i = 0; i < a->nc; i++)
        printf(" %.6g", r->n * (a->nw ? a->weights[i] : 1.0) / sw);
    printf("\n");
    if (isfinite(r->chi2))
        printf("chi2      %.6g on %.0f df\n", r->chi2, r->df);
    if (r->flags & SRM_NO_UNITS) {
        printf("p         none: no units\n");
        return;
    }
    if (r->test == SRM_TEST_INSUFFICIENT) {
        printf("p         none: an expected count is below 5 with more than two arms\n"
               "verdict   not enough units to test; check again later\n");
        return;
    }
    printf("p         %.3g (%s)\n", r->p,
           r->test == SRM_TEST_BINOMIAL ? "exact binomial test: an expected count is below 5"
                                        : "chi-square test");
    if (r->p < a->threshold)
        printf("verdict   MISMATCH at p < %g: the units did not split as configured\n", a->threshold);
    else
        printf("verdict   no mismatch at p < %g\n", a->threshold);
}

int cmd_srm(int argc, char **argv)
{
    size_t cap = 1;
    for (int i = 1; i < argc; i++) {
        cap++;
        for (const char *s = argv[i]; *s; s++)
            cap += *s == ',';
    }
    struct srm_args a = {NULL, 0, NULL, 0, 0.001, 0};
    int rc = AB_EINPUT;
    a.counts = malloc(cap * sizeof *a.counts);
    a.weights = malloc(cap * sizeof *a.weights);
    if (!a.counts || !a.weights) {
        cli_error(AB_EINPUT, "srm: out of memory");
        goto out;
    }
    rc = parse_args(argc, argv, &a);
    if (rc == -1) {
        rc = cli_usage(srm_usage, 1);
        goto out;
    }
    if (rc == -2) {
        rc = cli_version();
        goto out;
    }
    if (rc != AB_OK)
        goto out;

    struct srm_result r;
    srm_test(a.counts, a.nw ? a.weights : NULL, a.nc, &r);
    if (r.flags & SRM_BAD_ARG) {
        rc = cli_error(AB_EINPUT, "srm: the counts and weights do not make a test");
        goto out;
    }
    if (a.json)
        print_json(&r, a.threshold);
    else
        print_text(&a, &r);
    rc = AB_OK;
out:
    free(a.counts);
    free(a.weights);
    return rc;
}
