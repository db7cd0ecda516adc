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
    size_t extra = huge && bytes >= HUGE_MIN ? HUGE_PAGE : 0;
    char *m = mmap(NULL, n + extra, PROT_READ | PROT_WRITE, MAP_PRIVATE | MAP_ANONYMOUS, -1, 0);
    if (m == MAP_FAILED)
        return NULL;
    if (!extra)
        return m;
    /* keep the 2 MiB aligned part of the mapping */
    char *p = (char *)round_up((uintptr_t)m, HUGE_PAGE);
    if (p > m)
        munmap(m, (size_t)(p - m));
    if (p + n < m + n + extra)
        munmap(p + n, (size_t)(m + n + extra - (p + n)));
#ifdef MADV_HUGEPAGE
    madvise(p, n, MADV_HUGEPAGE); /* a hint: without huge pages it still works */
#endif
    return p;
}

/* The size of a new reserve: RESERVE_FACTOR times the region's length, at
 * least RESERVE_MIN. */
#define RESERVE_MIN ((size_t)256 << 20)
#define RESERVE_FACTOR 64

/* Maps res bytes of address space, 2 MiB aligned, none of it usable yet. */
static char *reserve(size_t res)
{
    char *m = mmap(NULL, res + HUGE_PAGE, PROT_NONE, MAP_PRIVATE | MAP_ANONYMOUS | MAP_NORESERVE, -1, 0);
    if (m == MAP_FAILED)
        return NULL;
    char *p = (char *)round_up((uintptr_t)m, HUGE_PAGE);
    if (p > m)
        munmap(m, (size_t)(p - m));
    if (p + res < m + res + HUGE_PAGE)
        munmap(p + res, (size_t)(m + res + HUGE_PAGE - (p + res)));
    return p;
}

int big_region_grow(struct big_region *g, size_t bytes, bool keep)
{
    if (bytes > SIZE_MAX / RESERVE_FACTOR - HUGE_PAGE)
        return -1; /* the reserve's size would overflow */
    size_t n = round_up(bytes, HUGE_PAGE);
    if (n <= g->used)
        return 0;
    if (n <= g->reserved) {
        if (mprotect(g->p + g->used, n - g->used, PROT_READ | PROT_WRITE))
            return -1;
#ifdef MADV_HUGEPAGE
        madvise(g->p + g->used, n - g->used, MADV_HUGEPAGE);
#endif
        g->used = n;
        return 0;
    }
    /* a new reserve; where address space is limited (ulimit -v), a smaller one */
    size_t res = n > RESERVE_MIN / RESERVE_FACTOR ? n * RESERVE_FACTOR : RESERVE_MIN;
    char *p;
    while (!(p = reserve(res)) && res > n)
        res = res / 4 > n ? res / 4 : n;
    if (!p)
        return -1;
    if (mprotect(p, n, PROT_READ | PROT_WRITE)) {
        munmap(p, res);
        return -1;
    }
#ifdef MADV_HUGEPAGE
    madvise(p, n, MADV_HUGEPAGE);
#endif
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

void big_region_free(struct big_region *g)
{
    if (g->p)
        munmap(g->p, g->reserved);
    memset(g, 0, sizeof *g);
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
