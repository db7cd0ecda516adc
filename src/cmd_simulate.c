/*
 * cmd_simulate.c — `abtally simulate`: writes the event log of an invented
 * experiment (Greenmoss, an online plant nursery, tests a new checkout page),
 * with faults to inject, and the matching experiment config.
 *
 * The generator is simulate.c; this file parses the options, opens the
 * outputs (stdout, a file, or a .gz file through zlib), writes the config and
 * prints the one-line summary on stderr. Usage errors exit 2 with one line
 * `abtally: simulate: <why>`; write failures exit 1.
 */
#include <errno.h>
#include <fcntl.h>
#include <getopt.h>
#include <math.h>
#include <pthread.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <zlib.h>

#include "cmd.h"
#include "err.h"
#include "simulate.h"
#include "timefmt.h"

static const char usage[] =
    "usage: abtally simulate [options]\n"
    "\n"
    "Writes the event log (JSON lines, the schema of 'abtally replay') of an invented\n"
    "experiment: Greenmoss, an online plant nursery, tests a new checkout page. The\n"
    "same options and --seed give the same bytes on every machine.\n"
    "\n"
    "The model, per unit (a shopper): its first exposure, which is its assignment\n"
    "(with attrs {\"platform\": ios|android|web}), falls at a uniformly random time\n"
    "of the experiment days. A latent activity rate (sessions per day, gamma\n"
    "distributed over units) drives its sessions, a Poisson process, both after\n"
    "exposure and in the --pre-days before it, so the pre-period covariate tracks\n"
    "the outcome. Each session writes a 'sessions' outcome (value 1), converts with\n"
    "some probability into an 'order_value' outcome (lognormal value) a few minutes\n"
    "later, and shows a Poisson number of 'page_error' outcomes (value 1). Events\n"
    "run from the pre-period to the end of the window; every line has an id.\n"
    "Lines are written in time order, apart from the late and duplicate faults.\n"
    "\n"
    "options:\n"
    "  -n, --units N           units exposed over the experiment (default 20000)\n"
    "  -d, --days D            experiment days (default 14): the window is\n"
    "                          [START, START + D days)\n"
    "      --start DATE        first day, YYYY-MM-DD (default 2026-11-02), UTC\n"
    "      --pre-days P        days of pre-period activity before each exposure,\n"
    "                          the config's covariate.pre_days (default 14; 0: none)\n"
    "  -a, --arms A,B,...      arm names, the first is the control\n"
    "                          (default control,treatment)\n"
    "  -w, --weights W,...     allocation, one positive number per arm, normalized\n"
    "                          (default equal)\n"
    "  -e, --effect [ARM:]METRIC=REL\n"
    "                          a relative treatment effect, repeatable: the arm's\n"
    "                          mean of METRIC is multiplied by 1 + REL (REL > -1).\n"
    "                          METRIC: order_value (value of an order), converted\n"
    "                          (chance that a session converts), page_error (errors\n"
    "                          per session), sessions (activity after exposure).\n"
    "                          Without ARM: every arm but the control. E.g.\n"
    "                          order_value=0.03 raises the per-unit order_value by 3%\n"
    "  -s, --seed S            random seed, a whole number (default 1)\n"
    "      --experiment NAME   experiment name (default checkout-YYYY-MM of --start)\n"
    "  -o, --out FILE          write the log to FILE (gzip, at zlib's fastest level,\n"
    "                          when FILE ends in .gz) instead of stdout\n"
    "      --config-out FILE   write the matching experiment config: arms, window,\n"
    "                          the metrics order_value (mean, 168 h attribution),\n"
    "                          converted (binary), value_per_session (ratio\n"
    "                          order_value/sessions), page_errors (guardrail, lower\n"
    "                          is better), covariate, alpha .05, SRM threshold .001,\n"
    "                          sequential spending (obf) planned on N units\n"
    "  -q, --quiet             no summary line on stderr\n"
    "  -h, --help              this help\n"
    "      --version           print the version\n"
    "\n"
    "model (defaults):\n"
    "      --sessions-per-day X   mean activity rate (0.3)\n"
    "      --activity-shape K     gamma shape of the rate; smaller spreads units more (0.5)\n"
    "      --conversion P         chance that a session ends in an order (0.06)\n"
    "      --order-value X        mean value of an order (45)\n"
    "      --order-sigma S        lognormal sigma of an order's value (0.6)\n"
    "      --errors-per-session X mean page errors per session (0.04)\n"
    "\n"
    "faults (--fault SPEC, repeatable; a FRACTION is of the lines, or of the units;\n"
    "FROM_DAY, 1 to D, makes a fault start on that day of the experiment, by the\n"
    "line's time, or for unit faults by exposure time; without it a line fault acts\n"
    "on the whole log, the pre-period included):\n"
    "  lose-assign:ARM:FRACTION[:FROM_DAY]\n"
    "        drop that fraction of ARM's assignment lines; the units' outcomes stay\n"
    "        (orphan outcomes, and a sample-ratio mismatch)\n"
    "  multi-arm:FRACTION[:FROM_DAY]\n"
    "        that fraction of units gets a second assignment, to another arm, later\n"
    "        in the window\n"
    "  duplicate:FRACTION[:FROM_DAY]\n"
    "        that fraction of lines is written twice (same id), the repeat within a\n"
    "        minute\n"
    "  malformed:FRACTION[:FROM_DAY]\n"
    "        that fraction of lines is replaced by a broken one, in equal parts: cut\n"
    "        short (not_json), no unit (missing_field), a day/month/year time\n"
    "        (bad_time), a number for a string or a string for a number (bad_type)\n"
    "  late:FRACTION:MAXDELAY[:FROM_DAY]\n"
    "        that fraction of lines is written later in the log than its time, by\n"
    "        up to MAXDELAY (e.g. 30m, 2h; at most 24h); within replay's --lateness\n"
    "        (1h) this must not change the final summary\n"
    "  self-select:STRENGTH[:FROM_DAY]\n"
    "        the chance of leaving the control arm rises with the unit's activity\n"
    "        (probit slope STRENGTH on its normal score, e.g. 0.5) while the arms\n"
    "        keep their weights on average: only covariate balance shows it\n"
    "\n"
    "On stderr: one line with the units per arm (as drawn, lost assignments\n"
    "included), the lines written and what each fault did. Memory: about 24 bytes\n"
    "per line until the log is written (some 450 MB for 2 million units).\n"
    "Exit status: 0 done, 1 write failure, 2 usage error.\n"
    "\n"
    "examples:\n"
    "  abtally simulate --units 50000 --effect order_value=0.05 --seed 7 \\\n"
    "      --out checkout.jsonl.gz --config-out checkout.json\n"
    "  abtally check --config checkout.json checkout.jsonl.gz\n"
    "  abtally simulate --fault lose-assign:treatment:0.08:9 --fault duplicate:0.01 \\\n"
    "      --config-out checkout.json > checkout.jsonl\n";

