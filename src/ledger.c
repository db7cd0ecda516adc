/*
 * ledger.c — the per-unit join and per-arm tallies (see ledger.h).
 *
 * Storage (bytes for a two-metric experiment of mean/binary metrics):
 *   unit record   24-byte header (key, exposure, pending head, arm, flags,
 *                 segment) + 8 bytes per metric variable: 24 + 2·2·8 = 56,
 *                 then its 8-byte id link (struct idlink), stored 64 bytes
 *                 apart (a record of up to 56 bytes takes one cache line with
 *                 its link, not two; a larger one is stored rec_size + 8
 *                 apart); records sit one after another in a bigmem region,
 *                 grown in place 65,536 at a time (REC_STEP), so record i
 *                 is at one multiplication from the region's start;
 *   index         open addressing (linear probing) of 8-byte entries: the
 *                 record number and the high half of the unit's key (a probe
 *                 reads a record only when the key probably matches); load
 *                 0.35–0.7: 11.4–23 bytes per unit;
 *   pending       blocks of three outcomes a unit may still need (one cache
 *                 line, struct pblk), freed when the watermark passes (see
 *                 ledger.h); while a unit is not exposed, its first value
 *                 slot holds its pending floor (pend_floor), so sweeps skip
 *                 lists with nothing to drop;
 *   event ids     a ring of 24-byte entries (hash, time, link) in arrival
 *                 order, each unit's linked from its record (8 bytes after
 *                 it: the newest entry's position and a 32-bit filter of
 *                 the unit's ids, so a new id is known new from the record
 *                 alone, with no memory read of its own; see "ids"); the
 *                 ids that have no chain sit in a table of 16-byte slots
 *                 (hash, time), linear probing, load ≤ 0.5, read only while
 *                 it may hold one within the horizon.
 * The index, the id table and the ring, once 4 MiB, double in place (a
 * bigmem region: only the new half is fresh memory).
 * Nothing is allocated per event in steady state: the records, the index,
 * the pending blocks, the ring and the id table grow in steps and are
 * reused (the ring's entries once expired; the id table drops expired ids in
 * place, and reuses their slots). Sweeps settle
 * units in batches whose pending lists are walked side by side (settle).
 * Tables of 4 MiB and more, and the records and pending blocks beyond their
 * first 4 MiB, are mapped on huge pages where the kernel allows (bigmem.h);
 * a small ledger (a watch keeps one per partition) stays on 4 KiB pages.
 *
 * Lookahead: with millions of units the index, the records and the id table
 * are far bigger than the caches, and each event would wait for several
 * memory reads in turn. So ledger_apply does what needs the event itself
 * (hashing, the arm and outcome-name lookups, the segment name) at once,
 * queues the result in a ring of LOOKAHEAD events and prefetches what it
 * will touch; the event is applied when LOOKAHEAD more have arrived, by then
 * from the cache. Events are applied in arrival order, and every function
 * that reads or writes the state (all but ledger_apply and ledger_reject)
 * first applies the events still queued, so callers see exactly the state of
 * every event passed in.
 */
#include "ledger.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "bigmem.h"
#include "rebucket.h"
#include "timefmt.h"

#define F_MULTI 0x01 /* assigned to more than one arm: out of the tallies */
#define F_FINAL 0x02 /* exposure can no longer move: pending list released */
#define F_DEAD 0x04  /* to be removed at the next compaction */

#define REC_STEP 65536u /* records the region grows by */
/* records and pending blocks use huge pages from here on (see the top) */
#define HUGE_FROM ((size_t)4 << 20)

struct urec {
    uint64_t key;  /* SipHash of the unit id */
    int64_t expo;  /* exposure time (µs), NO_TIME before the first assignment */
    uint32_t pend; /* head of the pending list, 0 when empty */
    uint8_t arm;   /* arm index, ARM_NONE before the first assignment */
    uint8_t flags; /* F_* */
    uint16_t seg;  /* segment number + 1 (0: no attrs) */
    double v[];    /* per metric values, at layout offsets */
};

/* Pending outcomes of a unit sit in blocks of PB_N entries, one cache line
 * each, linked newest block first; within a block, entries 0..n-1 are oldest
 * first. So the list reads newest first, as entries were added, and walking
 * it costs a memory read per PB_N entries, not one per entry. */
#define PB_N 3
struct pblk {
    int64_t t[PB_N];  /* outcome times */
    double v[PB_N];   /* outcome values */
    uint32_t next;    /* next (older) block of the unit, 0 ends */
    uint8_t ev[PB_N]; /* outcome name index (layout), or PB_DUP */
    uint8_t n;        /* entries used */
    uint64_t spare;
};
_Static_assert(sizeof(struct pblk) == 64, "a pending block is one cache line");

/* A pending entry that stands for a duplicate line of a unit whose exposure
 * is not settled yet: counted by arm once it is (order-independent). In
 * snapshots it is written as DUP_MARK. */
#define PB_DUP 0xFF
#define DUP_MARK UINT32_MAX

/* Blocks are numbered from 1 (0 ends a list), block i at i · 64 bytes into
 * a bigmem region that doubles (in place while its reserve lasts; when it
 * moves, no block address may be held across pb_alloc). */

struct idslot {
    uint64_t h; /* id hash, 0 = empty */
    int64_t t;  /* event time */
};

/* An id in the ring (see "ids"). */
struct ident {
    uint64_t h;    /* id hash (never 0; 0: a gap, not an id) */
    int64_t t;     /* event time */
    uint32_t prev; /* position (low 32 bits) of the unit's previous id, 0: none */
    uint32_t spare;
};

/* Beside each record (at rec_size, in the record's slot): the unit's newest
 * id in the ring and the filter of its ids there (see "ids"). */
struct idlink {
    uint32_t head; /* position (low 32 bits), 0: none */
    uint32_t filt; /* id_bits of every id of the unit in the ring, and maybe more */
};

/* The segment name of an assignment's attrs: "key=value" pairs sorted by key,
 * joined by 0x1f (see ledger.h); longer names go to SEG_OTHER. */
#define SEG_NAME_MAX 512

/* A queued event: what applying it needs, taken from the decoder's event
 * (whose strings are gone by the time it is applied). */
struct qev {
    uint64_t key;   /* SipHash of the unit id */
    struct urec *rec; /* the record the index named at the record step: probably the
                         unit's (unit_of checks), NULL when none or after records moved */
    uint64_t idh;   /* SipHash of the id (scoped by unit; 1 for 0), when has_id */
    int64_t t;      /* event time */
    double value;   /* outcome value */
    int32_t target; /* outcome: outcome-name index, -1 when no metric uses it */
    int16_t arm;    /* assignment of this experiment: arm index; -1: other experiment */
    uint8_t kind;   /* EV_ASSIGN or EV_OUTCOME */
    bool has_id;
    uint8_t hash_check; /* assignment: 0, or HASH_MATCH / HASH_MISMATCH (config hash re-check) */
    uint16_t seg_n; /* assignment: bytes of seg (0: no attrs) */
    bool seg_other; /* assignment: the attrs fall in SEG_OTHER */
    char seg[SEG_NAME_MAX];
};

#define HASH_MATCH 1
#define HASH_MISMATCH 2

/* Events queued before they are applied (a power of two), and how many
 * events after its own an event's unit record, then the head block of its
 * pending list, are prefetched; for an assignment, the list's next
 * PENDING_AHEAD blocks follow one event apart (see prefetch_index). */
#define LOOKAHEAD 16
#define LOOKAHEAD_RECORD 8
#define LOOKAHEAD_PENDING 12
#define PENDING_AHEAD 3
_Static_assert(LOOKAHEAD_PENDING + PENDING_AHEAD < LOOKAHEAD, "every step comes before the event is applied");

struct ledger {
    const struct layout *lay;
    const struct config *cfg;
    /* unit records: record i at recs.p + i · stride */
    struct big_region recs;
    size_t slot;   /* bytes of a record in memory: rec_size, then its struct idlink */
    size_t stride; /* bytes between records: slot, or a whole line when it fits one */
    uint32_t n_recs, rec_cap;
    uint64_t *index; /* IX_ENTRY(key, record number + 1); 0 = empty */
    size_t index_cap;
    struct big_region index_region; /* holds the index once it is large (TABLE_REGION_MIN) */
    /* pending outcomes: block i at pbs.p + i · 64 */
    struct big_region pbs;
    uint32_t pb_top;  /* blocks below it have been used (bump allocation) */
    uint32_t pb_free; /* free list of released blocks, linked by next */
    uint32_t pend_used, pend_after_sweep; /* entries */
    /* event ids: the ring (positions [ir_tail, ir_next), entry p at p mod ir_cap) */
    struct ident *ir;
    size_t ir_cap;
    uint64_t ir_tail, ir_next;
    struct big_region ir_region; /* holds the ring once it is large */
    /* event ids outside the ring */
    struct idslot *ids;
    size_t ids_cap, ids_n;
    int64_t ids_max_t;            /* latest time put in the table (but see table_mode), INT64_MIN before any */
    struct big_region ids_region; /* holds the table once it is large */
    /* multi-arm units: key → mask of arms named */
    struct multi {
        uint64_t key, mask;
    } *multi;
    size_t multi_cap, multi_n;
    /* segments */
    struct seg_row *segs;
    size_t n_segs, segs_cap;
    /* first-exposure days */
    struct day_row *days;
    size_t n_days, days_cap;
    /* time */
    int64_t max_time;   /* latest event time seen, INT64_MIN before any */
    int64_t last_sweep; /* watermark at the last sweep */
    bool finished;
    /* tallies */
    uint64_t units[CONFIG_MAX_ARMS];
    struct moments *mom; /* [metric][arm] */
    struct counters cnt;
    /* lookahead: events accepted, not applied yet (ring[(q_head + i) % LOOKAHEAD]) */
    struct qev *ring;
    uint32_t q_head, q_n;
    bool failed;                                  /* out of memory while applying a queued event */
    void *md;                                     /* digest context of the hash re-check, reused */
    uint32_t event_len[2 * CONFIG_MAX_METRICS];   /* strlen of layout event names */
};

/* ---------------------------------------------------------------- layout */

static int event_index(const struct layout *lay, const char *name)
{
    for (int i = 0; i < lay->n_events; i++)
        if (!strcmp(lay->event_names[i], name))
            return i;
    return -1;
}

/* Fingerprint of the config parts that shape a ledger's contents: the
 * experiment, the arms in order, the window, the covariate and the metrics'
 * definitions. Alpha, SRM and sequential settings may change freely. */
