/*
 * bytebuf.h — a growable byte buffer for the tests, the fuzz harnesses and
 * bench/parse_floor: byte_buf_write has the shape of ledger_write_fn, so a
 * ledger can be saved into memory, and the bytes are always followed by a 0,
 * so text in it reads as a string. The owner frees .p.
 */
#ifndef ABTALLY_TEST_BYTEBUF_H
#define ABTALLY_TEST_BYTEBUF_H

#include <stdlib.h>
#include <string.h>

struct byte_buf {
    char *p;
    size_t n, cap; /* bytes held; bytes allocated (at least n + 1) */
};

/* Appends n bytes at p to the buffer ctx (a struct byte_buf); -1 when out of memory. */
static inline int byte_buf_write(void *ctx, const void *p, size_t n)
{
    struct byte_buf *b = ctx;
    if (b->n + n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 4096;
        while (cap < b->n + n + 1)
            cap *= 2;
        char *q = realloc(b->p, cap);
        if (!q)
            return -1;
        b->p = q;
        b->cap = cap;
    }
    if (n)
        memcpy(b->p + b->n, p, n);
    b->n += n;
    b->p[b->n] = '\0';
    return 0;
}

#endif