/* Where the log goes. A writer thread does the writing (and gzip), so that
 * the kernel's copying or zlib runs beside the generator: the sink copies
 * each chunk into one of OUT_SLOTS buffers and the thread writes them in
 * order. */
#define OUT_SLOTS 4

struct slot {
    char *buf;
    size_t len, cap;
    bool full;
};

struct out {
    int fd;                 /* stdout or a plain file (written with write(2), not stdio) */
    gzFile gz;              /* a .gz file */
    pthread_t thread;
    pthread_mutex_t mu;
    pthread_cond_t cv;
    struct slot slot[OUT_SLOTS];
    int put, take;          /* next slot to fill, next slot to write */
    bool done;              /* no more chunks */
    bool failed;            /* a write failed */
};

static int write_chunk(struct out *o, const char *buf, size_t len)
{
    if (o->gz)
        return gzwrite(o->gz, buf, (unsigned)len) != (int)len;
    while (len) {
        ssize_t k = write(o->fd, buf, len);
        if (k < 0 && errno == EINTR)
            continue;
        if (k <= 0)
            return 1;
        buf += k;
        len -= (size_t)k;
    }
    return 0;
}

static void *writer_main(void *arg)
{
    struct out *o = arg;
    pthread_mutex_lock(&o->mu);
    for (;;) {
        struct slot *s = &o->slot[o->take];
        while (!s->full && !o->done)
            pthread_cond_wait(&o->cv, &o->mu);
        if (!s->full)
            break;
        pthread_mutex_unlock(&o->mu);
        int bad = !o->failed && write_chunk(o, s->buf, s->len);
        pthread_mutex_lock(&o->mu);
        if (bad)
            o->failed = true;
        s->full = false;
        o->take = (o->take + 1) % OUT_SLOTS;
        pthread_cond_broadcast(&o->cv);
    }
    pthread_mutex_unlock(&o->mu);
    return NULL;
}