static uint64_t layout_digest(const struct config *cfg)
{
    char buf[64 * 1024];
    size_t n = 0;
#define PUT(...) n += (size_t)snprintf(n < sizeof buf ? buf + n : buf, n < sizeof buf ? sizeof buf - n : 0, __VA_ARGS__)
    PUT("v1|%s|%lld|%lld|%d|%lld|", cfg->experiment, (long long)cfg->window_start,
        (long long)cfg->window_end, cfg->has_covariate, (long long)cfg->pre_us);
    for (int a = 0; a < cfg->n_arms; a++)
        PUT("arm:%s|", cfg->arms[a].name);
    for (int m = 0; m < cfg->n_metrics; m++) {
        const struct metric_cfg *mc = &cfg->metrics[m];
        PUT("metric:%s:%d:%s:%s:%s:%d:%lld:%d:%.17g|", mc->name, (int)mc->type,
            mc->event ? mc->event : "", mc->numerator ? mc->numerator : "",
            mc->denominator ? mc->denominator : "", mc->has_window, (long long)mc->window_us,
            mc->has_cap, mc->has_cap ? mc->cap : 0.0);
    }
#undef PUT
    if (n > sizeof buf)
        n = sizeof buf;
    return siphash24(&HASH_KEY_DEFAULT, buf, n);
}

static int add_target(struct layout *lay, const char *name, int metric, int part, struct err *e)
{
    int i = event_index(lay, name);
    if (i < 0) {
        i = lay->n_events++;
        if (!(lay->event_names[i] = strdup(name)))
            return err_set(e, AB_EINPUT, "out of memory");
    }
    lay->targets[i][lay->n_targets[i]++] = (struct target){metric, part};
    return AB_OK;
}

int layout_init(struct layout *lay, const struct config *cfg, int64_t lateness_us,
                int64_t dedup_horizon_us, struct err *e)
{
    memset(lay, 0, sizeof *lay);
    lay->cfg = cfg;
    lay->unit_key = HASH_KEY_DEFAULT;
    lay->lateness_us = lateness_us;
    lay->dedup_horizon_us = dedup_horizon_us;
    lay->n_shards = 1;
    int off = 0;
    for (int m = 0; m < cfg->n_metrics; m++) {
        const struct metric_cfg *mc = &cfg->metrics[m];
        lay->nv[m] = moments_nvars(mc->type);
        lay->off[m] = off;
        off += lay->nv[m];
        int rc = mc->type == MT_RATIO
                     ? add_target(lay, mc->numerator, m, 0, e) || add_target(lay, mc->denominator, m, 1, e)
                     : add_target(lay, mc->event, m, 0, e);
        if (rc)
            return AB_EINPUT;
    }
    lay->n_values = off;
    lay->rec_size = sizeof(struct urec) + (size_t)off * sizeof(double);
    lay->digest = layout_digest(cfg);
    return AB_OK;
}

void layout_release(struct layout *lay)
{
    for (int i = 0; i < lay->n_events; i++)
        free(lay->event_names[i]);
    memset(lay, 0, sizeof *lay);
}

void layout_vector(const struct layout *lay, int m, const double *values, double *v)
{
    const struct metric_cfg *mc = &lay->cfg->metrics[m];
    const double *s = values + lay->off[m];
    for (int j = 0; j < lay->nv[m]; j++)
        v[j] = s[j];
    if (mc->has_cap) {
        /* cap the summed value and its pre-period twin (ratio: the numerators) */
        int a = 0, b = mc->type == MT_RATIO ? 2 : 1;
        if (v[a] > mc->cap)
            v[a] = mc->cap;
        if (v[b] > mc->cap)
            v[b] = mc->cap;
    }
}

/* ---------------------------------------------------------------- records */

static struct urec *rec_at(const struct ledger *l, uint32_t i)
{
    return (struct urec *)(l->recs.p + (size_t)i * l->stride);
}

/* Forgets the record queued events found at their record step: the records
 * moved (a sweep's compaction, or the region's move to a larger reserve). */
static void forget_guesses(struct ledger *l)
{
    for (int k = 0; k < LOOKAHEAD; k++)
        l->ring[k].rec = NULL;
}

/* An index entry: the record number + 1 in the low half, the high half of the
 * unit's key beside it, so that a probe reads a record only when its key
 * probably matches (a record read is a cache miss; the probe run is not). */
#define IX_ENTRY(key, n) (((key) & UINT64_C(0xffffffff00000000)) | (uint64_t)(n))
#define IX_REC(e) ((uint32_t)(e))
#define IX_SAME(e, key) ((((e) ^ (key)) >> 32) == 0)

/* Places record i (key) in the index ix of cap slots. */
static void index_put(uint64_t *ix, size_t cap, uint64_t key, uint32_t i)
{
    size_t s = key & (cap - 1);
    while (ix[s])
        s = (s + 1) & (cap - 1);
    ix[s] = IX_ENTRY(key, i + 1);
}

/* From this size on, the index, the id table and the id ring grow in place
 * in a region (bigmem.h): doubling then touches only the new half. */
#define TABLE_REGION_MIN ((size_t)4 << 20)

/* Gives a table of old_bytes (at *tab; in region g when g->p) new_bytes,
 * all zero; the old contents are lost. */
static int table_grow(void **tab, size_t old_bytes, struct big_region *g, size_t new_bytes)
{
    if (new_bytes < TABLE_REGION_MIN) {
        void *t = big_alloc(new_bytes, true);
        if (!t)
            return -1;
        big_free(*tab, old_bytes);
        *tab = t;
        return 0;
    }
    char *was = g->p;
    if (big_region_grow(g, new_bytes, false))
        return -1;
    if (!was)
        big_free(*tab, old_bytes);
    else if (g->p == was)
        memset(g->p, 0, old_bytes); /* already held: cheap to clear */
    *tab = g->p;
    return 0;
}

/* Frees a table of `bytes` at tab, held by region g once it grew into one. */
static void table_free(void *tab, size_t bytes, struct big_region *g)
{
    if (g->p)
        big_region_free(g);
    else
        big_free(tab, bytes);
}

static int index_grow(struct ledger *l)
{
    size_t cap = l->index_cap ? l->index_cap * 2 : 1024;
    void *ix = l->index;
    if (table_grow(&ix, l->index_cap * sizeof *l->index, &l->index_region, cap * sizeof *l->index))
        return -1;
    l->index = ix;
    l->index_cap = cap;
    for (uint32_t i = 0; i < l->n_recs; i++)
        index_put(l->index, cap, rec_at(l, i)->key, i);
    return 0;
}

/* Finds the record of key; creates it when `create`. NULL if absent (or no memory). */
static struct urec *unit_find(struct ledger *l, uint64_t key, bool create)
{
    if (l->index_cap) {
        size_t mask = l->index_cap - 1, s = key & mask;
        for (uint64_t e; (e = l->index[s]); s = (s + 1) & mask) {
            if (IX_SAME(e, key)) {
                struct urec *r = rec_at(l, IX_REC(e) - 1);
                if (r->key == key)
                    return r;
            }
        }
    }
    if (!create)
        return NULL;
    if ((l->n_recs + 1) * 10 > l->index_cap * 7 && index_grow(l))
        return NULL;
    uint32_t i = l->n_recs;
    if (i == l->rec_cap) {
        if (l->rec_cap > UINT32_MAX - 1 - REC_STEP)
            return NULL; /* record numbers + 1 are 32-bit (index entries) */
        char *was = l->recs.p;
        if (big_region_grow(&l->recs, ((size_t)l->rec_cap + REC_STEP) * l->stride, true))
            return NULL;
        l->rec_cap += REC_STEP;
        if (was && l->recs.p != was) /* moved: every record pointer held is stale */
            forget_guesses(l);
    }
    struct urec *r = rec_at(l, i);
    memset(r, 0, l->slot);
    r->key = key;
    r->expo = NO_TIME;
    r->arm = ARM_NONE;
    l->n_recs++;
    index_put(l->index, l->index_cap, key, i);
    return r;
}

/* ---------------------------------------------------------------- pending */

static struct pblk *pb(const struct ledger *l, uint32_t i)
{
    return (struct pblk *)l->pbs.p + i;
}

/* A free block (n = 0, next = 0), 0 when out of memory. Released blocks are
 * reused first, so the memory touched follows the peak of pending entries. */
static uint32_t pb_alloc(struct ledger *l)
{
    uint32_t i = l->pb_free;
    if (i) {
        l->pb_free = pb(l, i)->next;
        if (l->pb_free) /* the next allocation's block, likely far from cache */
            __builtin_prefetch(pb(l, l->pb_free), 1);
    } else {
        if (!l->pb_top)
            l->pb_top = 1; /* block 0 is the null link */
        if (l->pb_top == UINT32_MAX)
            return 0; /* block numbers are 32-bit */
        if ((size_t)l->pb_top * sizeof(struct pblk) >= l->pbs.used &&
            big_region_grow(&l->pbs, l->pbs.used ? 2 * l->pbs.used : sizeof(struct pblk), true))
            return 0;
        i = l->pb_top++;
    }
    struct pblk *b = pb(l, i);
    b->n = 0;
    b->next = 0;
    return i;
}

static void pb_release(struct ledger *l, uint32_t i)
{
    pb(l, i)->next = l->pb_free;
    l->pb_free = i;
}

static size_t pb_bytes(const struct ledger *l)
{
    return l->pbs.used;
}

/* A unit not yet exposed has all its values at zero (they are computed from
 * its pending list when it is exposed, recompute), so the first value slot
 * holds instead its pending floor: a lower bound of the times of its pending
 * entries, lowered on every entry added, made exact when a sweep walks the
 * list. A sweep skips the walk of a unit whose floor is not older than the
 * cutoff (nothing to drop): without it every sweep would walk every pending
 * list, a random memory read per entry. A zero floor (a record just made, or
 * loaded from a snapshot, which stores zero values) only costs a walk.
 * ledger_save writes the slot as zero, so snapshots are unchanged. */
static int64_t pend_floor(const struct ledger *l, const struct urec *r)
{
    int64_t t = INT64_MIN;
    if (l->lay->n_values)
        memcpy(&t, &r->v[0], sizeof t);
    return t;
}

static void set_pend_floor(const struct ledger *l, struct urec *r, int64_t t)
{
    if (l->lay->n_values)
        memcpy(&r->v[0], &t, sizeof t);
}

/* Adds an entry at the head (newest end) of r's pending list; -1 when out of memory. */
static int pend_push(struct ledger *l, struct urec *r, int64_t t, double v, uint8_t ev)
{
    struct pblk *b = r->pend ? pb(l, r->pend) : NULL;
    if (!b || b->n == PB_N) {
        uint32_t i = pb_alloc(l);
        if (!i)
            return -1;
        b = pb(l, i);
        b->next = r->pend;
        r->pend = i;
    }
    b->t[b->n] = t;
    b->v[b->n] = v;
    b->ev[b->n] = ev;
    b->n++;
    l->pend_used++;
    if (r->arm == ARM_NONE && t < pend_floor(l, r))
        set_pend_floor(l, r, t);
    return 0;
}

