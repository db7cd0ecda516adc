/*
 * bigmem.h — zeroed allocations for the ledger's large tables and regions.
 *
 * Small blocks come from malloc, aligned to a cache line. Blocks of 256 KiB
 * and more are mapped from the kernel (zero pages, nothing touched until
 * used); from 4 MiB, when `huge`, they are aligned to 2 MiB and marked for
 * transparent huge pages where the kernel offers them: the unit index and
 * the unit records are read at random, and with 4 KiB pages nearly every
 * such read would also miss the TLB. A huge page is backed whole at its
 * first touch, so a caller asks for them only once its structure is large
 * anyway (a watch keeps one ledger per partition, most of them small).
 *
 * big_free must be given the size big_alloc was given.
 *
 * A region grows in place: address space is reserved far beyond its length
 * (64 times its length, at least 256 MiB; address space only, no memory)
 * and made usable as it grows, so a table that doubles keeps the pages it has
 * touched. On the virtual machines measured, a fresh huge page costs 3–4.5 ns
 * per byte at its first touch, about thirty times a memset of memory already
 * held (bench/README.md); the unit index and the event-id ring double
 * several times. The unit records and the pending blocks live in regions
 * too, so that an element's address is its number times its size from one
 * base; they take huge pages only beyond their first 4 MiB (huge_from), as
 * a small ledger would otherwise hold whole huge pages for a few entries.
 */
#ifndef ABTALLY_BIGMEM_H
#define ABTALLY_BIGMEM_H

#include <stdbool.h>
#include <stddef.h>

void *big_alloc(size_t bytes, bool huge);
void big_free(void *p, size_t bytes);

struct big_region {
    char *p;          /* NULL until the first growth */
    size_t used;      /* usable bytes (a multiple of 2 MiB) */
    size_t reserved;  /* address space reserved at p */
    size_t huge_from; /* set before the first growth: huge pages only from this
                         offset on (a multiple of 2 MiB; 0: throughout) */
};

/* Makes the region at least `bytes` long, on huge pages (from huge_from)
 * where the kernel allows; bytes beyond the old length read as zero. The
 * contents stay when `keep` (copied only when the reserve runs out and the
 * region moves); without it, a region that moves reads as zero throughout,
 * and one that does not keeps its old bytes as they were. -1 when out of
 * memory or address space; the region is then unchanged. */
int big_region_grow(struct big_region *g, size_t bytes, bool keep);
/* Gives back the address space reserved beyond the region's length, so that
 * its next growth moves it (tests use it to reach, with little memory, what
 * growth past a reserve does). */
void big_region_trim(struct big_region *g);
void big_region_free(struct big_region *g);

#endif