static int out_sink(void *ctx, const char *buf, size_t len)
{
    struct out *o = ctx;
    pthread_mutex_lock(&o->mu);
    struct slot *s = &o->slot[o->put];
    while (s->full && !o->failed)
        pthread_cond_wait(&o->cv, &o->mu);
    bool failed = o->failed;
    pthread_mutex_unlock(&o->mu);
    if (failed)
        return 1;
    if (len > s->cap) { /* the slot is free: only this thread touches it now */
        char *nb = realloc(s->buf, len);
        if (!nb)
            return 1;
        s->buf = nb;
        s->cap = len;
    }
    memcpy(s->buf, buf, len);
    s->len = len;
    pthread_mutex_lock(&o->mu);
    s->full = true;
    o->put = (o->put + 1) % OUT_SLOTS;
    pthread_cond_broadcast(&o->cv);
    pthread_mutex_unlock(&o->mu);
    return 0;
}

static int out_start(struct out *o)
{
    pthread_mutex_init(&o->mu, NULL);
    pthread_cond_init(&o->cv, NULL);
    if (pthread_create(&o->thread, NULL, writer_main, o)) {
        pthread_cond_destroy(&o->cv);
        pthread_mutex_destroy(&o->mu);
        return -1;
    }
    return 0;
}

/* Waits for the writer to finish; returns -1 when a write failed. */
static int out_finish(struct out *o)
{
    pthread_mutex_lock(&o->mu);
    o->done = true;
    pthread_cond_broadcast(&o->cv);
    pthread_mutex_unlock(&o->mu);
    pthread_join(o->thread, NULL);
    pthread_cond_destroy(&o->cv);
    pthread_mutex_destroy(&o->mu);
    for (int i = 0; i < OUT_SLOTS; i++)
        free(o->slot[i].buf);
    return o->failed ? -1 : 0;
}

static bool ends_with(const char *s, const char *suffix)
{
    size_t n = strlen(s), k = strlen(suffix);
    return n >= k && !strcmp(s + n - k, suffix);
}

static int bad(const char *opt, const char *arg, const char *what)
{
    return cli_error(AB_EUSAGE, "simulate: %s '%s': %s", opt, arg, what);
}

static int get_uint(const char *opt, const char *s, uint64_t lo, uint64_t hi, uint64_t *out)
{
    char *end;
    errno = 0;
    unsigned long long v = s[0] >= '0' && s[0] <= '9' ? strtoull(s, &end, 10) : 0;
    if (s[0] < '0' || s[0] > '9' || *end || errno || v < lo || v > hi) {
        char why[96];
        snprintf(why, sizeof why, "expected a whole number from %llu to %llu",
                 (unsigned long long)lo, (unsigned long long)hi);
        return bad(opt, s, why);
    }
    *out = v;
    return AB_OK;
}

static int get_num(const char *opt, const char *s, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (end == s || *end || errno || !isfinite(v))
        return bad(opt, s, "not a number");
    *out = v;
    return AB_OK;
}