/* Adds an entry at the tail (oldest end) of r's pending list, whose last
 * block is *tail (0: the list is empty; updated); -1 when out of memory. */
static int pend_append(struct ledger *l, struct urec *r, uint32_t *tail, int64_t t, double v, uint8_t ev)
{
    if (!*tail || pb(l, *tail)->n == PB_N) {
        uint32_t i = pb_alloc(l); /* may move the blocks */
        if (!i)
            return -1;
        if (*tail)
            pb(l, *tail)->next = i;
        else
            r->pend = i;
        *tail = i;
    }
    struct pblk *b = pb(l, *tail);
    memmove(b->t + 1, b->t, b->n * sizeof b->t[0]);
    memmove(b->v + 1, b->v, b->n * sizeof b->v[0]);
    memmove(b->ev + 1, b->ev, b->n);
    b->t[0] = t;
    b->v[0] = v;
    b->ev[0] = ev;
    b->n++;
    l->pend_used++;
    return 0;
}

static void pend_clear(struct ledger *l, struct urec *r)
{
    uint32_t i = r->pend;
    while (i) {
        struct pblk *b = pb(l, i);
        uint32_t n = b->next;
        l->pend_used -= b->n;
        pb_release(l, i);
        i = n;
    }
    r->pend = 0;
}

/* ---------------------------------------------------------------- days */

static struct day_row *day_row(struct ledger *l, int64_t expo)
{
    int64_t day = time_floor(expo, US_PER_DAY) / US_PER_DAY;
    size_t lo = 0, hi = l->n_days;
    while (lo < hi) {
        size_t mid = (lo + hi) / 2;
        if (l->days[mid].day < day)
            lo = mid + 1;
        else
            hi = mid;
    }
    if (lo < l->n_days && l->days[lo].day == day)
        return &l->days[lo];
    if (l->n_days == l->days_cap) {
        size_t cap = l->days_cap ? l->days_cap * 2 : 32;
        struct day_row *nd = realloc(l->days, cap * sizeof *nd);
        if (!nd)
            return NULL;
        l->days = nd;
        l->days_cap = cap;
    }
    memmove(&l->days[lo + 1], &l->days[lo], (l->n_days - lo) * sizeof *l->days);
    memset(&l->days[lo], 0, sizeof *l->days);
    l->days[lo].day = day;
    l->n_days++;
    return &l->days[lo];
}

/* ---------------------------------------------------------------- segments */

static uint16_t seg_find(struct ledger *l, const char *name, bool create)
{
    for (size_t i = 0; i < l->n_segs; i++)
        if (!strcmp(l->segs[i].name, name))
            return (uint16_t)(i + 1);
    if (!create)
        return 0;
    if (l->n_segs >= SEG_MAX && strcmp(name, SEG_OTHER))
        return seg_find(l, SEG_OTHER, true); /* the one segment allowed past the limit */
    if (l->n_segs == l->segs_cap) {
        size_t cap = l->segs_cap ? l->segs_cap * 2 : 16;
        struct seg_row *ns = realloc(l->segs, cap * sizeof *ns);
        if (!ns)
            return 0;
        l->segs = ns;
        l->segs_cap = cap;
    }
    struct seg_row *r = &l->segs[l->n_segs];
    memset(r, 0, sizeof *r);
    if (!(r->name = strdup(name)))
        return 0;
    return (uint16_t)++l->n_segs;
}

static int attr_cmp(const struct attr *x, const struct attr *y)
{
    size_t n = x->key.n < y->key.n ? x->key.n : y->key.n;
    int c = memcmp(x->key.p, y->key.p, n);
    return c ? c : (x->key.n > y->key.n) - (x->key.n < y->key.n);
}

/* Puts the segment name of an assignment's attrs into q (seg_n 0: no attrs;
 * seg_other: SEG_OTHER). Keys are distinct (the decoder refuses repeated
 * keys), so the order is total; at most EVENT_MAX_ATTRS: insertion sort. */
static void seg_name(const struct event *ev, struct qev *q)
{
    q->seg_n = 0;
    q->seg_other = false;
    if (!ev->n_attrs)
        return;
    struct attr a[EVENT_MAX_ATTRS];
    int na = 0;
    for (int i = 0; i < ev->n_attrs; i++) {
        int j = na++;
        for (; j > 0 && attr_cmp(&a[j - 1], &ev->attrs[i]) > 0; j--)
            a[j] = a[j - 1];
        a[j] = ev->attrs[i];
    }
    char *name = q->seg;
    size_t n = 0;
    for (int i = 0; i < na; i++) {
        size_t need = a[i].key.n + a[i].value.n + 2;
        if (n + need >= SEG_NAME_MAX) {
            q->seg_other = true;
            return;
        }
        if (i)
            name[n++] = '\x1f';
        memcpy(name + n, a[i].key.p, a[i].key.n);
        n += a[i].key.n;
        name[n++] = '=';
        memcpy(name + n, a[i].value.p, a[i].value.n);
        n += a[i].value.n;
    }
    name[n] = '\0';
    if (memchr(name, '\0', n))
        q->seg_other = true;
    else
        q->seg_n = (uint16_t)n;
}

/* The segment of a queued assignment (0 when it has no attrs). */
static uint16_t seg_of(struct ledger *l, const struct qev *q)
{
    if (q->seg_other)
        return seg_find(l, SEG_OTHER, true);
    return q->seg_n ? seg_find(l, q->seg, true) : 0;
}

/* ---------------------------------------------------------------- tallies */

static struct moments *mom(const struct ledger *l, int m, int arm)
{
    return &l->mom[m * CONFIG_MAX_ARMS + arm];
}

static bool in_tally(const struct urec *r)
{
    return r->arm != ARM_NONE && !(r->flags & F_MULTI);
}

/* sign +1 adds the unit to its arm's tallies, −1 removes it. */
static void tally_unit(struct ledger *l, const struct urec *r, int sign)
{
    const struct layout *lay = l->lay;
    double v[MOM_MAXV];
    for (int m = 0; m < lay->cfg->n_metrics; m++) {
        layout_vector(lay, m, r->v, v);
        if (sign > 0)
            moments_add(mom(l, m, r->arm), lay->nv[m], v);
        else
            moments_remove(mom(l, m, r->arm), lay->nv[m], v);
    }
    l->units[r->arm] += (uint64_t)(int64_t)sign;
    if (r->seg)
        l->segs[r->seg - 1].units[r->arm] += (uint64_t)(int64_t)sign;
    struct day_row *d = day_row(l, r->expo);
    if (d)
        d->units[r->arm] += (uint64_t)(int64_t)sign;
}

/* Adds one outcome to a unit's values given its exposure; updates the tallies
 * of the metrics it changes when the unit is counted. */
static void apply_outcome(struct ledger *l, struct urec *r, int64_t t, int ev, double val, bool tally)
{
    const struct layout *lay = l->lay;
    const struct config *cfg = lay->cfg;
    for (int k = 0; k < lay->n_targets[ev]; k++) {
        int m = lay->targets[ev][k].metric, part = lay->targets[ev][k].part;
        const struct metric_cfg *mc = &cfg->metrics[m];
        int slot;
        if (t >= r->expo && (!mc->has_window || t - r->expo < mc->window_us))
            slot = part; /* window: value (or numerator/denominator) */
        else if (cfg->has_covariate && t < r->expo && r->expo - t <= cfg->pre_us)
            slot = part + (mc->type == MT_RATIO ? 2 : 1); /* pre-period */
        else
            continue;
        double *s = &r->v[lay->off[m] + slot];
        double nv = mc->type == MT_BINARY ? (*s > 0 || val > 0 ? 1.0 : 0.0) : *s + val;
        if (nv == *s && mc->type == MT_BINARY)
            continue;
        double before[MOM_MAXV], after[MOM_MAXV];
        if (tally)
            layout_vector(lay, m, r->v, before);
        *s = nv;
        if (tally) {
            layout_vector(lay, m, r->v, after);
            moments_remove(mom(l, m, r->arm), lay->nv[m], before);
            moments_add(mom(l, m, r->arm), lay->nv[m], after);
        }
    }
}

/* Recomputes a unit's values from its pending list (exposure set, not counted). */
static void recompute(struct ledger *l, struct urec *r)
{
    memset(r->v, 0, (size_t)l->lay->n_values * sizeof(double));
    for (uint32_t i = r->pend; i;) {
        const struct pblk *b = pb(l, i);
        if ((i = b->next))
            __builtin_prefetch(pb(l, i));
        for (int j = b->n - 1; j >= 0; j--) /* newest first */
            if (b->ev[j] != PB_DUP)
                apply_outcome(l, r, b->t[j], b->ev[j], b->v[j], false);
    }
}

/* ---------------------------------------------------------------- ids */

/* Ids are scoped by unit (their hash is keyed by the unit's), so a duplicate
 * is always an id of the same unit, and every event reads its unit's record
 * anyway. So the ids of a unit with a record are kept in a ring, in arrival
 * order, each entry linked to the unit's previous one, the newest named by
 * the record's idlink; beside it, a 32-bit filter of two bits per id
 * (id_bits) over the unit's ids in the ring (bits of ids since expired stay
 * until the chain is next walked, or has left the ring). An id whose bits
 * are not all in the filter is new: it is appended to the ring (a
 * sequential write) with no other memory read, which is nearly every id.
 * Otherwise the unit's chain is walked (chain_seen), and the filter made
 * exact again. A global table probed at random, one cache and TLB miss per
 * event, cost about a quarter of replay (bench/README.md).
 *
 * Positions count up from 1 for the ledger's life (the ring holds
 * [ir_tail, ir_next)); links keep their low 32 bits, and a link resolves
 * only to a position inside the ring (ring_age), older than the entry that
 * names it, so a chain ends where the ring does. The tail passes entries
 * once expired. When the ring is full of ids still within the horizon it
 * doubles; when only a few stragglers hold its tail (an id far ahead of the
 * others in time), they move to the table below instead, so that one odd id
 * cannot make the ring grow without bound.
 *
 * The table (16-byte slots, linear probing) holds the ids that have no ring
 * chain to be found by: those of events with no record, those a sweep takes
 * out of the ring with the record that named them, the ring's stragglers,
 * and ids loaded from a snapshot or merged from another ledger (both save
 * ids as (hash, time) only). It is probed only while it may hold one within
 * the horizon (ids_max_t). It also holds every id of a unit with more than
 * CHAIN_MAX ids within the horizon (table_mode), which probes it always;
 * those ids do not count in ids_max_t until the unit's record goes. The
 * table and the chains never both hold an id within the horizon: an id is
 * added to one only when neither knew it. */

#define IR_MIN 1024 /* the ring's first capacity (entries) */
#define IR_MAX (UINT64_C(1) << 31) /* its largest: a link's 32 bits must reach across it */

/* The time before which an id is forgotten: ids older than the horizon,
 * counted back from the latest event time, no longer make duplicates. */
