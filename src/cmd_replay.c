/*
 * cmd_replay.c — `abtally replay`: archived logs in, running records and the
 * final summary out (JSON lines on stdout).
 */
#include <getopt.h>
#include <unistd.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "engine.h"
#include "err.h"
#include "source.h"
#include "state.h"
#include <errno.h>
#include <sys/stat.h>
#include "timefmt.h"

static const char usage[] =
    "usage: abtally replay --config EXP.json [options] [FILE...]\n"
    "\n"
    "Reads archived event logs (JSON lines; plain, .gz, or - for stdin; stdin when\n"
    "no FILE is given) in the order given, joins assignments and outcomes per unit\n"
    "and prints one JSON record per --every of event time, then the final summary\n"
    "(the last line, with \"final\": true).\n"
    "\n"
    "options:\n"
    "  -c, --config FILE        experiment config (required; see the README)\n"
    "      --every DUR          record cadence in event time (default 1d; 1h, 30m, ...)\n"
    "      --lateness DUR       how far out of order events may arrive (default 1h)\n"
    "      --dedup-horizon DUR  how long event ids are remembered (default 24h)\n"
    "      --quarantine FILE    write each rejected line as: source TAB line TAB reason TAB text\n"
    "      --final-only         print only the final summary\n"
    "      --shard I/N          keep only the units of shard I of N (0 <= I < N), by unit hash\n"
    "      --save-state DIR     write the final state to DIR (for 'abtally merge' and 'check --state')\n"
    "      --unit-key FILE      hash unit ids with the secret key in FILE (its first 16 bytes);\n"
    "                           a state made with a key is read only with the same key\n"
    "      --progress, --no-progress  show a progress line on stderr (default: on a terminal)\n"
    "  -h, --help               this help\n"
    "      --version            print the version\n"
    "\n"
    "Every line read is accepted or rejected with a reason; the summary's\n"
    "integrity.lines_read = accepted + the sum of integrity.rejected.\n"
    "\n"
    "examples:\n"
    "  abtally replay --config checkout.json --every 6h day1.jsonl day2.jsonl.gz\n"
    "  abtally replay --config checkout.json --shard 0/2 --save-state st --final-only big.jsonl.gz\n";

static int parse_shard(const char *s, uint32_t *i, uint32_t *n)
{
    char *end;
    unsigned long a = strtoul(s, &end, 10);
    if (end == s || *end != '/')
        return -1;
    const char *p = end + 1;
    unsigned long b = strtoul(p, &end, 10);
    if (end == p || *end || b == 0 || b > 65536 || a >= b)
        return -1;
    *i = (uint32_t)a;
    *n = (uint32_t)b;
    return 0;
}

/* The progress line on a terminal: bytes read, events/s and the time left. */
struct progress {
    bool on;
    double start, last;
    uint64_t total;  /* bytes of all files (0 when unknown, e.g. stdin) */
    uint64_t done;   /* bytes of the files already finished */
    uint64_t lines;
};

static void progress_show(struct progress *p, const struct source *s, bool end)
{
    double now = time_mono_s();
    if (!p->on || (!end && now - p->last < 0.5))
        return;
    p->last = now;
    double el = now - p->start, at = (double)(p->done + (s ? source_offset(s) : 0));
    double rate = el > 0 ? (double)p->lines / el : 0;
    char eta[32] = "";
    if (p->total && at > 0 && !end)
        snprintf(eta, sizeof eta, " · about %.0f s left", el * ((double)p->total - at) / at);
    fprintf(stderr, "\r\033[Kreplay: %.1f MB%s%.1f MB · %.0f events/s%s", at / 1e6,
            p->total ? " of " : "", p->total ? (double)p->total / 1e6 : 0.0, rate, eta);
    if (end)
        fputc('\n', stderr);
}

static void progress_tick(void *ctx, const struct source *s, uint64_t lines)
{
    struct progress *p = ctx;
    (void)lines;
    p->lines += 0x10000; /* called every 65536 lines */
    progress_show(p, s, false);
}

