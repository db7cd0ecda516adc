/* cli.c — small helpers shared by the subcommands (see cmd.h). */
#include <stdarg.h>
#include <stdio.h>

#include "cmd.h"
#include "err.h"

int cli_error(int code, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fputs("abtally: ", stderr);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
    return code;
}

int cli_usage(const char *text, int to_stdout)
{
    if (to_stdout) {
        fputs(text, stdout);
        return AB_OK;
    }
    fputs(text, stderr);
    return AB_EUSAGE;
}

int cli_version(void)
{
    printf("abtally %s\n", ABTALLY_VERSION);
    return AB_OK;
}
