/*
 * cmd_plan.c — `abtally plan`: sample size, duration and the sequential
 * boundary schedule of an experiment, before it starts.
 *
 * Wiring only: flags in, seq.c's functions, a table or one JSON object out.
 */
#include <errno.h>
#include <getopt.h>
#include <math.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "err.h"
#include "seq.h"

static const char usage[] =
    "usage: abtally plan [--metric binary|mean --mde D (--baseline P | --sd S) ...]\n"
    "                    [--looks K | --fractions F1,F2,..] [--spending obf|pocock|hsd]\n"
    "\n"
    "Plans an experiment: how many units each arm needs to detect an effect, how\n"
    "many days that takes, and the efficacy bounds of a group-sequential design\n"
    "(Lan-DeMets alpha spending). Without --mde it prints the bounds alone.\n"
    "\n"
    "the effect to detect:\n"
    "      --metric binary|mean  binary: a conversion rate; mean: a per-unit mean\n"
    "      --baseline P          binary: the control rate, 0 < P < 1 (variance P(1-P));\n"
    "                            mean: the control mean (needed with --relative only)\n"
    "      --sd S                mean: the per-unit standard deviation\n"
    "      --mde D               the smallest effect worth detecting, as an absolute\n"
    "                            difference of the metric (0.0025 = 0.25 points)\n"
    "      --relative            read --mde as a fraction of --baseline (0.05 = 5%)\n"
    "      --weights W0,W1,..    traffic shares of the arms, control first (default\n"
    "                            0.5,0.5); each other arm is compared with the control\n"
    "                            at the full --alpha; the largest need sets the total\n"
    "      --daily-units U       units entering the experiment per day, all arms\n"
    "\n"
    "the test:\n"
    "      --alpha A             type I error (default 0.05)\n"
    "      --power P             chance to detect an effect of size --mde (default 0.8)\n"
    "      --sides 1|2           two-sided (default) or one-sided test\n"
    "\n"
    "the sequential design (default: one look, a fixed-horizon test):\n"
    "      --looks K             K equally spaced looks, the last at full information\n"
    "      --fractions F1,..,1   looks at these information fractions (increasing,\n"
    "                            at least 0.01 apart, the last = 1)\n"
    "      --spending SHAPE      obf (O'Brien-Fleming type, default), pocock, or hsd\n"
    "                            (Hwang-Shih-DeCani); two-sided designs spend alpha/2\n"
    "                            per side\n"
    "      --gamma G             hsd's parameter (default -4, OBF-like; 1 is Pocock-like)\n"
    "\n"
    "output:\n"
    "      --json                one JSON object: n_per_arm, n_total, days, inflation,\n"
    "                            looks[{fraction, z, alpha_spent, alpha_cumulative}];\n"
    "                            null where a value is not asked for\n"
    "  -h, --help                this help\n"
    "      --version             print the version\n"
    "\n"
    "The sample size is the fixed-horizon one, (z_{1-alpha/sides} + z_power)^2 *\n"
    "var * (1/w_arm + 1/w_control) / D^2, times the inflation factor of the design\n"
    "(its maximum over its fixed-horizon sample size at equal power). A look rejects\n"
    "when |Z| >= z (one-sided: Z >= z). Exit codes: 0 done, 1 bad value, 2 usage.\n"
    "\n"
    "examples:\n"
    "  abtally plan --metric binary --baseline 0.05 --mde 0.0025 --daily-units 20000 \\\n"
    "               --looks 5 --spending obf\n"
    "  abtally plan --looks 5 --spending pocock --alpha 0.05 --json\n";

/* The parsed command line. */
struct plan_args {
    const char *metric;   /* "binary", "mean" or NULL */
    double baseline;      /* NaN when absent */
    double sd;            /* NaN when absent */
    double mde;           /* NaN when absent */
    bool relative;        /* --mde is a fraction of --baseline */
    double alpha;         /* type I error */
    double power;         /* 1 − β */
    int arms;             /* number of weights */
    double weight[SEQ_MAX_ARMS];
    bool weights_given;   /* --weights was on the command line */
    double daily;         /* NaN when absent */
    int k;                /* looks */
    double t[SEQ_MAX_LOOKS];
    bool looks_given;     /* --looks */
    bool fractions_given; /* --fractions */
    enum seq_shape shape;
    double gamma;         /* NaN when absent */
    int sides;
    bool json;
};

