/*
 * runstat.c — runs a command and reports what it cost, for `make bench`
 * (so the benchmark needs neither GNU time nor a shell builtin).
 *
 * usage: runstat OUT COMMAND [ARG...]
 *
 * Runs COMMAND with the same stdin, stdout and stderr, waits for it and
 * appends one line to the file OUT:
 *   wall_seconds user_seconds sys_seconds max_rss_kib exit_status
 * (max RSS from getrusage of the child, in KiB as Linux reports it). Exits
 * with the command's status (128 + signal when it was killed).
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/time.h>
#include <sys/types.h>
#include <sys/wait.h>
#include <unistd.h>

#include "timefmt.h"

static double secs(struct timeval tv)
{
    return (double)tv.tv_sec + 1e-6 * (double)tv.tv_usec;
}

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: runstat OUT COMMAND [ARG...]\n");
        return 2;
    }
    double t0 = time_mono_s();
    pid_t pid = fork();
    if (pid < 0) {
        perror("runstat: fork");
        return 1;
    }
    if (pid == 0) {
        execvp(argv[2], argv + 2);
        fprintf(stderr, "runstat: %s: cannot run\n", argv[2]);
        _exit(127);
    }
    int status;
    struct rusage ru;
    if (wait4(pid, &status, 0, &ru) < 0) {
        perror("runstat: wait4");
        return 1;
    }
    double wall = time_mono_s() - t0;
    int rc = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
    FILE *f = fopen(argv[1], "a");
    if (!f) {
        perror("runstat: output file");
        return 1;
    }
    fprintf(f, "%.6f %.6f %.6f %ld %d\n", wall, secs(ru.ru_utime), secs(ru.ru_stime), ru.ru_maxrss, rc);
    fclose(f);
    return rc;
}
