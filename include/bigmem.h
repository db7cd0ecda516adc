/*
 * bigmem.h — zeroed allocations for the ledger's large tables and chunks.
 *
 * Small blocks come from malloc, aligned to a cache line. Blocks of 256 KiB
 * and more are mapped from the kernel (zero pages, nothing touched until
 * used); from 4 MiB, when `huge`, they are aligned to 2 MiB and marked for
 * transparent huge pages where the kernel offers them: the unit index, the
 * unit records and the event-id table are read at random, and with 4 KiB
 * pages nearly every such read would also miss the TLB. A huge page is
 * backed whole at its first touch, so a caller asks for them only once its
 * structure is large anyway (a watch keeps one ledger per partition, most of
 * them small).
 *
 * big_free must be given the size big_alloc was given.
 */
#ifndef ABTALLY_BIGMEM_H
#define ABTALLY_BIGMEM_H

#include <stdbool.h>
#include <stddef.h>

void *big_alloc(size_t bytes, bool huge);
void big_free(void *p, size_t bytes);

#endif
