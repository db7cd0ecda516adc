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
    "  -f, --format FMT      text (default), json (the final record of the output contract)\n"
    "  -o, --out FILE        write the readout to FILE instead of stdout\n"
    "      --strict          exit 3 when doubtful too, not only when failed\n"
    "      --lateness DUR    when replaying logs (default 1h)\n"
    "      --dedup-horizon DUR  when replaying logs (default 24h)\n"
    "  -h, --help            this help\n"
    "      --version         print the version\n"
    "\n"
    "exit status: 0 sound or doubtful, 3 failed (--strict: doubtful too),\n"
    "1 bad input, 2 usage error. Colour only on a terminal; NO_COLOR turns it off.\n"
    "\n"
    "examples:\n"
    "  abtally check --config checkout.json --state /var/lib/abtally/checkout\n"
    "  abtally check --config checkout.json --format json day*.jsonl.gz > readout.json\n";

int cmd_check(int argc, char **argv)
{
    enum { O_STRICT = 256, O_LATE, O_HORIZON, O_VERSION };
    static const struct option opts[] = {
        {"config", required_argument, NULL, 'c'},
        {"state", required_argument, NULL, 's'},
        {"format", required_argument, NULL, 'f'},
        {"out", required_argument, NULL, 'o'},
        {"strict", no_argument, NULL, O_STRICT},
        {"lateness", required_argument, NULL, O_LATE},
        {"dedup-horizon", required_argument, NULL, O_HORIZON},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    struct engine_opts o;
    engine_opts_default(&o);
    o.final_only = true;
    const char *format = "text", *out = NULL;
    char **states = calloc((size_t)argc, sizeof *states);
    int n_states = 0;
    bool strict = false;
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
    if (!o.config_path || (n_states > 0) == (optind < argc) || (strcmp(format, "text") && strcmp(format, "json"))) {
        free(states);
        if (!o.config_path)
            return cli_error(AB_EUSAGE, "check: --config is required (try 'abtally check --help')");
        if (strcmp(format, "text") && strcmp(format, "json"))
            return cli_error(AB_EUSAGE, "check: --format '%s': expected text or json", format);
        return cli_error(AB_EUSAGE, "check: give either --state DIR or log FILEs, not both or neither");
    }
    struct err e;
    err_clear(&e);
    struct engine en;
    struct state_set set = {0};
    rc = engine_init(&en, &o, 1, &e);
    if (!rc && n_states) {
        rc = state_set_load(&set, &en.lay, states, n_states, &e);
        for (int i = 0; !rc && i < set.n; i++)
            rc = ledger_absorb(en.parts[0], set.ledgers[i], &e);
    }
    for (int i = optind; !rc && i < argc; i++) {
        struct source *s = source_open(argv[i], &e);
        if (!s) {
            rc = e.code;
            break;
        }
        const char *line;
        size_t len;
        bool too_long;
        int got;
        while ((got = source_next(s, &line, &len, &too_long, &e)) == 1)
            if ((rc = engine_line(&en, 0, line, len, too_long, source_name(s), source_line(s), &e)))
                break;
        if (got < 0)
            rc = e.code;
        source_close(s);
    }
    json_t *rec = NULL;
    int verdict = VERDICT_SOUND;
    if (!rc) {
        ledger_finish(en.parts[0]);
        int64_t t = ledger_max_time(en.parts[0]);
        rc = engine_record(&en, t == INT64_MIN ? 0 : t, true, &rec, &verdict, &e);
    }
    if (!rc) {
        FILE *f = out ? fopen(out, "w") : stdout;
        if (!f)
            rc = err_set(&e, AB_EINPUT, "--out '%s': cannot open", out);
        else {
            bool colour = !out && isatty(STDOUT_FILENO) && !getenv("NO_COLOR");
            int w = !strcmp(format, "json")
                        ? (json_dumpf(rec, f, JSON_COMPACT | JSON_REAL_PRECISION(17)) || fputc('\n', f) == EOF)
                        : render_text(f, rec, colour);
            if ((out && fclose(f)) || w)
                rc = err_set(&e, AB_EINPUT, "output: write failed");
        }
    }
    json_decref(rec);
    state_set_release(&set);
    engine_release(&en);
    free(states);
    if (rc)
        return cli_error(rc, "check: %s", e.msg);
    if (verdict == VERDICT_FAILED || (strict && verdict == VERDICT_DOUBTFUL))
        return AB_EUNSOUND;
    return AB_OK;
}
