/*
 * source.c — the line reader (see source.h).
 */
#include "source.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <zlib.h>

#include "event.h"

#define BUF_SIZE (1u << 20)

struct source {
    gzFile gz;
    char *name;
    char *buf;     /* BUF_SIZE bytes of input */
    size_t start;  /* first unconsumed byte in buf */
    size_t end;    /* end of valid bytes in buf */
    bool eof;
    uint64_t line; /* lines returned so far */
    char *longbuf; /* holds a line that straddles the buffer end */
    size_t longcap;
};

struct source *source_open(const char *path, struct err *e)
{
    struct source *s = calloc(1, sizeof *s);
    if (!s) {
        err_set(e, AB_EINPUT, "out of memory");
        return NULL;
    }
    int is_stdin = !strcmp(path, "-");
    s->name = strdup(is_stdin ? "<stdin>" : path);
    s->buf = malloc(BUF_SIZE);
    if (!s->name || !s->buf) {
        source_close(s);
        err_set(e, AB_EINPUT, "out of memory");
        return NULL;
    }
    s->gz = is_stdin ? gzdopen(dup(STDIN_FILENO), "rb") : gzopen(path, "rb");
    if (!s->gz) {
        err_set(e, AB_EINPUT, "'%s': %s", path, errno ? strerror(errno) : "cannot open");
        source_close(s);
        return NULL;
    }
    gzbuffer(s->gz, 256 * 1024);
    return s;
}

void source_close(struct source *s)
{
    if (!s)
        return;
    if (s->gz)
        gzclose(s->gz);
    free(s->name);
    free(s->buf);
    free(s->longbuf);
    free(s);
}

/* Refills buf after moving the unconsumed tail to the front. */
static int refill(struct source *s, struct err *e)
{
    if (s->start > 0) {
        memmove(s->buf, s->buf + s->start, s->end - s->start);
        s->end -= s->start;
        s->start = 0;
    }
    if (s->eof || s->end == BUF_SIZE)
        return 0;
    int n = gzread(s->gz, s->buf + s->end, (unsigned)(BUF_SIZE - s->end));
    if (n < 0) {
        int zerr;
        const char *msg = gzerror(s->gz, &zerr);
        return err_set(e, AB_EINPUT, "'%s': read failed after line %llu: %s", s->name,
                       (unsigned long long)s->line, msg);
    }
    if (n == 0) {
        /* gzread ends quietly on a truncated stream: ask zlib whether it was whole */
        int zerr = Z_OK;
        const char *msg = gzerror(s->gz, &zerr);
        if (zerr != Z_OK && zerr != Z_STREAM_END)
            return err_set(e, AB_EINPUT, "'%s': read failed after line %llu: %s", s->name,
                           (unsigned long long)s->line, msg);
        s->eof = true;
    }
    s->end += (size_t)n;
    return 0;
}

int source_next(struct source *s, const char **line, size_t *len, bool *too_long, struct err *e)
{
    *too_long = false;
    size_t have = 0; /* bytes of a long line kept in longbuf */
    bool overflow = false;
    for (;;) {
        char *nl = memchr(s->buf + s->start, '\n', s->end - s->start);
        size_t chunk = nl ? (size_t)(nl - (s->buf + s->start)) : s->end - s->start;
        if (nl || (s->eof && (chunk > 0 || have > 0))) {
            const char *p = s->buf + s->start;
            s->start += chunk + (nl ? 1 : 0);
            s->line++;
            if (have == 0 && !overflow) {
                if (chunk > EVENT_MAX_LINE) {
                    *too_long = true;
                    chunk = 1024;
                }
                if (chunk > 0 && p[chunk - 1] == '\r' && !*too_long)
                    chunk--;
                *line = p;
                *len = chunk;
                return 1;
            }
            /* the end of a line that began in an earlier buffer */
            size_t body = chunk > 0 && p[chunk - 1] == '\r' ? chunk - 1 : chunk;
            if (chunk == 0 && have > 0 && s->longbuf[have - 1] == '\r')
                have--; /* the "\r" ended the previous buffer */
            if (!overflow && have + body <= EVENT_MAX_LINE) {
                memcpy(s->longbuf + have, p, body);
                have += body;
            } else {
                overflow = true;
            }
            *too_long = overflow;
            *line = s->longbuf;
            *len = overflow ? (have < 1024 ? have : 1024) : have;
            return 1;
        }
        if (s->eof)
            return 0;
        if (s->start == 0 && s->end == BUF_SIZE) {
            /* the buffer holds one unfinished line: keep it aside (up to the limit) */
            if (!overflow) {
                if (have + chunk > EVENT_MAX_LINE) {
                    overflow = true;
                    if (have == 0) {
                        if (!s->longbuf && !(s->longbuf = malloc(EVENT_MAX_LINE + 1)))
                            return err_set(e, AB_EINPUT, "out of memory");
                        memcpy(s->longbuf, s->buf, 1024);
                        have = 1024;
                    }
                } else {
                    if (!s->longbuf && !(s->longbuf = malloc(EVENT_MAX_LINE + 1)))
                        return err_set(e, AB_EINPUT, "out of memory");
                    memcpy(s->longbuf + have, s->buf, chunk);
                    have += chunk;
                }
            }
            s->start = s->end; /* drop what is now kept or skipped */
        }
        if (refill(s, e))
            return -1;
        if (have == 0 && !overflow && s->start == s->end && s->eof)
            return 0;
    }
}

const char *source_name(const struct source *s)
{
    return s->name;
}

uint64_t source_line(const struct source *s)
{
    return s->line;
}

uint64_t source_offset(const struct source *s)
{
    return (uint64_t)gzoffset(s->gz);
}
