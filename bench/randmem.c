/*
 * randmem.c — what a random cache line costs on this machine, for `make
 * bench`: the price of each line the ledger reads at random (an index slot,
 * a unit record, a pending block), measured with nothing else running.
 *
 * A region of MIB mebibytes (default 256: about the ledger's tables at 2M
 * units) is mapped on 2 MiB pages where the kernel allows (as bigmem.c does
 * for the ledger) and written once. Then, over 20M random 64-byte lines:
 *   prefetched  each line is prefetched 16 accesses before it is read and
 *               written (as the ledger's lookahead does): the cost per line
 *               is what the memory system can keep in flight, not its
 *               latency;
 *   dependent   each line's address comes from the line before (a pointer
 *               chase): one full latency per line.
 * Each figure is the median of 3 passes (fixed seed).
 *
 * usage: randmem [MIB]
 * prints: mib prefetched_ns_per_line dependent_ns_per_line
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>

#include "timefmt.h"

#define LINE 64
#define HUGE_PAGE (2u << 20)
#define ACCESSES 20000000u
#define AHEAD 16
#define PASSES 3

/* xorshift64 (Marsaglia 2003): a fixed, cheap stream of line numbers */
static uint64_t next(uint64_t *s)
{
    *s ^= *s << 13;
    *s ^= *s >> 7;
    *s ^= *s << 17;
    return *s;
}

static int cmp(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int main(int argc, char **argv)
{
    long mib = argc > 1 ? atol(argv[1]) : 256;
    if (argc > 2 || mib < 4 || mib > 65536) {
        fprintf(stderr, "usage: randmem [MIB]   (4 to 65536, default 256)\n");
        return 2;
    }
    size_t bytes = (size_t)mib << 20, lines = bytes / LINE;
    char *m = mmap(NULL, bytes + HUGE_PAGE, PROT_READ | PROT_WRITE, MAP_PRIVATE | MAP_ANONYMOUS, -1, 0);
    uint32_t *at = malloc((size_t)ACCESSES * sizeof *at);
    if (m == MAP_FAILED || !at) {
        fprintf(stderr, "randmem: out of memory\n");
        return 1;
    }
    char *p = (char *)(((uintptr_t)m + HUGE_PAGE - 1) & ~(uintptr_t)(HUGE_PAGE - 1));
#ifdef MADV_HUGEPAGE
    madvise(p, bytes, MADV_HUGEPAGE);
#endif
    memset(p, 1, bytes);
    uint64_t s = UINT64_C(88172645463325252);
    for (uint32_t i = 0; i < ACCESSES; i++)
        at[i] = (uint32_t)(next(&s) % lines);

    double pre[PASSES], dep[PASSES];
    uint64_t sum = 0;
    for (int k = 0; k < PASSES; k++) {
        double t0 = time_mono_s();
        for (uint32_t i = 0; i < ACCESSES; i++) {
            if (i + AHEAD < ACCESSES)
                __builtin_prefetch(p + (size_t)at[i + AHEAD] * LINE, 1);
            uint64_t *x = (uint64_t *)(p + (size_t)at[i] * LINE);
            sum += x[1];
            x[0]++;
        }
        pre[k] = (time_mono_s() - t0) / ACCESSES * 1e9;
    }
    /* the chase: each visited line holds the number of the next one, over n
     * distinct lines spread evenly through the region and put in one random
     * cycle (Sattolo's shuffle), so no line is met twice before the cycle
     * ends */
    uint32_t n = ACCESSES < lines ? ACCESSES : (uint32_t)lines;
    size_t gap = lines / n;
    for (uint32_t i = 0; i < n; i++)
        at[i] = (uint32_t)(i * gap);
    for (uint32_t i = n - 1; i > 0; i--) {
        uint32_t j = (uint32_t)(next(&s) % i), t = at[i];
        at[i] = at[j];
        at[j] = t;
    }
    for (uint32_t i = 0; i < n; i++)
        *(uint64_t *)(p + (size_t)at[i] * LINE) = at[(i + 1) % n];
    for (int k = 0; k < PASSES; k++) {
        uint64_t line = at[0];
        uint32_t steps = n < 4000000 ? n : 4000000;
        double t0 = time_mono_s();
        for (uint32_t i = 0; i < steps; i++)
            line = *(volatile uint64_t *)(p + (size_t)line * LINE);
        dep[k] = (time_mono_s() - t0) / steps * 1e9;
        sum += line;
    }
    qsort(pre, PASSES, sizeof *pre, cmp);
    qsort(dep, PASSES, sizeof *dep, cmp);
    printf("%ld %.2f %.1f\n", mib, pre[PASSES / 2], dep[PASSES / 2]);
    volatile uint64_t sink = sum; /* keeps the reads */
    (void)sink;
    free(at);
    munmap(m, bytes + HUGE_PAGE);
    return 0;
}
