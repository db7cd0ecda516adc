/*
 * cmd_check.c — `abtally check`: the daily readout of an experiment from its
 * state (a watch or replay state directory) or from logs, with an exit code a
 * scheduler can act on.
 */
#include <getopt.h>
#include "timefmt.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "cmd.h"
#include "engine.h"
#include "err.h"
#include "readout.h"
#include "render.h"
#include "source.h"
#include "states.h"
#include "seqrun.h"
#include <errno.h>
#include <fcntl.h>
#include <sys/stat.h>

static const char usage[] =
    "usage: abtally check --config EXP.json (--state DIR | FILE...) [options]\n"
    "\n"
    "The readout of an experiment: the integrity verdict (sound, doubtful, failed)\n"
    "with its reasons, sample-ratio tests and the estimates for every metric and arm.\n"
    "Reads the state written by 'watch --state DIR' or 'replay --save-state DIR', or\n"
    "replays the given logs.\n"
    "\n"
    "options:\n"
    "  -c, --config FILE     experiment config (required)\n"
    "  -s, --state DIR       read the saved state (repeatable; files or directories)\n"
    "  -f, --format FMT      text (default), json (the final record of the output contract),\n"
    "                        html (a self-contained page with charts; best with --out)\n"
    "  -o, --out FILE        write the readout to FILE instead of stdout\n"
    "      --strict          exit 3 when doubtful too, not only when failed\n"
    "      --series FILE     records to draw the path over time from (the JSON lines\n"
    "                        of 'watch' or 'replay'; default: DIR/history.jsonl)\n"
    "      --no-record       with --state DIR: do not record this run as a look\n"
    "                        (DIR/sequential.json) nor in DIR/history.jsonl\n"
    "      --unit-key FILE   the secret unit key the states were made with (--unit-key\n"
    "                        of watch or replay); also hashes the units of FILE...\n"
    "      --lateness DUR    when replaying logs (default 1h)\n"
    "      --dedup-horizon DUR  when replaying logs (default 24h)\n"
    "  -h, --help            this help\n"
    "      --version         print the version\n"
    "\n"
    "exit status: 0 sound or doubtful, 3 failed (--strict: doubtful too),\n"
    "1 bad input, 2 usage error. Colour only on a terminal; NO_COLOR turns it off.\n"
    "With --state DIR each run is a look of the sequential test: the bounds of\n"
    "earlier runs are kept in DIR/sequential.json and their readouts in\n"
    "DIR/history.jsonl (the path over time).\n"
    "\n"
    "examples:\n"
    "  abtally check --config checkout.json --state /var/lib/abtally/checkout\n"
    "  abtally check --config checkout.json --format json day*.jsonl.gz > readout.json\n"
    "  abtally check --config checkout.json --format html --out readout.html day*.jsonl.gz\n";

/* Collects every record text (running records of a replay) into an array. */
static int collect_record(void *ctx, const char *json, size_t len)
{
    json_error_t je;
    json_t *r = json_loadb(json, len, 0, &je);
    return r ? json_array_append_new(ctx, r) : -1;
}

/* The first state argument that is a directory: where the readout keeps its
 * own files (sequential.json: the looks taken so far; history.jsonl: one
 * final record per check run). NULL when there is none. */
static const char *state_dir(char **states, int n)
{
    struct stat st;
    for (int i = 0; i < n; i++)
        if (stat(states[i], &st) == 0 && S_ISDIR(st.st_mode))
            return states[i];
    return NULL;
}

static json_t *load_json(const char *dir, const char *name)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    json_error_t je;
    return json_load_file(path, 0, &je);
}

/* Writes text to dir/name atomically (temporary file, fsync, rename), mode 0600. */
static int save_text(const char *dir, const char *name, const char *text, size_t len, struct err *e)
{
    char path[4096], tmp[4096];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    snprintf(tmp, sizeof tmp, "%s/.%s.%ld.tmp", dir, name, (long)getpid());
    int fd = open(tmp, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0600);
    if (fd < 0)
        return err_set(e, AB_EINPUT, "'%s': %s", tmp, strerror(errno));
    size_t off = 0;
    while (off < len) {
        ssize_t k = write(fd, text + off, len - off);
        if (k <= 0) {
            int saved = errno;
            close(fd);
            unlink(tmp);
            return err_set(e, AB_EINPUT, "'%s': write failed: %s", path, strerror(saved));
        }
        off += (size_t)k;
    }
    if (fsync(fd) != 0 || close(fd) != 0 || rename(tmp, path) != 0) {
        int saved = errno;
        unlink(tmp);
        return err_set(e, AB_EINPUT, "'%s': %s", path, strerror(saved));
    }
    return AB_OK;
}