/* Reads a whole finite number; -1 when s is not one. */
static int parse_num(const char *s, double *out)
{
    char *end;
    errno = 0;
    double x = strtod(s, &end);
    if (end == s || *end || errno == ERANGE || !isfinite(x))
        return -1;
    *out = x;
    return 0;
}

/* Reads "a,b,c" into v[0..max−1]; returns the count, or −1 when an item is
 * not a number or there are more than max. */
static int parse_list(const char *s, double *v, int max)
{
    int n = 0;
    const char *p = s;
    for (;;) {
        const char *comma = strchr(p, ',');
        size_t len = comma ? (size_t)(comma - p) : strlen(p);
        char item[64];
        if (n >= max || len == 0 || len >= sizeof item)
            return -1;
        memcpy(item, p, len);
        item[len] = '\0';
        if (parse_num(item, &v[n]))
            return -1;
        n++;
        if (!comma)
            return n;
        p = comma + 1;
    }
}

/* Prints x as %.17g, or null when it is not finite. */
static void json_num(double x)
{
    if (isfinite(x))
        printf("%.17g", x);
    else
        fputs("null", stdout);
}

/* Parses argv into *a. Sets *done when --help or --version has answered. */
static int parse_args(int argc, char **argv, struct plan_args *a, bool *done)
{
    enum {
        O_METRIC = 256, O_BASELINE, O_SD, O_MDE, O_RELATIVE, O_ALPHA, O_POWER, O_WEIGHTS,
        O_DAILY, O_LOOKS, O_FRACTIONS, O_SPENDING, O_GAMMA, O_SIDES, O_JSON, O_VERSION
    };
    static const struct option opts[] = {
        {"metric", required_argument, NULL, O_METRIC},
        {"baseline", required_argument, NULL, O_BASELINE},
        {"sd", required_argument, NULL, O_SD},
        {"mde", required_argument, NULL, O_MDE},
        {"relative", no_argument, NULL, O_RELATIVE},
        {"alpha", required_argument, NULL, O_ALPHA},
        {"power", required_argument, NULL, O_POWER},
        {"weights", required_argument, NULL, O_WEIGHTS},
        {"daily-units", required_argument, NULL, O_DAILY},
        {"looks", required_argument, NULL, O_LOOKS},
        {"fractions", required_argument, NULL, O_FRACTIONS},
        {"spending", required_argument, NULL, O_SPENDING},
        {"gamma", required_argument, NULL, O_GAMMA},
        {"sides", required_argument, NULL, O_SIDES},
        {"json", no_argument, NULL, O_JSON},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    bool spending_given = false;
    int c;
    optind = 1;
    opterr = 0; /* our own one-line messages */
    while ((c = getopt_long(argc, argv, "h", opts, NULL)) != -1) {
        double *num = NULL;
        const char *flag = NULL;
        switch (c) {
        case O_METRIC:
            if (strcmp(optarg, "binary") && strcmp(optarg, "mean"))
                return cli_error(AB_EUSAGE, "plan: --metric '%s': expected binary or mean",
                                 optarg);
            a->metric = optarg;
            break;
        case O_BASELINE: num = &a->baseline, flag = "--baseline"; break;
        case O_SD: num = &a->sd, flag = "--sd"; break;
        case O_MDE: num = &a->mde, flag = "--mde"; break;
        case O_RELATIVE: a->relative = true; break;
        case O_ALPHA: num = &a->alpha, flag = "--alpha"; break;
        case O_POWER: num = &a->power, flag = "--power"; break;
        case O_DAILY: num = &a->daily, flag = "--daily-units"; break;
        case O_GAMMA: num = &a->gamma, flag = "--gamma"; break;
        case O_WEIGHTS:
            a->arms = parse_list(optarg, a->weight, SEQ_MAX_ARMS);
            if (a->arms < 0)
                return cli_error(AB_EUSAGE,
                                 "plan: --weights '%s': expected up to %d numbers like 0.5,0.5",
                                 optarg, SEQ_MAX_ARMS);
            a->weights_given = true;
            break;
        case O_LOOKS: {
            char *end;
            errno = 0;
            long k = strtol(optarg, &end, 10);
            if (end == optarg || *end || errno == ERANGE)
                return cli_error(AB_EUSAGE, "plan: --looks '%s': expected a whole number",
                                 optarg);
            if (k < 1 || k > SEQ_MAX_LOOKS)
                return cli_error(AB_EINPUT, "plan: --looks %ld: must be in 1..%d", k,
                                 SEQ_MAX_LOOKS);
            a->k = (int)k;
            a->looks_given = true;
            break;
        }
        case O_FRACTIONS:
            a->k = parse_list(optarg, a->t, SEQ_MAX_LOOKS);
            if (a->k < 0)
                return cli_error(AB_EUSAGE,
                                 "plan: --fractions '%s': expected numbers like 0.2,0.5,1",
                                 optarg);
            a->fractions_given = true;
            break;
        case O_SPENDING:
            if (seq_shape_parse(optarg, &a->shape))
                return cli_error(AB_EUSAGE, "plan: --spending '%s': expected obf, pocock or hsd",
                                 optarg);
            spending_given = true;
            break;
        case O_SIDES:
            if (strcmp(optarg, "1") && strcmp(optarg, "2"))
                return cli_error(AB_EUSAGE, "plan: --sides '%s': expected 1 or 2", optarg);
            a->sides = optarg[0] - '0';
            break;
        case O_JSON: a->json = true; break;
        case 'h': *done = true; return cli_usage(usage, 1);
        case O_VERSION: *done = true; return cli_version();
        default:
            return cli_error(AB_EUSAGE,
                             "plan: '%s': unknown option or missing value (try 'abtally plan "
                             "--help')",
                             argv[optind - 1]);
        }
        if (num && parse_num(optarg, num))
            return cli_error(AB_EUSAGE, "plan: %s '%s': not a number", flag, optarg);
    }
    if (optind < argc)
        return cli_error(AB_EUSAGE, "plan: '%s': unexpected argument (try 'abtally plan --help')",
                         argv[optind]);
    if (a->looks_given && a->fractions_given)
        return cli_error(AB_EUSAGE, "plan: --looks and --fractions: give one of them");
    if (!isnan(a->gamma) && a->shape != SEQ_HSD)
        return cli_error(AB_EUSAGE, "plan: --gamma: only with --spending hsd");
    if (spending_given && a->shape == SEQ_HSD && isnan(a->gamma))
        a->gamma = -4.0;
    bool size = !isnan(a->mde);
    if (!size && (a->metric || !isnan(a->baseline) || !isnan(a->sd) || a->relative ||
                  a->weights_given || !isnan(a->daily)))
        return cli_error(AB_EUSAGE,
                         "plan: --metric, --baseline, --sd, --relative, --weights and "
                         "--daily-units ask for a sample size: give --mde too");
    if (size) {
        if (!a->metric)
            return cli_error(AB_EUSAGE, "plan: --mde: give --metric binary or --metric mean");
        bool binary = !strcmp(a->metric, "binary");
        if (binary && isnan(a->baseline))
            return cli_error(AB_EUSAGE,
                             "plan: --metric binary: give --baseline (the control rate)");
        if (binary && !isnan(a->sd))
            return cli_error(AB_EUSAGE, "plan: --sd: only with --metric mean");
        if (!binary && isnan(a->sd))
            return cli_error(AB_EUSAGE, "plan: --metric mean: give --sd");
        if (a->relative && isnan(a->baseline))
            return cli_error(AB_EUSAGE, "plan: --relative: give --baseline");
        if (a->arms < 2)
            return cli_error(AB_EUSAGE, "plan: --weights: give at least two arms, control first");
    }
    return AB_OK;
}

/* Checks the values and fills the design; AB_EINPUT with a message. */
static int check_values(struct plan_args *a, struct seq_design *d)
{
    if (!(a->alpha > 0 && a->alpha < 1) || (a->sides == 1 && !(a->alpha < 0.5)))
        return cli_error(AB_EINPUT, "plan: --alpha %g: must be in (0, %s)", a->alpha,
                         a->sides == 1 ? "0.5" : "1");
    double level = seq_side_level(a->alpha, a->sides);
    if (!(a->power > level && a->power < 1))
        return cli_error(AB_EINPUT, "plan: --power %g: must be in (%g, 1)", a->power, level);
    if (a->fractions_given) {
        for (int i = 0; i < a->k; i++) {
            double prev = i ? a->t[i - 1] : 0;
            if (!(a->t[i] > prev))
                return cli_error(AB_EINPUT, "plan: --fractions: %g after %g: must increase from 0",
                                 a->t[i], prev);
        }
        if (a->t[a->k - 1] != 1.0)
            return cli_error(AB_EINPUT, "plan: --fractions: the last fraction is %g: must be 1",
                             a->t[a->k - 1]);
    } else {
        seq_equal_fractions(a->k, a->t);
    }
    for (int i = 0; i < a->k; i++)
        if (seq_look_too_close(i ? a->t[i - 1] : 0, a->t[i], SEQ_MIN_GAP))
            return cli_error(AB_EINPUT,
                             "plan: look %d at fraction %g: less than %g after the one before "
                             "(at most %d equal looks)",
                             i + 1, a->t[i], SEQ_MIN_GAP, (int)(1.0 / SEQ_MIN_GAP));
    *d = (struct seq_design){a->shape, a->shape == SEQ_HSD ? a->gamma : 0, a->alpha, a->sides,
                             0};
    if (isnan(a->mde))
        return AB_OK;
    bool binary = !strcmp(a->metric, "binary");
    if (binary && !(a->baseline > 0 && a->baseline < 1))
        return cli_error(AB_EINPUT, "plan: --baseline %g: a rate must be in (0, 1)", a->baseline);
    if (!binary && !(a->sd > 0))
        return cli_error(AB_EINPUT, "plan: --sd %g: must be positive", a->sd);
    if (a->relative && !(a->baseline != 0))
        return cli_error(AB_EINPUT, "plan: --relative: --baseline must not be 0");
    if (!(a->mde > 0))
        return cli_error(AB_EINPUT, "plan: --mde %g: must be positive", a->mde);
    for (int i = 0; i < a->arms; i++)
        if (!(a->weight[i] > 0))
            return cli_error(AB_EINPUT, "plan: --weights: %g: must be positive", a->weight[i]);
    if (!isnan(a->daily) && !(a->daily > 0))
        return cli_error(AB_EINPUT, "plan: --daily-units %g: must be positive", a->daily);
    return AB_OK;
}

static void print_json(const struct plan_args *a, const struct seq_size *sz, double days,
                       double inflation, const struct seq_look *looks)
{
    fputs("{\"n_per_arm\":", stdout);
    if (sz) {
        putchar('[');
        for (int i = 0; i < a->arms; i++) {
            if (i)
                putchar(',');
            json_num(sz->n_arm[i]);
        }
        putchar(']');
    } else {
        fputs("null", stdout);
    }
    fputs(",\"n_total\":", stdout);
    json_num(sz ? sz->n_total : NAN);
    fputs(",\"days\":", stdout);
    json_num(days);
    fputs(",\"inflation\":", stdout);
    json_num(inflation);
    fputs(",\"looks\":[", stdout);
    for (int i = 0; i < a->k; i++) {
        printf("%s{\"fraction\":", i ? "," : "");
        json_num(looks[i].t);
        fputs(",\"z\":", stdout);
        json_num(looks[i].z);
        fputs(",\"alpha_spent\":", stdout);
        json_num(looks[i].alpha_spent);
        fputs(",\"alpha_cumulative\":", stdout);
        json_num(looks[i].alpha_cum);
        putchar('}');
    }
    fputs("]}\n", stdout);
}

static void print_text(const struct plan_args *a, const struct seq_size *sz, double mde_abs,
                       double days, double inflation, const struct seq_look *looks)
{
    printf("design\n");
    if (sz) {
        if (!strcmp(a->metric, "binary"))
            printf("  %-15s binary, baseline rate %g (variance %g)\n", "metric", a->baseline,
                   a->baseline * (1 - a->baseline));
        else
            printf("  %-15s mean, sd %g\n", "metric", a->sd);
        if (a->relative)
            printf("  %-15s %g absolute (%g relative to %g)\n", "effect", mde_abs, a->mde,
                   a->baseline);
        else
            printf("  %-15s %g absolute\n", "effect", mde_abs);
        printf("  %-15s", "weights");
        for (int i = 0; i < a->arms; i++)
            printf(" %g", a->weight[i]);
        printf(" (control first)\n");
    }
    printf("  %-15s %s, alpha %g, power %g\n", "test", a->sides == 2 ? "two-sided" : "one-sided",
           a->alpha, a->power);
    if (a->k == 1)
        printf("  %-15s one look (fixed horizon)\n", "looks");
    else if (a->shape == SEQ_HSD)
        printf("  %-15s %d, spending hsd (gamma %g)%s\n", "looks", a->k, a->gamma,
               a->sides == 2 ? ", alpha/2 per side" : "");
    else
        printf("  %-15s %d, spending %s%s\n", "looks", a->k, seq_shape_name(a->shape),
               a->sides == 2 ? ", alpha/2 per side" : "");
    printf("  %-15s %.4f\n", "inflation", inflation);
    if (sz) {
        printf("\nsample size\n  %-15s", "units per arm");
        for (int i = 0; i < a->arms; i++)
            printf(" %.0f", sz->n_arm[i]);
        printf("\n  %-15s %.0f\n", "total units", sz->n_total);
        if (isfinite(days)) {
            double weeks = ceil(days / 7.0);
            printf("  %-15s %.0f at %g units a day (%.0f week%s rounded up)\n", "days", days,
                   a->daily, weeks, weeks == 1 ? "" : "s");
        }
    }
    printf("\n%4s  %8s  %10s  %8s  %12s  %12s\n", "look", "fraction", sz ? "units" : "",
           "z bound", "alpha spent", "cumulative");
    for (int i = 0; i < a->k; i++) {
        char units[32] = "";
        if (sz)
            snprintf(units, sizeof units, "%.0f", ceil(sz->n_total * looks[i].t - 1e-9));
        char z[32];
        if (isfinite(looks[i].z))
            snprintf(z, sizeof z, "%.4f", looks[i].z);
        else
            snprintf(z, sizeof z, "inf");
        printf("%4d  %8.4f  %10s  %8s  %12.4g  %12.4g\n", i + 1, looks[i].t, units, z,
               looks[i].alpha_spent, looks[i].alpha_cum);
    }
}

int cmd_plan(int argc, char **argv)
{
    struct plan_args a = {
        .metric = NULL, .baseline = NAN, .sd = NAN, .mde = NAN, .relative = false,
        .alpha = 0.05, .power = 0.8, .arms = 2, .weight = {0.5, 0.5}, .daily = NAN,
        .k = 1, .shape = SEQ_OBF, .gamma = NAN, .sides = 2, .json = false,
    };
    bool done = false;
    int rc = parse_args(argc, argv, &a, &done);
    if (rc || done)
        return rc;
    struct seq_design d;
    rc = check_values(&a, &d);
    if (rc)
        return rc;

    struct err e;
    err_clear(&e);
    struct seq_look looks[SEQ_MAX_LOOKS];
    double inflation;
    if ((rc = seq_bounds(&d, a.k, a.t, looks, &e)) ||
        (rc = seq_inflation(&d, a.k, a.t, a.power, &inflation, &e)))
        return cli_error(rc, "plan: %s", e.msg);

    struct seq_size sz;
    double mde_abs = NAN, days = NAN;
    bool size = !isnan(a.mde);
    if (size) {
        bool binary = !strcmp(a.metric, "binary");
        struct seq_size_query q = {
            .sigma2 = binary ? a.baseline * (1 - a.baseline) : a.sd * a.sd,
            .mde = a.relative ? a.mde * fabs(a.baseline) : a.mde,
            .alpha = a.alpha,
            .power = a.power,
            .sides = a.sides,
            .arms = a.arms,
            .inflation = inflation,
        };
        memcpy(q.weight, a.weight, sizeof q.weight);
        mde_abs = q.mde;
        if (binary && !(a.baseline + mde_abs < 1 || a.baseline - mde_abs > 0))
            return cli_error(AB_EINPUT, "plan: --mde %g: no rate is that far from %g", mde_abs,
                             a.baseline);
        if ((rc = seq_sample_size(&q, &sz, &e)))
            return cli_error(rc, "plan: %s", e.msg);
        if (!isnan(a.daily))
            days = seq_days(sz.n_total, a.daily);
    }
    if (a.json)
        print_json(&a, size ? &sz : NULL, days, inflation, looks);
    else
        print_text(&a, size ? &sz : NULL, mde_abs, days, inflation, looks);
    return AB_OK;
}