int cmd_replay(int argc, char **argv)
{
    enum { O_EVERY = 256, O_LATE, O_HORIZON, O_QUAR, O_FINAL, O_SHARD, O_SAVE, O_PROG, O_NOPROG, O_UNIT_KEY, O_VERSION };
    static const struct option opts[] = {
        {"config", required_argument, NULL, 'c'},
        {"every", required_argument, NULL, O_EVERY},
        {"lateness", required_argument, NULL, O_LATE},
        {"dedup-horizon", required_argument, NULL, O_HORIZON},
        {"quarantine", required_argument, NULL, O_QUAR},
        {"final-only", no_argument, NULL, O_FINAL},
        {"shard", required_argument, NULL, O_SHARD},
        {"save-state", required_argument, NULL, O_SAVE},
        {"unit-key", required_argument, NULL, O_UNIT_KEY},
        {"progress", no_argument, NULL, O_PROG},
        {"no-progress", no_argument, NULL, O_NOPROG},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    struct engine_opts o;
    engine_opts_default(&o);
    const char *save_dir = NULL;
    struct progress pg = {.on = isatty(STDERR_FILENO) != 0};
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, "c:h", opts, NULL)) != -1) {
        switch (c) {
        case 'c': o.config_path = optarg; break;
        case O_EVERY:
            if (duration_parse(optarg, &o.every_us))
                return cli_error(AB_EUSAGE, "replay: --every '%s': not a duration like 1d, 6h, 30m", optarg);
            break;
        case O_LATE:
            if (duration_parse(optarg, &o.lateness_us))
                return cli_error(AB_EUSAGE, "replay: --lateness '%s': not a duration like 1h, 30m", optarg);
            break;
        case O_HORIZON:
            if (duration_parse(optarg, &o.horizon_us))
                return cli_error(AB_EUSAGE, "replay: --dedup-horizon '%s': not a duration like 24h", optarg);
            break;
        case O_QUAR: o.quarantine = optarg; break;
        case O_FINAL: o.final_only = true; break;
        case O_SHARD:
            if (parse_shard(optarg, &o.shard, &o.n_shards))
                return cli_error(AB_EUSAGE, "replay: --shard '%s': expected I/N with 0 <= I < N", optarg);
            break;
        case O_SAVE: save_dir = optarg; break;
        case O_UNIT_KEY: o.unit_key = optarg; break;
        case O_PROG: pg.on = true; break;
        case O_NOPROG: pg.on = false; break;
        case 'h': return cli_usage(usage, 1);
        case O_VERSION: return cli_version();
        default: return cli_usage(usage, 0);
        }
    }
    if (!o.config_path)
        return cli_error(AB_EUSAGE, "replay: --config is required (try 'abtally replay --help')");

    struct err e;
    err_clear(&e);
    struct engine en;
    int rc = engine_init(&en, &o, 1, &e);
    char *stdin_only[] = {"-"};
    char **files = optind < argc ? argv + optind : stdin_only;
    int n_files = optind < argc ? argc - optind : 1;
    pg.start = pg.last = time_mono_s();
    for (int i = 0; pg.on && i < n_files; i++) {
        struct stat st;
        if (strcmp(files[i], "-") && stat(files[i], &st) == 0)
            pg.total += (uint64_t)st.st_size;
    }
    for (int i = 0; !rc && i < n_files; i++) {
        uint64_t bytes = 0;
        rc = engine_read_file(&en, files[i], progress_tick, &pg, &bytes, &e);
        pg.done += bytes;
    }
    progress_show(&pg, NULL, true);
    if (!rc)
        rc = engine_finish(&en, &e);
    if (!rc && save_dir) {
        if (mkdir(save_dir, 0700) != 0 && errno != EEXIST)
            rc = err_set(&e, AB_EINPUT, "--save-state '%s': %s", save_dir, strerror(errno));
        struct state_meta meta = {.partition = (int32_t)o.shard, .n_shards = (int32_t)o.n_shards,
                                  .offset = -1, .lateness_us = o.lateness_us, .horizon_us = o.horizon_us};
        snprintf(meta.source, sizeof meta.source, "replay");
        char name[128];
        snprintf(name, sizeof name, "replay-%u-of-%u%s", o.shard, o.n_shards, STATE_SUFFIX);
        if (!rc)
            rc = state_save(save_dir, name, &meta, en.parts[0], &en.lay, &e);
    }
    engine_release(&en);
    if (rc)
        return cli_error(rc, "replay: %s", e.msg);
    return AB_OK;
}