static int64_t ids_cutoff(const struct ledger *l)
{
    return l->max_time == INT64_MIN ? INT64_MIN : l->max_time - l->lay->dedup_horizon_us;
}

/* Drops the ids older than the horizon in place (the capacity stays), with
 * no allocation and one sequential pass: starting after an empty slot (no
 * probe run crosses it), each slot in turn is cleared when expired, or its
 * id moved back to the first free slot from its home; every slot between
 * the home and the id has been visited by then, so linear probing stays
 * valid (the in-place variant of re-inserting every id). */
static void ids_expire(struct ledger *l)
{
    int64_t cutoff = ids_cutoff(l);
    size_t cap = l->ids_cap, mask = cap - 1, n = 0, start = 0;
    while (start < cap && l->ids[start].h)
        start++;
    if (start == cap)
        return; /* never: the table is at most half full */
    for (size_t k = 1; k < cap; k++) {
        size_t i = (start + k) & mask;
        struct idslot *o = &l->ids[i];
        if (!o->h)
            continue;
        if (o->t < cutoff) {
            o->h = 0;
            continue;
        }
        n++;
        size_t s = o->h & mask;
        while (s != i && l->ids[s].h)
            s = (s + 1) & mask;
        if (s != i) {
            l->ids[s] = *o;
            o->h = 0;
        }
    }
    l->ids_n = n;
}

static int ids_rebuild(struct ledger *l, size_t cap)
{
    if (cap == l->ids_cap && l->ids) {
        ids_expire(l);
        return 0;
    }
    /* the ids still remembered, set aside while the table grows */
    int64_t cutoff = ids_cutoff(l);
    struct idslot *keep = malloc((l->ids_n ? l->ids_n : 1) * sizeof *keep);
    if (!keep)
        return -1;
    size_t n = 0;
    for (size_t i = 0; i < l->ids_cap; i++)
        if (l->ids[i].h && l->ids[i].t >= cutoff)
            keep[n++] = l->ids[i];
    void *t = l->ids;
    if (table_grow(&t, l->ids_cap * sizeof *l->ids, &l->ids_region, cap * sizeof *l->ids)) {
        free(keep);
        return -1;
    }
    l->ids = t;
    l->ids_cap = cap;
    l->ids_n = n;
    for (size_t i = 0; i < n; i++) {
        size_t s = keep[i].h & (cap - 1);
        while (l->ids[s].h)
            s = (s + 1) & (cap - 1);
        l->ids[s] = keep[i];
    }
    free(keep);
    return 0;
}

/* True when the id was seen within the horizon (see ids_cutoff); otherwise
 * remembers it, with time t. An expired id met on the probe is treated as
 * absent, and its slot is reused for the id remembered: so the table fills
 * more slowly and the in-place expiry passes (ids_expire) come less often.
 * `owned`: the id is of a unit whose own ids are all in the table (see
 * "ids"), which probes it anyway; any other raises ids_max_t. */
static int id_seen(struct ledger *l, uint64_t h, int64_t t, bool owned)
{
    if (!h)
        h = 1;
    if ((l->ids_n + 1) * 2 > l->ids_cap) {
        size_t cap = l->ids_cap ? l->ids_cap : 4096;
        if (ids_rebuild(l, cap))  /* drop expired ids first */
            return -1;
        if ((l->ids_n + 1) * 4 > cap && ids_rebuild(l, cap * 2))
            return -1;
    }
    int64_t cutoff = ids_cutoff(l);
    size_t mask = l->ids_cap - 1, s = h & mask;
    struct idslot *reuse = NULL;
    for (; l->ids[s].h; s = (s + 1) & mask) {
        struct idslot *o = &l->ids[s];
        if (o->t < cutoff) {
            if (o->h == h) { /* seen, but longer ago than the horizon */
                o->t = t;
                if (!owned && t > l->ids_max_t)
                    l->ids_max_t = t;
                return 0;
            }
            if (!reuse)
                reuse = o;
        } else if (o->h == h) {
            return 1;
        }
    }
    if (!reuse) {
        reuse = &l->ids[s];
        l->ids_n++;
    }
    reuse->h = h;
    reuse->t = t;
    if (!owned && t > l->ids_max_t)
        l->ids_max_t = t;
    return 0;
}

/* True when the table may hold an id within the horizon of a unit that
 * does not keep all its ids there. */
static bool table_live(const struct ledger *l)
{
    return l->ids_cap && l->ids_max_t >= ids_cutoff(l);
}

/* True when the table holds h within the horizon (it changes nothing);
 * probed only when it may (table_live), or when `own` (the unit keeps its
 * ids there). */
static bool table_seen(const struct ledger *l, uint64_t h, bool own)
{
    if (!l->ids_cap || (!own && !table_live(l)))
        return false;
    int64_t cutoff = ids_cutoff(l);
    size_t mask = l->ids_cap - 1;
    for (size_t s = h & mask; l->ids[s].h; s = (s + 1) & mask)
        if (l->ids[s].h == h && l->ids[s].t >= cutoff)
            return true;
    return false;
}

/* The two filter bits of an id hash (bits the table's probing does not use
 * first). */
static uint32_t id_bits(uint64_t h)
{
    return (UINT32_C(1) << ((h >> 40) & 31)) | (UINT32_C(1) << ((h >> 51) & 31));
}

static struct idlink *idl(const struct ledger *l, const struct urec *r)
{
    return (struct idlink *)((char *)r + l->lay->rec_size);
}

/* How many positions back from ir_next the link p names (1: the newest
 * entry); 0 when it names no entry in the ring. */
static uint64_t ring_age(const struct ledger *l, uint32_t p)
{
    uint64_t age = (uint32_t)((uint32_t)l->ir_next - p);
    return p && age && age <= l->ir_next - l->ir_tail ? age : 0;
}

static struct ident *ring_at(const struct ledger *l, uint64_t pos)
{
    return &l->ir[pos & (l->ir_cap - 1)];
}

/* Calls fn on each id of r's chain within the horizon, newest first, until
 * it returns true; returns what it last returned. */
static bool chain_each(struct ledger *l, struct urec *r, bool (*fn)(struct ledger *, struct ident *, void *),
                       void *ctx)
{
    int64_t cutoff = ids_cutoff(l);
    uint64_t last = 0;
    for (uint32_t p = idl(l, r)->head;;) {
        uint64_t age = ring_age(l, p);
        if (age <= last) /* outside the ring, or not older: the chain ends */
            return false;
        last = age;
        struct ident *e = ring_at(l, l->ir_next - age);
        if (e->t >= cutoff && fn(l, e, ctx))
            return true;
        p = e->prev;
    }
}

/* A unit with more than CHAIN_MAX ids within the horizon would walk its
 * whole chain for nearly every id (its filter full), one memory read an
 * entry: its ids go to the table instead, for good (table_mode). */
#define CHAIN_MAX 32

/* An idlink of head 0 and an all-ones filter (never otherwise: a chain is
 * cleared when it has left the ring, see chain_add): the unit's ids are in
 * the table. */
static bool table_mode(const struct ledger *l, const struct urec *r)
{
    const struct idlink *k = idl(l, r);
    return !k->head && k->filt == UINT32_MAX;
}

struct walk {
    uint64_t h;    /* the id sought */
    uint32_t filt; /* the filter, rebuilt */
    uint32_t n;    /* ids passed */
};

static bool match_or_filter(struct ledger *l, struct ident *e, void *ctx)
{
    (void)l;
    struct walk *w = ctx;
    if (e->h == w->h)
        return true;
    w->filt |= id_bits(e->h);
    w->n++;
    return false;
}

static int chain_to_table(struct ledger *l, struct urec *r, bool owned);

/* The ring_age of r's newest id when r's filter says h may be in its
 * chain; 0 when h is not (or the chain has left the ring). */
static uint64_t chain_may_hold(const struct ledger *l, const struct urec *r, uint64_t h)
{
    const struct idlink *k = idl(l, r);
    uint32_t b = id_bits(h);
    return (k->filt & b) == b ? ring_age(l, k->head) : 0;
}

/* True when r's chain holds h within the horizon; reads the chain only when
 * the filter says it may, and then makes the filter exact (or moves a long
 * chain to the table). */
static bool chain_seen(struct ledger *l, struct urec *r, uint64_t h)
{
    if (!chain_may_hold(l, r, h))
        return false;
    struct idlink *k = idl(l, r);
    struct walk w = {h, 0, 0};
    if (chain_each(l, r, match_or_filter, &w))
        return true;
    k->filt = w.filt;
    if (w.n > CHAIN_MAX) {
        if (chain_to_table(l, r, true) < 0)
            l->failed = true; /* out of memory: reported by the next ledger_apply or ledger_save */
        k->filt = UINT32_MAX; /* head is 0: table_mode */
    }
    return false;
}

struct to_table_ctx {
    bool owned;
    int rc;
};

static bool to_table(struct ledger *l, struct ident *e, void *ctx)
{
    struct to_table_ctx *c = ctx;
    if (id_seen(l, e->h, e->t, c->owned) < 0)
        c->rc = -1;
    e->h = 0; /* now a gap, which the tail passes: the id is in one place only */
    e->t = INT64_MIN;
    return false;
}

/* Moves the ids of r's chain within the horizon to the table (`owned`: r
 * stays and keeps its ids there); -1 when out of memory. */
static int chain_to_table(struct ledger *l, struct urec *r, bool owned)
{
    struct to_table_ctx c = {owned, 0};
    chain_each(l, r, to_table, &c);
    idl(l, r)->head = 0;
    return c.rc;
}

/* Before record r goes (a sweep): its ids go to the table, where a unit
 * with no record finds them. */
static int ids_orphaned(struct ledger *l, struct urec *r)
{
    if (table_mode(l, r)) { /* its ids are in the table already, but owned */
        if (l->max_time > l->ids_max_t) /* no id is later than max_time */
            l->ids_max_t = l->max_time;
        return 0;
    }
    return chain_to_table(l, r, false);
}

/* Doubles the ring, keeping each entry at its position. */
static int ring_grow(struct ledger *l)
{
    size_t ocap = l->ir_cap, cap = ocap ? ocap * 2 : IR_MIN, bytes = cap * sizeof *l->ir;
    struct ident *old = l->ir, *nw;
    bool in_place = l->ir_region.p != NULL;
    if (bytes < TABLE_REGION_MIN) {
        nw = big_alloc(bytes, true);
    } else {
        if (big_region_grow(&l->ir_region, bytes, in_place))
            return -1;
        nw = (struct ident *)l->ir_region.p;
    }
    if (!nw)
        return -1;
    const struct ident *src = in_place ? nw : old;
    for (uint64_t p = l->ir_tail; p < l->ir_next; p++)
        if (!in_place || (p & (ocap - 1)) != (p & (cap - 1)))
            nw[p & (cap - 1)] = src[p & (ocap - 1)];
    if (!in_place && old)
        big_free(old, ocap * sizeof *old);
    l->ir = nw;
    l->ir_cap = cap;
    return 0;
}