static int get_date(const char *s, int64_t *us)
{
    char buf[40];
    if (strlen(s) != 10 || s[4] != '-' || s[7] != '-')
        return bad("--start", s, "expected a date YYYY-MM-DD");
    snprintf(buf, sizeof buf, "%sT00:00:00Z", s);
    if (time_parse_rfc3339(buf, strlen(buf), us))
        return bad("--start", s, "expected a date YYYY-MM-DD");
    return AB_OK;
}

/* " from day N" when the fault starts on a given day, else "". */
static const char *from_day(const struct sim_fault *f)
{
    static char buf[32];
    if (!f->from_day)
        return "";
    snprintf(buf, sizeof buf, " from day %d", f->from_day);
    return buf;
}

/* The one-line summary on stderr. */
static void print_summary(const struct sim_opts *o, const struct sim_stats *st)
{
    char line[4096];
    size_t n = 0;
#define ADD(...)                                                                        \
    do {                                                                                \
        if (n < sizeof line)                                                            \
            n += (size_t)snprintf(line + n, sizeof line - n, __VA_ARGS__);              \
    } while (0)
    ADD("simulate: %llu units (", (unsigned long long)st->units);
    for (int a = 0; a < o->n_arms; a++)
        ADD("%s%s %llu", a ? ", " : "", o->arms[a], (unsigned long long)st->units_by_arm[a]);
    ADD("), %llu lines (%llu assignments, %llu outcomes); faults:", (unsigned long long)st->lines,
        (unsigned long long)st->assignments, (unsigned long long)st->outcomes);
    int nf = 0;
    for (int a = 0; a < o->n_arms; a++)
        if (o->lose[a].on) {
            ADD("%s lose-assign %s %g%s (%llu assignments dropped)", nf++ ? "," : "",
                o->arms[a], o->lose[a].amount, from_day(&o->lose[a]),
                (unsigned long long)st->lost_by_arm[a]);
        }
    const struct sim_fault *f = o->fault;
    if (f[SIM_F_MULTI_ARM].on)
        ADD("%s multi-arm %g%s (%llu units)", nf++ ? "," : "", f[SIM_F_MULTI_ARM].amount,
            from_day(&f[SIM_F_MULTI_ARM]), (unsigned long long)st->multi_arm_units);
    if (f[SIM_F_DUPLICATE].on)
        ADD("%s duplicate %g%s (%llu lines)", nf++ ? "," : "", f[SIM_F_DUPLICATE].amount,
            from_day(&f[SIM_F_DUPLICATE]), (unsigned long long)st->duplicates);
    if (f[SIM_F_MALFORMED].on) {
        uint64_t tot = 0;
        for (int k = 0; k < SIM_N_BROKEN; k++)
            tot += st->malformed[k];
        ADD("%s malformed %g%s (%llu lines:", nf++ ? "," : "", f[SIM_F_MALFORMED].amount,
            from_day(&f[SIM_F_MALFORMED]), (unsigned long long)tot);
        for (int k = 0; k < SIM_N_BROKEN; k++)
            ADD(" %s %llu", sim_broken_name(k), (unsigned long long)st->malformed[k]);
        ADD(")");
    }
    if (f[SIM_F_LATE].on)
        ADD("%s late %g up to %gs%s (%llu lines)", nf++ ? "," : "", f[SIM_F_LATE].amount,
            (double)f[SIM_F_LATE].max_delay_us / 1e6, from_day(&f[SIM_F_LATE]),
            (unsigned long long)st->late);
    if (f[SIM_F_SELF_SELECT].on)
        ADD("%s self-select %g%s", nf++ ? "," : "", f[SIM_F_SELF_SELECT].amount,
            from_day(&f[SIM_F_SELF_SELECT]));
    if (!nf)
        ADD(" none");
#undef ADD
    fprintf(stderr, "%s\n", line);
}

