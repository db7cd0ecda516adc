/*
 * bigmem.c — see bigmem.h.
 */
#include "bigmem.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>

#define LINE 64
#define MAP_MIN (256u * 1024)          /* from here on, mapped */
#define HUGE_MIN (4u * 1024 * 1024)    /* from here on, 2 MiB aligned and advised */
#define HUGE_PAGE (2u * 1024 * 1024)

static size_t round_up(size_t n, size_t to)
{
    return (n + to - 1) / to * to;
}

/* Maps n bytes (a multiple of HUGE_PAGE) at a 2 MiB boundary: one huge page
 * more is mapped and the ends beyond the aligned part given back. */
static char *map_aligned(size_t n, int prot, int flags)
{
    char *m = mmap(NULL, n + HUGE_PAGE, prot, MAP_PRIVATE | MAP_ANONYMOUS | flags, -1, 0);
    if (m == MAP_FAILED)
        return NULL;
    char *p = (char *)round_up((uintptr_t)m, HUGE_PAGE);
    if (p > m)
        munmap(m, (size_t)(p - m));
    if (p + n < m + n + HUGE_PAGE)
        munmap(p + n, (size_t)(m + n + HUGE_PAGE - (p + n)));
    return p;
}

void *big_alloc(size_t bytes, bool huge)
{
    if (!bytes)
        bytes = 1;
    if (bytes < MAP_MIN) {
        void *p = aligned_alloc(LINE, round_up(bytes, LINE));
        if (p)
            memset(p, 0, bytes);
        return p;
    }
    size_t n = round_up(bytes, HUGE_PAGE);
    if (!huge || bytes < HUGE_MIN) {
        void *m = mmap(NULL, n, PROT_READ | PROT_WRITE, MAP_PRIVATE | MAP_ANONYMOUS, -1, 0);
        return m == MAP_FAILED ? NULL : m;
    }
    char *p = map_aligned(n, PROT_READ | PROT_WRITE, 0);
    if (!p)
        return NULL;
#ifdef MADV_HUGEPAGE
    madvise(p, n, MADV_HUGEPAGE); /* a hint: without huge pages it still works */
#endif
    return p;
}

/* The size of a new reserve: RESERVE_FACTOR times the region's length, at
 * least RESERVE_MIN. */
#define RESERVE_MIN ((size_t)256 << 20)
#define RESERVE_FACTOR 64

/* Makes [from, to) of a reserve at p readable and writable, on huge pages
 * from huge_from where the kernel allows. */
static int make_usable(char *p, size_t from, size_t to, size_t huge_from)
{
    if (mprotect(p + from, to - from, PROT_READ | PROT_WRITE))
        return -1;
#ifdef MADV_HUGEPAGE
    size_t h = from > huge_from ? from : huge_from;
    if (h < to)
        madvise(p + h, to - h, MADV_HUGEPAGE);
#else
    (void)huge_from;
#endif
    return 0;
}

int big_region_grow(struct big_region *g, size_t bytes, bool keep)
{
    if (bytes > SIZE_MAX / RESERVE_FACTOR - HUGE_PAGE)
        return -1; /* the reserve's size would overflow */
    size_t n = round_up(bytes, HUGE_PAGE);
    if (n <= g->used)
        return 0;
    if (n <= g->reserved) {
        if (make_usable(g->p, g->used, n, g->huge_from))
            return -1;
        g->used = n;
        return 0;
    }
    /* a new reserve; where address space is limited (ulimit -v), a smaller one */
    size_t res = n > RESERVE_MIN / RESERVE_FACTOR ? n * RESERVE_FACTOR : RESERVE_MIN;
    char *p;
    while (!(p = map_aligned(res, PROT_NONE, MAP_NORESERVE)) && res > n) /* none of it usable yet */
        res = res / 4 > n ? res / 4 : n;
    if (!p)
        return -1;
    if (make_usable(p, 0, n, g->huge_from)) {
        munmap(p, res);
        return -1;
    }
    if (g->used) {
        if (keep)
            memcpy(p, g->p, g->used);
        munmap(g->p, g->reserved);
    }
    g->p = p;
    g->used = n;
    g->reserved = res;
    return 0;
}

void big_region_trim(struct big_region *g)
{
    if (g->p && g->reserved > g->used) {
        munmap(g->p + g->used, g->reserved - g->used);
        g->reserved = g->used;
    }
}

void big_region_free(struct big_region *g)
{
    if (g->p)
        munmap(g->p, g->reserved);
    size_t huge_from = g->huge_from;
    memset(g, 0, sizeof *g);
    g->huge_from = huge_from;
}

void big_free(void *p, size_t bytes)
{
    if (!p)
        return;
    if (!bytes)
        bytes = 1;
    if (bytes < MAP_MIN)
        free(p);
    else
        munmap(p, round_up(bytes, HUGE_PAGE));
}
