/*
 * err.h — one status enum and an error record that says what went wrong and where.
 *
 * Fallible functions take a `struct err *` and return its code, so a failure
 * reads `return err_set(e, AB_EINPUT, "config: key 'alpha': must be in (0, 1)")`.
 * Messages follow the project style: lowercase, no final period, the subject
 * first. Only main.c turns a code into an exit status.
 */
#ifndef ABTALLY_ERR_H
#define ABTALLY_ERR_H

#include <stdarg.h>

enum ab_status {
    AB_OK = 0,      /* success */
    AB_EINPUT = 1,  /* bad input, config or runtime failure (exit 1) */
    AB_EUSAGE = 2,  /* wrong command-line usage (exit 2) */
    AB_EUNSOUND = 3 /* check: the experiment failed its integrity checks (exit 3) */
};

struct err {
    int code;      /* an enum ab_status; AB_OK when nothing went wrong */
    char msg[512]; /* one line, no trailing newline */
};

/* Fills *e (when not NULL) with code and a printf-style message; returns code. */
int err_set(struct err *e, int code, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* Clears *e to AB_OK and an empty message. */
void err_clear(struct err *e);

#endif