/* Moves the ring's tail past at most `most` expired entries. */
static void ring_pass(struct ledger *l, int64_t cutoff, uint64_t most)
{
    for (; most && l->ir_tail < l->ir_next && ring_at(l, l->ir_tail)->t < cutoff; most--)
        l->ir_tail++;
}

/* Makes room for one entry at ir_next; -1 when out of memory. */
static int ring_room(struct ledger *l)
{
    int64_t cutoff = ids_cutoff(l);
    ring_pass(l, cutoff, UINT64_MAX);
    if (l->ir_next - l->ir_tail < l->ir_cap)
        return 0;
    /* full of ids within the horizon: grow, unless only a few of the oldest
     * are (stragglers), which then move to the table */
    uint64_t span = l->ir_cap / 8, live = 0;
    for (uint64_t p = l->ir_tail; p < l->ir_tail + span; p++)
        live += ring_at(l, p)->h && ring_at(l, p)->t >= cutoff;
    if (!l->ir_cap || (live * 2 > span && l->ir_cap < IR_MAX))
        return ring_grow(l);
    for (uint64_t p = l->ir_tail; p < l->ir_tail + span; p++) {
        const struct ident *e = ring_at(l, p);
        if (e->h && e->t >= cutoff && id_seen(l, e->h, e->t, false) < 0)
            return -1; /* (then behind the tail: out of the ring) */
    }
    l->ir_tail += span;
    return 0;
}

/* Appends id h (time t) to r's chain; -1 when out of memory. */
static int chain_add(struct ledger *l, struct urec *r, uint64_t h, int64_t t)
{
    if (l->ir_next - l->ir_tail >= l->ir_cap && ring_room(l))
        return -1;
    if (!(uint32_t)l->ir_next) { /* a link of 0 means none: leave a gap */
        *ring_at(l, l->ir_next++) = (struct ident){0, INT64_MIN, 0, 0};
        if (l->ir_next - l->ir_tail >= l->ir_cap && ring_room(l))
            return -1;
    }
    struct idlink *k = idl(l, r);
    /* the lines the next appends write, and the tail reads, ahead of them:
     * a store that misses the cache holds up every later load that has to
     * wait for the stores before it */
    __builtin_prefetch(ring_at(l, l->ir_next + 8), 1);
    __builtin_prefetch(ring_at(l, l->ir_tail + 8));
    if (!ring_age(l, k->head)) { /* every id of the chain has left the ring */
        k->head = 0;             /* (a stale link could name another unit's entry) */
        k->filt = 0;
    }
    *ring_at(l, l->ir_next) = (struct ident){h, t, k->head, 0};
    k->head = (uint32_t)l->ir_next++;
    k->filt |= id_bits(h);
    /* the tail passes up to two expired entries an append, so the ring
     * stays about as long as the horizon's ids */
    ring_pass(l, ids_cutoff(l), 2);
    return 0;
}

/* Calls fn(ctx, h, t) on every id within the horizon (table first, then
 * the ring in arrival order); stops at the first nonzero return, and
 * returns it. */
static int each_id(const struct ledger *l, int (*fn)(void *ctx, uint64_t h, int64_t t), void *ctx)
{
    int64_t cutoff = ids_cutoff(l);
    int rc = 0;
    for (size_t i = 0; i < l->ids_cap && !rc; i++)
        if (l->ids[i].h && l->ids[i].t >= cutoff)
            rc = fn(ctx, l->ids[i].h, l->ids[i].t);
    for (uint64_t p = l->ir_tail; p < l->ir_next && !rc; p++) {
        const struct ident *e = ring_at(l, p);
        if (e->h && e->t >= cutoff)
            rc = fn(ctx, e->h, e->t);
    }
    return rc;
}

/* True when a queued event's id was seen within the horizon (it changes no
 * id: see id_keep). */
static bool id_known(struct ledger *l, const struct qev *q, struct urec *r)
{
    bool own = r && table_mode(l, r);
    return table_seen(l, q->idh, own) || (r && !own && chain_seen(l, r, q->idh));
}

/* Remembers a queued event's id, once the event is applied: in its unit's
 * chain, or in the table when the unit has no record or keeps its ids
 * there; -1 when out of memory. */
static int id_keep(struct ledger *l, const struct qev *q, struct urec *r)
{
    if (r && !table_mode(l, r))
        return chain_add(l, r, q->idh, q->t);
    return id_seen(l, q->idh, q->t, r != NULL);
}

/* ---------------------------------------------------------------- multi-arm */

static struct multi *multi_get(struct ledger *l, uint64_t key)
{
    if ((l->multi_n + 1) * 2 > l->multi_cap) {
        size_t cap = l->multi_cap ? l->multi_cap * 2 : 64;
        struct multi *nm = calloc(cap, sizeof *nm);
        if (!nm)
            return NULL;
        for (size_t i = 0; i < l->multi_cap; i++)
            if (l->multi[i].mask) {
                size_t s = l->multi[i].key & (cap - 1);
                while (nm[s].mask)
                    s = (s + 1) & (cap - 1);
                nm[s] = l->multi[i];
            }
        free(l->multi);
        l->multi = nm;
        l->multi_cap = cap;
    }
    size_t mask = l->multi_cap - 1, s = key & mask;
    for (; l->multi[s].mask; s = (s + 1) & mask)
        if (l->multi[s].key == key)
            return &l->multi[s];
    l->multi[s].key = key;
    l->multi_n++;
    return &l->multi[s];
}

/* ---------------------------------------------------------------- sweep */

static int64_t watermark(const struct ledger *l)
{
    if (l->finished)
        return INT64_MAX;
    if (l->max_time == INT64_MIN)
        return INT64_MIN;
    return l->max_time - l->lay->lateness_us;
}

/* An outcome is an orphan when it is after window.start but the unit had no
 * exposure yet at its time (never exposed, or earlier than exposure − pre).
 * Each outcome is judged once, when it is settled, against the unit's final
 * exposure, so the count does not depend on how units are split or swept. */
static bool is_orphan(const struct ledger *l, int64_t t, int64_t expo)
{
    if (t < l->cfg->window_start)
        return false;
    if (expo == NO_TIME)
        return true;
    return t < expo && expo - t > (l->cfg->has_covariate ? l->cfg->pre_us : 0);
}

/* Drops pending entries of an unexposed unit older than `cutoff`; skips the
 * walk of its list when its pending floor says none is (see pend_floor). */
static void prune_unexposed(struct ledger *l, struct urec *r, int64_t cutoff)
{
    if (!l->finished && pend_floor(l, r) >= cutoff)
        return;
    int64_t floor = INT64_MAX;
    uint32_t *link = &r->pend;
    while (*link) {
        uint32_t i = *link;
        struct pblk *b = pb(l, i);
        int kept = 0;
        for (int j = 0; j < b->n; j++) {
            if (b->t[j] < cutoff || l->finished) {
                if (b->ev[j] != PB_DUP && b->t[j] >= l->cfg->window_start)
                    l->cnt.orphan_outcomes++;
                l->pend_used--;
                continue;
            }
            if (b->t[j] < floor)
                floor = b->t[j];
            b->t[kept] = b->t[j]; /* the kept entries stay in order */
            b->v[kept] = b->v[j];
            b->ev[kept++] = b->ev[j];
        }
        if ((b->n = (uint8_t)kept)) {
            link = &b->next;
        } else {
            *link = b->next;
            pb_release(l, i);
        }
    }
    set_pend_floor(l, r, floor);
}

#define SETTLE_BATCH 16

/* Settles the exposure of n units: counts what their pending entries say
 * (duplicates by arm, orphans), releases the entries and marks the units
 * final. The lists are walked side by side, so that their memory reads (one
 * per entry, anywhere in the arena) overlap instead of queueing. */
static void settle(struct ledger *l, struct urec **rs, int n)
{
    uint32_t k[SETTLE_BATCH];
    for (int j = 0; j < n; j++)
        if ((k[j] = rs[j]->pend))
            __builtin_prefetch(pb(l, k[j]));
    for (int active = n; active;) {
        active = 0;
        for (int j = 0; j < n; j++) {
            if (!k[j])
                continue;
            const struct pblk *b = pb(l, k[j]);
            const struct urec *r = rs[j];
            for (int x = 0; x < b->n; x++)
                if (b->ev[x] == PB_DUP)
                    l->cnt.dup_by_arm[r->arm] += !(r->flags & F_MULTI);
                else
                    l->cnt.orphan_outcomes += is_orphan(l, b->t[x], r->expo);
            if ((k[j] = b->next)) {
                __builtin_prefetch(pb(l, k[j]));
                active++;
            }
        }
    }
    for (int j = 0; j < n; j++) {
        pend_clear(l, rs[j]); /* the entries are in the cache now */
        rs[j]->flags |= F_FINAL;
    }
}

/* Settles what the watermark has passed and removes records no longer needed. */
static void sweep(struct ledger *l)
{
    int64_t wm = watermark(l);
    int64_t cutoff = wm == INT64_MAX ? INT64_MAX : wm - (l->cfg->has_covariate ? l->cfg->pre_us : 0);
    uint32_t kept = 0;
    bool moved = false;
    struct urec *batch[SETTLE_BATCH];
    int nb = 0;
    for (uint32_t i = 0; i < l->n_recs; i++) {
        struct urec *r = rec_at(l, i);
        bool due = false;
        if (r->arm != ARM_NONE) {
            due = !(r->flags & F_FINAL) && r->expo < wm;
        } else {
            prune_unexposed(l, r, cutoff);
            if (!r->pend)
                r->flags |= F_DEAD;
        }
        if (r->flags & F_DEAD) {
            if (ids_orphaned(l, r) < 0)
                l->failed = true; /* (reported by the next ledger_apply or ledger_save) */
            moved = true;
            continue;
        }
        if (kept != i)
            memcpy(rec_at(l, kept), r, l->slot);
        /* records only move down, to slots already passed: the copy stays put */
        if (due && (batch[nb++] = rec_at(l, kept), nb == SETTLE_BATCH)) {
            settle(l, batch, nb);
            nb = 0;
        }
        kept++;
    }
    if (nb)
        settle(l, batch, nb);
    l->n_recs = kept;
    if (moved) {
        memset(l->index, 0, l->index_cap * sizeof *l->index);
        for (uint32_t i = 0; i < l->n_recs; i++)
            index_put(l->index, l->index_cap, rec_at(l, i)->key, i);
        forget_guesses(l); /* queued events' records may have moved */
    }
    l->last_sweep = wm;
    l->pend_after_sweep = l->pend_used;
}

