/*
 * main.c — the command table. Looks up argv[1], runs the command and turns its
 * status into the exit code. The only place that calls exit().
 */
#include <gsl/gsl_errno.h>
#include <locale.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "err.h"

struct command {
    const char *name;
    int (*fn)(int argc, char **argv);
    const char *summary;
};

static const struct command commands[] = {
    {"replay", cmd_replay, "replay archived event logs and print running estimates"},
    {"plan", cmd_plan, "sample size, duration and the sequential boundary schedule"},
    {"srm", cmd_srm, "sample-ratio mismatch test from unit counts per arm"},
    {"check", cmd_check, "the daily readout: integrity verdict, SRM and estimates (exit 3 when unsound)"},
    {"watch", cmd_watch, "consume the live event topic; same records as replay; resumable state"},
    {"merge", cmd_merge, "combine the states of shards or workers into one readout"},
    {"broker", cmd_broker, "start an embedded Kafka-protocol broker on loopback (for trying watch and for tests)"},
    {"publish", cmd_publish, "write event logs into a Kafka topic, keyed by unit"},
    {"simulate", cmd_simulate, "write an invented experiment's event log (with faults to inject) for trying abtally"},
    /* more rows: see include/cmd.h */
    {NULL, NULL, NULL},
};

static void print_help(FILE *f)
{
    fprintf(f,
            "abtally — joins A/B-test assignment and outcome events per unit, checks that\n"
            "randomization worked and reports effects with sequential-testing bounds.\n\n"
            "usage: abtally <command> [options]\n\ncommands:\n");
    for (const struct command *c = commands; c->name; c++)
        fprintf(f, "  %-9s %s\n", c->name, c->summary);
    fprintf(f, "\n'abtally <command> --help' explains a command with an example.\n"
               "exit codes: 0 done (check: sound), 1 bad input or runtime failure,\n"
               "2 usage error, 3 check found the experiment unsound.\n");
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    setlocale(LC_ALL, "C");
    if (argc < 2) {
        print_help(stderr);
        return AB_EUSAGE;
    }
    if (!strcmp(argv[1], "--help") || !strcmp(argv[1], "-h") || !strcmp(argv[1], "help")) {
        print_help(stdout);
        return AB_OK;
    }
    if (!strcmp(argv[1], "--version"))
        return cli_version();
    for (const struct command *c = commands; c->name; c++)
        if (!strcmp(argv[1], c->name)) {
            int rc = c->fn(argc - 1, argv + 1);
            if (fflush(stdout) != 0 || ferror(stdout)) {
                fprintf(stderr, "abtally: stdout: write failed\n");
                return AB_EINPUT;
            }
            return rc;
        }
    fprintf(stderr, "abtally: '%s': unknown command (try 'abtally --help')\n", argv[1]);
    return AB_EUSAGE;
}