/* Reads a JSON-lines file of records (DIR/history.jsonl, or --series). */
static json_t *load_records(const char *path)
{
    json_t *a = json_array();
    FILE *f = fopen(path, "r");
    if (!f)
        return a;
    json_error_t je;
    json_t *r;
    while ((r = json_loadf(f, JSON_DISABLE_EOF_CHECK, &je)))
        json_array_append_new(a, r);
    fclose(f);
    return a;
}

/* Records this check run: the sequential state, and the final record in the
 * history unless the newest entry already has the same data time. */
static int record_run(const char *dir, struct engine *en, json_t *rec, struct err *e)
{
    json_t *sj = seqrun_to_json(en->seq);
    json_object_set_new(sj, "p_seq", json_num(en->p_seq));
    char *text = json_dumps(sj, JSON_COMPACT | JSON_REAL_PRECISION(17));
    json_decref(sj);
    if (!text)
        return err_set(e, AB_EINPUT, "out of memory");
    int rc = save_text(dir, "sequential.json", text, strlen(text), e);
    free(text);
    if (rc)
        return rc;
    char path[4096];
    snprintf(path, sizeof path, "%s/history.jsonl", dir);
    json_t *history = load_records(path);
    size_t n = json_array_size(history);
    const char *last = n ? json_string_value(json_object_get(json_array_get(history, n - 1), "time")) : NULL;
    const char *now = json_string_value(json_object_get(rec, "time"));
    bool same = last && now && !strcmp(last, now);
    json_decref(history);
    if (same)
        return AB_OK;
    int fd = open(path, O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0600);
    FILE *f = fd >= 0 ? fdopen(fd, "a") : NULL;
    if (!f) {
        if (fd >= 0)
            close(fd);
        return err_set(e, AB_EINPUT, "'%s': %s", path, strerror(errno));
    }
    int w = json_dumpf(rec, f, JSON_COMPACT | JSON_REAL_PRECISION(17)) || fputc('\n', f) == EOF;
    if (fclose(f) || w)
        return err_set(e, AB_EINPUT, "'%s': write failed", path);
    return AB_OK;
}