static void maybe_sweep(struct ledger *l)
{
    int64_t wm = watermark(l);
    if (wm == INT64_MIN)
        return;
    if (l->last_sweep == INT64_MIN) {
        l->last_sweep = wm;
        return;
    }
    int64_t step = l->lay->lateness_us > US_PER_HOUR ? l->lay->lateness_us : US_PER_HOUR;
    if (wm - l->last_sweep >= US_PER_DAY ||
        (wm - l->last_sweep >= step && l->pend_used > 2 * l->pend_after_sweep + 65536))
        sweep(l);
}

/* ---------------------------------------------------------------- apply */

/* The record of a queued event's unit: the one found at its record step when
 * the key matches (records move only in a sweep's compaction, which forgets
 * every such guess), else looked up, and kept with the event for its later
 * steps; created when `create`. */
static struct urec *unit_of(struct ledger *l, struct qev *q, bool create)
{
    if (q->rec && q->rec->key == q->key)
        return q->rec;
    struct urec *r = unit_find(l, q->key, create);
    if (r)
        q->rec = r;
    return r;
}

static int apply_assign(struct ledger *l, struct qev *q)
{
    const struct config *cfg = l->cfg;
    if (q->arm < 0) {
        l->cnt.other_experiment++;
        return REJ_NONE;
    }
    int arm = q->arm;
    l->cnt.assignments++;
    if (q->t < cfg->window_start || q->t >= cfg->window_end) {
        l->cnt.outside_window++;
        return REJ_NONE;
    }
    bool late = q->t < watermark(l);
    if (late)
        l->cnt.late_assignments++;
    if (q->hash_check) {
        l->cnt.hash_checked++;
        if (q->hash_check == HASH_MISMATCH)
            l->cnt.hash_mismatch++;
    }
    struct urec *r = unit_of(l, q, true);
    if (!r)
        return -1;
    if (r->arm == ARM_NONE) {
        r->arm = (uint8_t)arm;
        r->expo = q->t;
        r->seg = seg_of(l, q);
        r->flags &= (uint8_t)~F_DEAD;
        l->cnt.units_seen[arm]++;
        recompute(l, r);
        tally_unit(l, r, +1);
        return REJ_NONE;
    }
    if (arm != r->arm || (r->flags & F_MULTI)) {
        struct multi *mm = multi_get(l, q->key);
        if (!mm)
            return -1;
        if (!(r->flags & F_MULTI)) {
            tally_unit(l, r, -1);
            r->flags |= F_MULTI;
            l->cnt.multi_arm_units++;
            mm->mask = UINT64_C(1) << r->arm;
            l->cnt.multi_by_arm[r->arm]++;
        }
        if (!(mm->mask & (UINT64_C(1) << arm))) {
            mm->mask |= UINT64_C(1) << arm;
            l->cnt.multi_by_arm[arm]++;
            l->cnt.units_seen[arm]++;
        }
    }
    if (q->t < r->expo && !(r->flags & F_FINAL)) {
        bool counted = in_tally(r);
        if (counted)
            tally_unit(l, r, -1);
        r->expo = q->t;
        r->seg = seg_of(l, q);
        recompute(l, r);
        if (counted)
            tally_unit(l, r, +1);
    }
    return REJ_NONE;
}

static int apply_outcome_event(struct ledger *l, struct qev *q)
{
    int e = q->target;
    if (e < 0) {
        l->cnt.ignored_outcomes++;
        return REJ_NONE;
    }
    l->cnt.outcomes++;
    struct urec *r = unit_of(l, q, false);
    if (!r || r->arm == ARM_NONE) {
        int64_t wm = watermark(l);
        int64_t keep_from = wm == INT64_MIN ? INT64_MIN : wm - (l->cfg->has_covariate ? l->cfg->pre_us : 0);
        if (q->t < keep_from) {
            if (q->t >= l->cfg->window_start)
                l->cnt.orphan_outcomes++;
            return REJ_NONE;
        }
        if (!r) {
            if (!(r = unit_of(l, q, true)))
                return -1;
            set_pend_floor(l, r, INT64_MAX); /* no entry yet */
        }
    }
    if (r->flags & F_FINAL) {
        l->cnt.orphan_outcomes += is_orphan(l, q->t, r->expo);
    } else {
        if (pend_push(l, r, q->t, q->value, (uint8_t)e))
            return -1;
    }
    if (r->arm != ARM_NONE)
        apply_outcome(l, r, q->t, e, q->value, in_tally(r));
    return REJ_NONE;
}

/* Applies one queued event: the join as it stood before the lookahead. */
static int apply_queued(struct ledger *l, struct qev *q)
{
    if (q->has_id) {
        struct urec *r = unit_of(l, q, false);
        if (id_known(l, q, r)) {
            l->cnt.duplicates++;
            if (r && (r->flags & F_FINAL)) {
                if (in_tally(r))
                    l->cnt.dup_by_arm[r->arm]++;
            } else if (r) {
                /* the unit's arm may still change: count it when settled */
                if (pend_push(l, r, q->t, 0, PB_DUP))
                    return -1;
            }
            return REJ_NONE;
        }
    }
    if (q->t > l->max_time) {
        l->max_time = q->t;
        maybe_sweep(l);
    }
    int rc = q->kind == EV_ASSIGN ? apply_assign(l, q) : apply_outcome_event(l, q);
    if (rc >= 0 && q->has_id && id_keep(l, q, unit_of(l, q, false)) < 0)
        return -1;
    return rc;
}

/* Applies the oldest queued event. */
static int apply_oldest(struct ledger *l)
{
    struct qev *q = &l->ring[l->q_head];
    l->q_head = (l->q_head + 1) & (LOOKAHEAD - 1);
    l->q_n--;
    if (l->failed || apply_queued(l, q) < 0) {
        l->failed = true;
        return -1;
    }
    return 0;
}

/* Applies every queued event (see "Lookahead" above). Reads of the state go
 * through here; the ledger is never a const object (ledger_new allocates
 * it), so a const accessor may settle its queue. */
static void sync(const struct ledger *cl)
{
    struct ledger *l = (struct ledger *)cl;
    while (l->q_n)
        apply_oldest(l);
}

/* The steps of the lookahead (see the top of this file): an event's index
 * slot (and id slot) is prefetched when it is queued; LOOKAHEAD_RECORD events
 * later, its record; LOOKAHEAD_PENDING events later, the head block of the
 * unit's pending list, which its record names; for an assignment, one event
 * later each, the list's next PENDING_AHEAD blocks. */
static inline __attribute__((always_inline)) void prefetch_index(const struct ledger *l, uint64_t key)
{
    if (l->index_cap)
        __builtin_prefetch(&l->index[key & (l->index_cap - 1)]);
}

/* The record the index names for key, probably the unit's (the key is not
 * compared, which would read the record); NULL when none. */
static const struct urec *index_guess(const struct ledger *l, uint64_t key)
{
    if (l->index_cap) {
        size_t mask = l->index_cap - 1, s = key & mask;
        for (uint64_t e; (e = l->index[s]); s = (s + 1) & mask)
            if (IX_SAME(e, key))
                return rec_at(l, IX_REC(e) - 1);
    }
    return NULL;
}

static void prefetch_record(const struct ledger *l, struct qev *q)
{
    const char *r = (const char *)(q->rec = (struct urec *)index_guess(l, q->key));
    if (r) {
        for (size_t o = 0; o < l->slot; o += 64)
            __builtin_prefetch(r + o, 1);
        if (l->stride > 64) /* not on line boundaries: its end may be on one line more */
            __builtin_prefetch(r + l->slot - 1, 1);
    }
}

/* always_inline: GCC takes a function whose only effect is a prefetch for a
 * pure one, and drops its calls (it did so here: the head blocks went
 * unprefetched until the function was inlined). */
static inline __attribute__((always_inline)) void prefetch_pending(const struct ledger *l, const struct qev *q)
{
    if (q->rec && q->rec->pend)
        __builtin_prefetch(pb(l, q->rec->pend), 1);
}

/* The newest id of the unit's chain, when its filter says the event's id
 * may be there (see chain_seen). */
static inline __attribute__((always_inline)) void prefetch_chain(const struct ledger *l, const struct qev *q)
{
    uint64_t age;
    if (q->has_id && q->rec && (age = chain_may_hold(l, q->rec, q->idh)))
        __builtin_prefetch(ring_at(l, l->ir_next - age));
}

/* An assignment may expose its unit, which reads the whole pending list
 * (recompute), a chain of blocks each named by the one before: block k after
 * the head is prefetched k events after the head, when the blocks before it,
 * prefetched one event apart, have arrived (lists of more than two blocks
 * are common at exposure: 37% of the bench log's exposures). */
static inline __attribute__((always_inline)) void prefetch_pending_next(const struct ledger *l, const struct qev *q, uint32_t k)
{
    if (q->kind == EV_ASSIGN && q->rec && q->rec->key == q->key && q->rec->pend) {
        uint32_t b = q->rec->pend;
        for (uint32_t j = 0; j < k && b; j++)
            b = pb(l, b)->next;
        if (b)
            __builtin_prefetch(pb(l, b));
    }
}

int ledger_apply(struct ledger *l, const struct event *ev)
{
    if (l->failed)
        return -1;
    l->cnt.lines++;
    uint64_t key = siphash24(&l->lay->unit_key, ev->unit.p, ev->unit.n);
    if (l->lay->n_shards > 1 && key % l->lay->n_shards != l->lay->shard) {
        l->cnt.accepted++;
        l->cnt.other_shard++;
        return REJ_NONE;
    }
    const struct config *cfg = l->cfg;
    int arm = -1;
    if (ev->kind == EV_ASSIGN && str_eq(ev->exp, cfg->experiment) &&
        (arm = config_arm_index(cfg, ev->arm.p, ev->arm.n)) < 0) {
        l->cnt.rejected[REJ_UNKNOWN_ARM]++;
        return REJ_UNKNOWN_ARM;
    }
    l->cnt.accepted++;
    /* everything that needs the event's strings happens now */
    struct qev *q = &l->ring[(l->q_head + l->q_n) & (LOOKAHEAD - 1)];
    q->key = key;
    q->rec = NULL;
    q->t = ev->time_us;
    q->kind = (uint8_t)ev->kind;
    q->has_id = ev->id.p != NULL;
    if (q->has_id) {
        /* ids are scoped by unit: a unit's events all live in one partition
         * or shard, so de-duplication is exact however the units are split */
        struct hash_key k = {key, key ^ HASH_KEY_DEFAULT.k1};
        q->idh = siphash24(&k, ev->id.p, ev->id.n);
        if (!q->idh)
            q->idh = 1; /* 0 marks an empty slot or a gap */
        if (table_live(l))
            __builtin_prefetch(&l->ids[q->idh & (l->ids_cap - 1)]);
    }
    if (ev->kind == EV_ASSIGN) {
        q->arm = (int16_t)arm;
        q->hash_check = 0;
        if (arm >= 0) {
            seg_name(ev, q);
            if (cfg->hash.enabled)
                q->hash_check = rebucket_arm(cfg, l->md, ev->unit.p, ev->unit.n) != arm ? HASH_MISMATCH : HASH_MATCH;
        }
    } else {
        q->value = ev->value;
        q->target = -1;
        for (int i = 0; i < l->lay->n_events; i++)
            if (ev->metric.n == l->event_len[i] && !memcmp(ev->metric.p, l->lay->event_names[i], ev->metric.n)) {
                q->target = i;
                break;
            }
    }
    prefetch_index(l, key);
    l->q_n++;
    if (l->q_n > LOOKAHEAD_RECORD)
        prefetch_record(l, &l->ring[(l->q_head + l->q_n - 1 - LOOKAHEAD_RECORD) & (LOOKAHEAD - 1)]);
    if (l->q_n > LOOKAHEAD_PENDING) {
        struct qev *p = &l->ring[(l->q_head + l->q_n - 1 - LOOKAHEAD_PENDING) & (LOOKAHEAD - 1)];
        prefetch_pending(l, p);
        prefetch_chain(l, p);
    }
    for (uint32_t k = 1; k <= PENDING_AHEAD; k++)
        if (l->q_n > LOOKAHEAD_PENDING + k)
            prefetch_pending_next(l, &l->ring[(l->q_head + l->q_n - 1 - (LOOKAHEAD_PENDING + k)) & (LOOKAHEAD - 1)], k);
    if (l->q_n == LOOKAHEAD && apply_oldest(l) < 0)
        return -1;
    return REJ_NONE;
}

