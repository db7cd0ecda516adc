/*
 * cmd_merge.c — `abtally merge`: combines the states of several shards or
 * workers into one, exactly, and prints the merged final summary.
 */
#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "engine.h"
#include "err.h"
#include "state.h"
#include "states.h"

static const char usage[] =
    "usage: abtally merge --config EXP.json [--out FILE.abstate] STATE...\n"
    "\n"
    "Combines snapshots of disjoint units (from 'replay --shard I/N --save-state DIR'\n"
    "or from the partitions of 'watch --state DIR') and prints the final summary of\n"
    "all of them, identical to one replay of the whole log. STATE is a snapshot file\n"
    "or a directory of them. --out also writes the combined state as one file.\n"
    "\n"
    "options:\n"
    "  -c, --config FILE   the experiment config the states were made with (required)\n"
    "  -o, --out FILE      write the merged state (a path ending in .abstate)\n"
    "      --unit-key FILE the secret unit key the states were made with\n"
    "  -h, --help          this help\n"
    "      --version       print the version\n"
    "\n"
    "example:\n"
    "  abtally replay --config c.json --shard 0/2 --save-state st --final-only log.gz\n"
    "  abtally replay --config c.json --shard 1/2 --save-state st --final-only log.gz\n"
    "  abtally merge --config c.json st\n";

int cmd_merge(int argc, char **argv)
{
    static const struct option opts[] = {
        {"config", required_argument, NULL, 'c'},
        {"out", required_argument, NULL, 'o'},
        {"unit-key", required_argument, NULL, 'k'},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, 'V'},
        {NULL, 0, NULL, 0},
    };
    struct engine_opts o;
    engine_opts_default(&o);
    o.final_only = true;
    const char *out = NULL;
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, "c:o:h", opts, NULL)) != -1) {
        switch (c) {
        case 'c': o.config_path = optarg; break;
        case 'o': out = optarg; break;
        case 'k': o.unit_key = optarg; break;
        case 'h': return cli_usage(usage, 1);
        case 'V': return cli_version();
        default: return cli_usage(usage, 0);
        }
    }
    if (!o.config_path)
        return cli_error(AB_EUSAGE, "merge: --config is required (try 'abtally merge --help')");
    if (optind >= argc)
        return cli_error(AB_EUSAGE, "merge: name at least one state file or directory");
    struct err e;
    err_clear(&e);
    struct engine en;
    struct state_set set = {0};
    int rc = engine_init(&en, &o, 1, &e);
    if (!rc)
        rc = state_set_load(&set, &en.lay, argv + optind, argc - optind, &e);
    for (int i = 0; !rc && i < set.n; i++)
        rc = ledger_absorb(en.parts[0], set.ledgers[i], &e);
    if (!rc) {
        for (int i = 0; i < set.n; i++)
            if (ledger_max_time(set.ledgers[i]) > en.tmax)
                en.tmax = ledger_max_time(set.ledgers[i]);
        rc = engine_finish(&en, &e);
    }
    if (!rc && out) {
        char *dir = strdup(out), *slash = dir ? strrchr(dir, '/') : NULL;
        const char *name = slash ? slash + 1 : out;
        if (slash)
            *slash = '\0';
        struct state_meta meta = {.partition = 0, .n_shards = 1, .offset = -1,
                                  .lateness_us = o.lateness_us, .horizon_us = o.horizon_us};
        snprintf(meta.source, sizeof meta.source, "merge");
        if (!dir)
            rc = err_set(&e, AB_EINPUT, "out of memory");
        else
            rc = state_save(slash ? dir : ".", name, &meta, en.parts[0], &en.lay, &e);
        free(dir);
    }
    state_set_release(&set);
    engine_release(&en);
    if (rc)
        return cli_error(rc, "merge: %s", e.msg);
    return AB_OK;
}
