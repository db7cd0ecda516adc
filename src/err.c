/* err.c — the error record (see err.h). */
#include "err.h"

#include <stdio.h>
#include <string.h>

int err_set(struct err *e, int code, const char *fmt, ...)
{
    if (e) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(e->msg, sizeof e->msg, fmt, ap);
        va_end(ap);
        e->code = code;
    }
    return code;
}

void err_clear(struct err *e)
{
    if (e) {
        e->code = AB_OK;
        e->msg[0] = '\0';
    }
}