void ledger_reject(struct ledger *l, enum reject r)
{
    l->cnt.lines++;
    l->cnt.rejected[r]++;
}

void ledger_finish(struct ledger *l)
{
    sync(l);
    l->finished = true;
    sweep(l);
}

/* ---------------------------------------------------------------- lifecycle */

struct ledger *ledger_new(const struct layout *lay)
{
    struct ledger *l = calloc(1, sizeof *l);
    if (!l)
        return NULL;
    l->lay = lay;
    l->cfg = lay->cfg;
    l->slot = lay->rec_size + sizeof(struct idlink);
    l->stride = l->slot <= 64 ? 64 : l->slot;
    l->max_time = INT64_MIN;
    l->last_sweep = INT64_MIN;
    l->ir_tail = l->ir_next = 1;
    l->recs.huge_from = l->pbs.huge_from = HUGE_FROM;
    l->ids_max_t = INT64_MIN;
    size_t nm = lay->cfg->n_metrics ? (size_t)lay->cfg->n_metrics : 1;
    l->mom = calloc(nm * CONFIG_MAX_ARMS, sizeof *l->mom);
    l->ring = malloc(LOOKAHEAD * sizeof *l->ring);
    /* without it (out of memory) each re-check makes its own context */
    l->md = lay->cfg->hash.enabled ? rebucket_ctx_new() : NULL;
    if (!l->mom || !l->ring) {
        rebucket_ctx_free(l->md);
        free(l->mom);
        free(l->ring);
        free(l);
        return NULL;
    }
    for (int i = 0; i < lay->n_events; i++)
        l->event_len[i] = (uint32_t)strlen(lay->event_names[i]);
    return l;
}

void ledger_free(struct ledger *l)
{
    if (!l)
        return;
    rebucket_ctx_free(l->md);
    big_region_free(&l->recs);
    table_free(l->index, l->index_cap * sizeof *l->index, &l->index_region);
    big_region_free(&l->pbs);
    table_free(l->ir, l->ir_cap * sizeof *l->ir, &l->ir_region);
    table_free(l->ids, l->ids_cap * sizeof *l->ids, &l->ids_region);
    free(l->multi);
    free(l->days);
    for (size_t i = 0; i < l->n_segs; i++)
        free(l->segs[i].name);
    free(l->segs);
    free(l->mom);
    free(l->ring);
    free(l);
}

/* ---------------------------------------------------------------- access */

const struct counters *ledger_counters(const struct ledger *l)
{
    sync(l);
    return &l->cnt;
}

const struct moments *ledger_moments(const struct ledger *l, int metric, int arm)
{
    sync(l);
    return mom(l, metric, arm);
}

uint64_t ledger_units(const struct ledger *l, int arm)
{
    sync(l);
    return l->units[arm];
}

int64_t ledger_max_time(const struct ledger *l)
{
    sync(l);
    return l->max_time;
}

size_t ledger_days(const struct ledger *l, const struct day_row **rows)
{
    sync(l);
    *rows = l->days;
    return l->n_days;
}

size_t ledger_segments(const struct ledger *l, const struct seg_row **rows)
{
    sync(l);
    *rows = l->segs;
    return l->n_segs;
}

size_t ledger_n_records(const struct ledger *l)
{
    sync(l);
    return l->n_recs;
}

size_t ledger_memory(const struct ledger *l)
{
    struct ledger_mem m;
    ledger_memory_parts(l, &m);
    return m.records + m.index + m.pending + m.ids + m.other;
}

void ledger_memory_parts(const struct ledger *l, struct ledger_mem *m)
{
    sync(l);
    m->records = (size_t)l->rec_cap * l->stride;
    m->index = l->index_cap * sizeof *l->index;
    m->pending = pb_bytes(l);
    m->ids = l->ids_cap * sizeof *l->ids + l->ir_cap * sizeof *l->ir;
    m->other = l->multi_cap * sizeof *l->multi + l->days_cap * sizeof *l->days + LOOKAHEAD * sizeof *l->ring;
    m->n_records = l->n_recs;
}

void ledger_trim_reserves(struct ledger *l)
{
    big_region_trim(&l->recs);
    big_region_trim(&l->pbs);
}

void ledger_each_unit(const struct ledger *l,
                      void (*fn)(void *ctx, uint64_t key, int arm, const double *values), void *ctx)
{
    sync(l);
    for (uint32_t i = 0; i < l->n_recs; i++) {
        const struct urec *r = rec_at(l, i);
        if (in_tally(r))
            fn(ctx, r->key, r->arm, r->v);
    }
}

/* ---------------------------------------------------------------- snapshots */

#define SNAP_TAG UINT32_C(0x4c444731) /* "LDG1" */

struct wr {
    ledger_write_fn w;
    void *ctx;
    int rc;
};

static void put(struct wr *o, const void *p, size_t n)
{
    if (!o->rc && n)
        o->rc = o->w(o->ctx, p, n);
}

static void put_u64(struct wr *o, uint64_t v)
{
    put(o, &v, sizeof v);
}

static int count_id(void *ctx, uint64_t h, int64_t t)
{
    (void)h, (void)t;
    ++*(uint64_t *)ctx;
    return 0;
}

static int put_id(void *ctx, uint64_t h, int64_t t)
{
    struct idslot s = {h, t};
    put(ctx, &s, sizeof s);
    return ((struct wr *)ctx)->rc;
}

/* Writes a unit record; the values of a unit not yet exposed are zero (the
 * slot that holds its pending floor is written as zero, see pend_floor). */
static void put_rec(struct wr *o, const struct ledger *l, const struct urec *r)
{
    if (r->arm != ARM_NONE || !l->lay->n_values) {
        put(o, r, l->lay->rec_size);
        return;
    }
    put(o, r, sizeof *r);
    double zero = 0;
    for (int j = 0; j < l->lay->n_values; j++)
        put(o, &zero, sizeof zero);
}

int ledger_save(const struct ledger *l, ledger_write_fn w, void *ctx)
{
    sync(l);
    if (l->failed)
        return -1; /* an event was lost for want of memory: no state to save */
    struct wr o = {w, ctx, 0};
    const struct config *cfg = l->cfg;
    uint32_t hdr[4] = {SNAP_TAG, (uint32_t)l->lay->rec_size, (uint32_t)cfg->n_metrics, (uint32_t)cfg->n_arms};
    put(&o, hdr, sizeof hdr);
    put(&o, &l->cnt, sizeof l->cnt);
    int64_t times[2] = {l->max_time, l->last_sweep};
    put(&o, times, sizeof times);
    put_u64(&o, l->finished);
    put(&o, l->units, sizeof l->units);
    for (int m = 0; m < cfg->n_metrics; m++)
        put(&o, mom(l, m, 0), (size_t)cfg->n_arms * sizeof(struct moments));
    put_u64(&o, l->n_days);
    put(&o, l->days, l->n_days * sizeof *l->days);
    put_u64(&o, l->n_segs);
    for (size_t i = 0; i < l->n_segs; i++) {
        put_u64(&o, strlen(l->segs[i].name));
        put(&o, l->segs[i].name, strlen(l->segs[i].name));
        put(&o, l->segs[i].units, sizeof l->segs[i].units);
    }
    put_u64(&o, l->n_recs);
    for (uint32_t i = 0; i < l->n_recs; i++)
        put_rec(&o, l, rec_at(l, i));
    /* pending entries, unit by unit, in list order */
    put_u64(&o, l->pend_used);
    for (uint32_t i = 0; i < l->n_recs; i++) {
        const struct urec *r = rec_at(l, i);
        for (uint32_t k = r->pend; k; k = pb(l, k)->next) {
            const struct pblk *b = pb(l, k);
            for (int j = b->n - 1; j >= 0; j--) {
                struct { uint32_t rec, ev; int64_t t; double v; } pe = {
                    i, b->ev[j] == PB_DUP ? DUP_MARK : b->ev[j], b->t[j], b->v[j]};
                put(&o, &pe, sizeof pe);
            }
        }
    }
    /* ids within the horizon, as (hash, time) */
    uint64_t n_ids = 0;
    each_id(l, count_id, &n_ids);
    put_u64(&o, n_ids);
    each_id(l, put_id, &o);
    put_u64(&o, l->multi_n);
    for (size_t i = 0; i < l->multi_cap; i++)
        if (l->multi[i].mask)
            put(&o, &l->multi[i], sizeof l->multi[i]);
    put_u64(&o, SNAP_TAG);
    return o.rc;
}

struct rd {
    const unsigned char *p;
    size_t left;
    int bad;
};

static void take(struct rd *r, void *dst, size_t n)
{
    if (r->bad || n > r->left) {
        r->bad = 1;
        if (dst)
            memset(dst, 0, n);
        return;
    }
    if (dst)
        memcpy(dst, r->p, n);
    r->p += n;
    r->left -= n;
}

static uint64_t take_u64(struct rd *r)
{
    uint64_t v = 0;
    take(r, &v, sizeof v);
    return v;
}

static struct ledger *load_fail(struct ledger *l, struct err *e, const char *why)
{
    ledger_free(l);
    err_set(e, AB_EINPUT, "state is malformed: %s", why);
    return NULL;
}

/* A time a saved ledger may hold: an event time (years 1900..9999, see
 * timefmt.h). Anything else would make later time arithmetic overflow. */