static int write_config(const struct sim_opts *o, const char *path)
{
    size_t need = sim_config_json(o, NULL, 0);
    char *text = malloc(need + 1);
    if (!text)
        return cli_error(AB_EINPUT, "simulate: out of memory");
    sim_config_json(o, text, need + 1);
    FILE *f = fopen(path, "w");
    int rc = AB_OK;
    if (!f)
        rc = cli_error(AB_EINPUT, "simulate: --config-out '%s': %s", path, strerror(errno));
    else if ((fwrite(text, 1, need, f) != need) | (fclose(f) != 0))
        rc = cli_error(AB_EINPUT, "simulate: --config-out '%s': write failed", path);
    free(text);
    return rc;
}

int cmd_simulate(int argc, char **argv)
{
    enum {
        O_START = 256, O_PRE, O_EXP, O_CONFIG_OUT, O_SPD, O_SHAPE, O_CONV, O_OV, O_OSIGMA, O_ERR,
        O_VERSION
    };
    static const struct option opts[] = {
        {"units", required_argument, NULL, 'n'},
        {"days", required_argument, NULL, 'd'},
        {"start", required_argument, NULL, O_START},
        {"pre-days", required_argument, NULL, O_PRE},
        {"arms", required_argument, NULL, 'a'},
        {"weights", required_argument, NULL, 'w'},
        {"effect", required_argument, NULL, 'e'},
        {"fault", required_argument, NULL, 'f'},
        {"seed", required_argument, NULL, 's'},
        {"experiment", required_argument, NULL, O_EXP},
        {"out", required_argument, NULL, 'o'},
        {"config-out", required_argument, NULL, O_CONFIG_OUT},
        {"sessions-per-day", required_argument, NULL, O_SPD},
        {"activity-shape", required_argument, NULL, O_SHAPE},
        {"conversion", required_argument, NULL, O_CONV},
        {"order-value", required_argument, NULL, O_OV},
        {"order-sigma", required_argument, NULL, O_OSIGMA},
        {"errors-per-session", required_argument, NULL, O_ERR},
        {"quiet", no_argument, NULL, 'q'},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    struct sim_opts o;
    sim_opts_default(&o);
    const char *arms = NULL, *weights = NULL, *out_path = NULL, *config_path = NULL;
    const char **effects = calloc((size_t)argc + 1, sizeof *effects);
    const char **faults = calloc((size_t)argc + 1, sizeof *faults);
    int n_effects = 0, n_faults = 0, quiet = 0, rc = AB_OK, c;
    uint64_t u;
    if (!effects || !faults) {
        free(effects);
        free(faults);
        return cli_error(AB_EINPUT, "simulate: out of memory");
    }
    optind = 1;
    opterr = 0;
    while (!rc && (c = getopt_long(argc, argv, ":n:d:a:w:e:f:s:o:qh", opts, NULL)) != -1) {
        switch (c) {
        case 'n':
            if (!(rc = get_uint("--units", optarg, 1, SIM_MAX_UNITS, &u)))
                o.units = u;
            break;
        case 'd':
            if (!(rc = get_uint("--days", optarg, 1, SIM_MAX_DAYS, &u)))
                o.days = (int)u;
            break;
        case O_PRE:
            if (!(rc = get_uint("--pre-days", optarg, 0, SIM_MAX_DAYS, &u)))
                o.pre_days = (int)u;
            break;
        case O_START: rc = get_date(optarg, &o.start_us); break;
        case 'a': arms = optarg; break;
        case 'w': weights = optarg; break;
        case 'e': effects[n_effects++] = optarg; break;
        case 'f': faults[n_faults++] = optarg; break;
        case 's':
            if (!(rc = get_uint("--seed", optarg, 0, UINT64_MAX, &u)))
                o.seed = u;
            break;
        case O_EXP:
            if (strlen(optarg) == 0 || strlen(optarg) >= SIM_NAME_MAX)
                rc = bad("--experiment", optarg, "the name must be 1 to 63 characters");
            else
                strcpy(o.experiment, optarg);
            break;
        case 'o': out_path = optarg; break;
        case O_CONFIG_OUT: config_path = optarg; break;
        case O_SPD: rc = get_num("--sessions-per-day", optarg, &o.sessions_per_day); break;
        case O_SHAPE: rc = get_num("--activity-shape", optarg, &o.activity_shape); break;
        case O_CONV: rc = get_num("--conversion", optarg, &o.conversion); break;
        case O_OV: rc = get_num("--order-value", optarg, &o.order_value); break;
        case O_OSIGMA: rc = get_num("--order-sigma", optarg, &o.order_sigma); break;
        case O_ERR: rc = get_num("--errors-per-session", optarg, &o.errors_per_session); break;
        case 'q': quiet = 1; break;
        case 'h':
            free(effects);
            free(faults);
            return cli_usage(usage, 1);
        case O_VERSION:
            free(effects);
            free(faults);
            return cli_version();
        case ':':
            rc = cli_error(AB_EUSAGE, "simulate: option '%s' needs a value (try 'abtally simulate --help')",
                           argv[optind - 1]);
            break;
        default:
            rc = cli_error(AB_EUSAGE, "simulate: unknown option '%s' (try 'abtally simulate --help')",
                           argv[optind - 1]);
            break;
        }
    }
    if (!rc && optind < argc)
        rc = cli_error(AB_EUSAGE, "simulate: unexpected argument '%s' (try 'abtally simulate --help')",
                       argv[optind]);
    /* arms first, then what refers to them */
    struct err e;
    err_clear(&e);
    if (!rc && arms && (rc = sim_set_arms(&o, arms, &e)))
        rc = cli_error(rc, "simulate: %s", e.msg);
    if (!rc && weights && (rc = sim_set_weights(&o, weights, &e)))
        rc = cli_error(rc, "simulate: %s", e.msg);
    for (int i = 0; !rc && i < n_effects; i++)
        if ((rc = sim_parse_effect(&o, effects[i], &e)))
            rc = cli_error(rc, "simulate: %s", e.msg);
    for (int i = 0; !rc && i < n_faults; i++)
        if ((rc = sim_parse_fault(&o, faults[i], &e)))
            rc = cli_error(rc, "simulate: %s", e.msg);
    if (!rc && (rc = sim_validate(&o, &e)))
        rc = cli_error(rc, "simulate: %s", e.msg);
    free(effects);
    free(faults);
    if (rc)
        return rc;

    if (config_path && (rc = write_config(&o, config_path)))
        return rc;
    struct out out;
    memset(&out, 0, sizeof out);
    out.fd = STDOUT_FILENO;
    if (out_path && ends_with(out_path, ".gz")) {
        out.gz = gzopen(out_path, "wb1");
        if (!out.gz)
            return cli_error(AB_EINPUT, "simulate: --out '%s': %s", out_path,
                             errno ? strerror(errno) : "cannot open");
        gzbuffer(out.gz, 1 << 20);
    } else if (out_path) {
        out.fd = open(out_path, O_WRONLY | O_CREAT | O_TRUNC, 0666);
        if (out.fd < 0)
            return cli_error(AB_EINPUT, "simulate: --out '%s': %s", out_path, strerror(errno));
    }
    struct sim_stats st;
    if (out_start(&out)) {
        rc = err_set(&e, AB_EINPUT, "cannot start the writer thread");
    } else {
        rc = sim_run(&o, out_sink, &out, &st, &e);
        if (out_finish(&out) && !rc)
            rc = err_set(&e, AB_EINPUT, "output: write failed");
    }
    int cerr = out.gz ? gzclose(out.gz) != Z_OK : out.fd != STDOUT_FILENO ? close(out.fd) != 0 : 0;
    if (rc)
        return cli_error(rc, "simulate: %s", e.msg);
    if (cerr)
        return cli_error(AB_EINPUT, "simulate: %s: write failed", out_path ? out_path : "stdout");
    if (!quiet)
        print_summary(&o, &st);
    return AB_OK;
}