int cmd_check(int argc, char **argv)
{
    enum { O_STRICT = 256, O_LATE, O_HORIZON, O_NOREC, O_SERIES, O_UNIT_KEY, O_VERSION };
    static const struct option opts[] = {
        {"config", required_argument, NULL, 'c'},
        {"state", required_argument, NULL, 's'},
        {"format", required_argument, NULL, 'f'},
        {"out", required_argument, NULL, 'o'},
        {"strict", no_argument, NULL, O_STRICT},
        {"no-record", no_argument, NULL, O_NOREC},
        {"series", required_argument, NULL, O_SERIES},
        {"lateness", required_argument, NULL, O_LATE},
        {"dedup-horizon", required_argument, NULL, O_HORIZON},
        {"unit-key", required_argument, NULL, O_UNIT_KEY},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    struct engine_opts o;
    engine_opts_default(&o);
    const char *format = "text", *out = NULL;
    char **states = calloc((size_t)argc, sizeof *states);
    int n_states = 0;
    bool strict = false, no_record = false;
    const char *series_path = NULL;
    int c, rc = AB_OK;
    optind = 1;
    if (!states)
        return cli_error(AB_EINPUT, "check: out of memory");
    while ((c = getopt_long(argc, argv, "c:s:f:o:h", opts, NULL)) != -1) {
        switch (c) {
        case 'c': o.config_path = optarg; break;
        case 's': states[n_states++] = optarg; break;
        case 'f': format = optarg; break;
        case 'o': out = optarg; break;
        case O_STRICT: strict = true; break;
        case O_NOREC: no_record = true; break;
        case O_SERIES: series_path = optarg; break;
        case O_UNIT_KEY: o.unit_key = optarg; break;
        case O_LATE:
        case O_HORIZON:
            if (duration_parse(optarg, c == O_LATE ? &o.lateness_us : &o.horizon_us))
                rc = cli_error(AB_EUSAGE, "check: '%s': not a duration like 1h, 24h", optarg);
            break;
        case 'h': free(states); return cli_usage(usage, 1);
        case O_VERSION: free(states); return cli_version();
        default: free(states); return cli_usage(usage, 0);
        }
        if (rc) {
            free(states);
            return rc;
        }
    }
    if (!o.config_path || (n_states > 0) == (optind < argc) || (strcmp(format, "text") && strcmp(format, "json") && strcmp(format, "html"))) {
        free(states);
        if (!o.config_path)
            return cli_error(AB_EUSAGE, "check: --config is required (try 'abtally check --help')");
        if (strcmp(format, "text") && strcmp(format, "json") && strcmp(format, "html"))
            return cli_error(AB_EUSAGE, "check: --format '%s': expected text, json or html", format);
        return cli_error(AB_EUSAGE, "check: give either --state DIR or log FILEs, not both or neither");
    }
    struct err e;
    err_clear(&e);
    struct engine en;
    struct state_set set = {0};
    rc = engine_init(&en, &o, 1, &e);
    /* the path over time: running records of the replayed logs, or the
     * readouts of earlier check runs kept beside the state */
    json_t *series = json_array();
    const char *dir = n_states ? state_dir(states, n_states) : NULL;
    if (!rc && dir) {
        json_t *sj = load_json(dir, "sequential.json");
        if (sj) {
            rc = seqrun_from_json(en.seq, sj, &e);
            if (json_is_number(json_object_get(sj, "p_seq")))
                en.p_seq = json_number_value(json_object_get(sj, "p_seq"));
            json_decref(sj);
        }
        char hist[4096];
        snprintf(hist, sizeof hist, "%s/history.jsonl", dir);
        json_decref(series);
        series = load_records(hist);
    }
    if (!rc && series_path) {
        json_decref(series);
        series = load_records(series_path);
        /* a final summary in the series is this run's own record: keep the running ones */
        size_t n = json_array_size(series);
        if (n && json_is_true(json_object_get(json_array_get(series, n - 1), "final")))
            json_array_remove(series, n - 1);
    }
    en.out = NULL;
    en.on_record = collect_record;
    en.on_record_ctx = series;
    if (!rc && n_states) {
        rc = state_set_load(&set, &en.lay, states, n_states, &e);
        for (int i = 0; !rc && i < set.n; i++)
            rc = ledger_absorb(en.parts[0], set.ledgers[i], &e);
    }
    for (int i = optind; !rc && i < argc; i++)
        rc = engine_read_file(&en, argv[i], NULL, NULL, NULL, &e);
    json_t *rec = NULL;
    int verdict = VERDICT_SOUND;
    if (!rc) {
        rc = engine_flush_pending(&en, &e);
        ledger_finish(en.parts[0]);
        int64_t t = ledger_max_time(en.parts[0]);
        if (!rc)
            rc = engine_record(&en, t == INT64_MIN ? 0 : t, true, &rec, &verdict, &e);
    }
    if (!rc && dir && !no_record)
        rc = record_run(dir, &en, rec, &e);
    if (!rc) {
        FILE *f = out ? fopen(out, "w") : stdout;
        if (!f)
            rc = err_set(&e, AB_EINPUT, "--out '%s': cannot open", out);
        else {
            bool colour = !out && isatty(STDOUT_FILENO) && !getenv("NO_COLOR");
            int w = !strcmp(format, "json")
                        ? (json_dumpf(rec, f, JSON_COMPACT | JSON_REAL_PRECISION(17)) || fputc('\n', f) == EOF)
                    : !strcmp(format, "html") ? render_html(f, series, rec)
                                              : render_text(f, rec, colour);
            if ((out && fclose(f)) || w)
                rc = err_set(&e, AB_EINPUT, "output: write failed");
        }
    }
    json_decref(rec);
    json_decref(series);
    state_set_release(&set);
    engine_release(&en);
    free(states);
    if (rc)
        return cli_error(rc, "check: %s", e.msg);
    if (verdict == VERDICT_FAILED || (strict && verdict == VERDICT_DOUBTFUL))
        return AB_EUNSOUND;
    return AB_OK;
}