static bool is_event_time(int64_t t)
{
    return t >= TIME_MIN_US && t <= TIME_MAX_US;
}

struct ledger *ledger_load(const struct layout *lay, const void *buf, size_t len, struct err *e)
{
    const struct config *cfg = lay->cfg;
    struct rd r = {buf, len, 0};
    uint32_t hdr[4];
    take(&r, hdr, sizeof hdr);
    if (r.bad || hdr[0] != SNAP_TAG)
        return load_fail(NULL, e, "not a ledger section");
    if (hdr[1] != lay->rec_size || hdr[2] != (uint32_t)cfg->n_metrics || hdr[3] != (uint32_t)cfg->n_arms)
        return load_fail(NULL, e, "its layout differs from the config's");
    struct ledger *l = ledger_new(lay);
    if (!l)
        return load_fail(NULL, e, "out of memory");
    take(&r, &l->cnt, sizeof l->cnt);
    int64_t times[2];
    take(&r, times, sizeof times);
    l->max_time = times[0];
    l->last_sweep = times[1];
    l->finished = take_u64(&r) != 0;
    /* max_time: none yet or an event time; last_sweep: none yet, a watermark
     * (event time − some lateness ≤ 1e17 µs) or, once finished, INT64_MAX */
    if (!(l->max_time == INT64_MIN || is_event_time(l->max_time)) ||
        !(l->last_sweep == INT64_MIN || l->last_sweep == INT64_MAX ||
          (l->last_sweep >= TIME_MIN_US - INT64_C(100000000000000000) && l->last_sweep <= TIME_MAX_US)) ||
        (l->finished && l->last_sweep != INT64_MAX))
        return load_fail(l, e, "times out of range");
    take(&r, l->units, sizeof l->units);
    for (int m = 0; m < cfg->n_metrics; m++)
        take(&r, mom(l, m, 0), (size_t)cfg->n_arms * sizeof(struct moments));
    uint64_t nd = take_u64(&r);
    if (r.bad || nd > r.left / sizeof *l->days)
        return load_fail(l, e, "bad day count");
    if (nd) {
        if (!(l->days = malloc(nd * sizeof *l->days)))
            return load_fail(l, e, "out of memory");
        take(&r, l->days, nd * sizeof *l->days);
        l->n_days = l->days_cap = nd;
        for (size_t i = 0; i < nd; i++)
            if ((i && l->days[i].day <= l->days[i - 1].day) ||
                l->days[i].day > TIME_MAX_US / US_PER_DAY || l->days[i].day < TIME_MIN_US / US_PER_DAY - 1)
                return load_fail(l, e, "days out of order or range");
    }
    uint64_t ns = take_u64(&r);
    if (r.bad || ns > SEG_MAX + 1)
        return load_fail(l, e, "bad segment count");
    for (uint64_t i = 0; i < ns; i++) {
        uint64_t len = take_u64(&r);
        char name[600];
        if (r.bad || len >= sizeof name)
            return load_fail(l, e, "bad segment name");
        take(&r, name, len);
        name[len] = '\0';
        if (r.bad || strlen(name) != len || seg_find(l, name, false) || seg_find(l, name, true) != i + 1)
            return load_fail(l, e, "bad segment");
        take(&r, l->segs[i].units, sizeof l->segs[i].units);
    }
    uint64_t nr = take_u64(&r);
    if (r.bad || nr > r.left / lay->rec_size || nr >= UINT32_MAX / 2)
        return load_fail(l, e, "bad unit count");
    for (uint64_t i = 0; i < nr; i++) {
        uint64_t key;
        memcpy(&key, r.p, sizeof key);
        struct urec *u = unit_find(l, key, true);
        if (!u || l->n_recs != i + 1)
            return load_fail(l, e, u ? "a unit appears twice" : "out of memory");
        take(&r, u, lay->rec_size);
        u->pend = 0;
        if ((u->arm != ARM_NONE && u->arm >= cfg->n_arms) || (u->flags & F_DEAD) || u->seg > l->n_segs)
            return load_fail(l, e, "a unit has an impossible arm or flag");
        /* an arm and an exposure time are set together, by an assignment */
        if ((u->arm == ARM_NONE) != (u->expo == NO_TIME) || !(u->expo == NO_TIME || is_event_time(u->expo)))
            return load_fail(l, e, "a unit has an impossible exposure time");
    }
    uint64_t np = take_u64(&r);
    if (r.bad || np > r.left / 24)
        return load_fail(l, e, "bad pending count");
    uint32_t last = UINT32_MAX, tail = 0; /* the unit appended to last, and its last block */
    for (uint64_t i = 0; i < np; i++) {
        struct { uint32_t rec, ev; int64_t t; double v; } pe;
        take(&r, &pe, sizeof pe);
        if (r.bad || pe.rec >= l->n_recs || (pe.ev >= (uint32_t)lay->n_events && pe.ev != DUP_MARK) ||
            !is_event_time(pe.t))
            return load_fail(l, e, "a pending outcome points nowhere");
        struct urec *u = rec_at(l, pe.rec);
        if (pe.rec != last) { /* saved unit by unit; any order still loads */
            last = pe.rec;
            for (tail = u->pend; tail && pb(l, tail)->next;)
                tail = pb(l, tail)->next;
        }
        /* append, keeping the saved order */
        if (pend_append(l, u, &tail, pe.t, pe.v, pe.ev == DUP_MARK ? PB_DUP : (uint8_t)pe.ev))
            return load_fail(l, e, "out of memory");
    }
    uint64_t ni = take_u64(&r);
    if (r.bad || ni > r.left / sizeof(struct idslot))
        return load_fail(l, e, "bad id count");
    size_t cap = 4096;
    while (cap < ni * 2 + 2)
        cap *= 2;
    if (!(l->ids = big_alloc(cap * sizeof *l->ids, true)))
        return load_fail(l, e, "out of memory");
    l->ids_cap = cap;
    for (uint64_t i = 0; i < ni; i++) {
        struct idslot s;
        take(&r, &s, sizeof s);
        if (r.bad || !s.h || !is_event_time(s.t))
            return load_fail(l, e, "bad id entry");
        size_t q = s.h & (cap - 1);
        while (l->ids[q].h)
            q = (q + 1) & (cap - 1);
        l->ids[q] = s;
        l->ids_n++;
        if (s.t > l->ids_max_t)
            l->ids_max_t = s.t;
    }
    uint64_t nm = take_u64(&r);
    if (r.bad || nm > r.left / sizeof(struct multi))
        return load_fail(l, e, "bad multi-arm count");
    for (uint64_t i = 0; i < nm; i++) {
        struct multi mm;
        take(&r, &mm, sizeof mm);
        struct multi *slot = r.bad || !mm.mask ? NULL : multi_get(l, mm.key);
        if (!slot)
            return load_fail(l, e, "bad multi-arm entry");
        slot->mask = mm.mask;
    }
    if (take_u64(&r) != SNAP_TAG || r.bad || r.left)
        return load_fail(l, e, "bad end of the ledger section");
    l->pend_after_sweep = l->pend_used;
    return l;
}

void counters_add(struct counters *a, const struct counters *b)
{
    /* every field is a uint64_t: add them as an array */
    uint64_t *pa = (uint64_t *)a;
    const uint64_t *pb = (const uint64_t *)b;
    for (size_t i = 0; i < sizeof *a / sizeof(uint64_t); i++)
        pa[i] += pb[i];
}

static int absorb_id(void *ctx, uint64_t h, int64_t t)
{
    return id_seen(ctx, h, t, false) < 0;
}

int ledger_absorb(struct ledger *dst, const struct ledger *src, struct err *e)
{
    sync(dst);
    sync(src);
    const struct config *cfg = dst->cfg;
    if (dst->lay->rec_size != src->lay->rec_size)
        return err_set(e, AB_EINPUT, "states have different layouts");
    for (uint32_t i = 0; i < src->n_recs; i++) {
        const struct urec *s = rec_at(src, i);
        if (unit_find(dst, s->key, false))
            return err_set(e, AB_EINPUT, "a unit appears in two of the states being merged "
                                         "(overlapping shards or partitions)");
        uint32_t before = dst->n_recs;
        struct urec *d = unit_find(dst, s->key, true);
        if (!d || dst->n_recs != before + 1)
            return err_set(e, AB_EINPUT, "out of memory");
        memcpy(d, s, dst->lay->rec_size);
        d->pend = 0;
        if (s->seg && !(d->seg = seg_find(dst, src->segs[s->seg - 1].name, true)))
            return err_set(e, AB_EINPUT, "out of memory");
        uint32_t last = 0; /* the block copied last (pb_alloc may move the blocks) */
        for (uint32_t k = s->pend; k; k = pb(src, k)->next) {
            uint32_t n = pb_alloc(dst);
            if (!n)
                return err_set(e, AB_EINPUT, "out of memory");
            *pb(dst, n) = *pb(src, k); /* block by block: the same order */
            pb(dst, n)->next = 0;
            dst->pend_used += pb(src, k)->n;
            if (last)
                pb(dst, last)->next = n;
            else
                d->pend = n;
            last = n;
        }
    }
    counters_add(&dst->cnt, &src->cnt);
    for (int a = 0; a < cfg->n_arms; a++)
        dst->units[a] += src->units[a];
    for (int m = 0; m < cfg->n_metrics; m++)
        for (int a = 0; a < cfg->n_arms; a++)
            moments_merge(mom(dst, m, a), dst->lay->nv[m], mom(src, m, a));
    for (size_t i = 0; i < src->n_days; i++) {
        struct day_row *d = day_row(dst, src->days[i].day * US_PER_DAY);
        if (!d)
            return err_set(e, AB_EINPUT, "out of memory");
        for (int a = 0; a < cfg->n_arms; a++)
            d->units[a] += src->days[i].units[a];
    }
    for (size_t i = 0; i < src->n_segs; i++) {
        uint16_t k = seg_find(dst, src->segs[i].name, true);
        if (!k)
            return err_set(e, AB_EINPUT, "out of memory");
        for (int a = 0; a < cfg->n_arms; a++)
            dst->segs[k - 1].units[a] += src->segs[i].units[a];
    }
    if (each_id(src, absorb_id, dst))
        return err_set(e, AB_EINPUT, "out of memory");
    for (size_t i = 0; i < src->multi_cap; i++)
        if (src->multi[i].mask) {
            struct multi *m = multi_get(dst, src->multi[i].key);
            if (!m)
                return err_set(e, AB_EINPUT, "out of memory");
            m->mask |= src->multi[i].mask;
        }
    if (src->max_time > dst->max_time)
        dst->max_time = src->max_time;
    if (src->last_sweep > dst->last_sweep)
        dst->last_sweep = src->last_sweep;
    dst->finished = dst->finished || src->finished;
    dst->pend_after_sweep = dst->pend_used;
    return AB_OK;
}
