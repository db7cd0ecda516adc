/*
 * cmd.h — the subcommands of abtally.
 *
 * Adding a subcommand:
 *   1. write src/cmd_<name>.c with `int cmd_<name>(int argc, char **argv)`;
 *      argv[0] is the command name; parse with getopt_long; print `--help`
 *      from one usage string that ends with an example;
 *   2. declare it below and add a row to the table in src/main.c;
 *   3. return an enum ab_status (0 ok, 1 bad input, 2 usage, 3 unsound);
 *      report errors with cli_error() as one line `abtally: <what>: <why>`;
 *   4. add a command-line test under tests/cli/ and a section to doc/abtally.1
 *      and the README.
 */
#ifndef ABTALLY_CMD_H
#define ABTALLY_CMD_H

#include <stdio.h>

#define ABTALLY_VERSION "0.1.0"

int cmd_replay(int argc, char **argv);
int cmd_check(int argc, char **argv);
int cmd_srm(int argc, char **argv);
int cmd_plan(int argc, char **argv);
int cmd_simulate(int argc, char **argv);
int cmd_broker(int argc, char **argv);
int cmd_publish(int argc, char **argv);
int cmd_watch(int argc, char **argv);
int cmd_merge(int argc, char **argv);

/* Prints "abtally: <what>: <why>" on stderr. Returns code. */
int cli_error(int code, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/* Prints the usage text to stdout when `to_stdout` (for --help), else a hint
 * to stderr; returns AB_OK or AB_EUSAGE accordingly. */
int cli_usage(const char *text, int to_stdout);

/* Prints "abtally <version>" to stdout and returns AB_OK. */
int cli_version(void);

#endif
