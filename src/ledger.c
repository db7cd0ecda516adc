/*
 * ledger.c — the per-unit join and per-arm tallies (see ledger.h).
 *
 * Storage (bytes for a two-metric experiment of mean/binary metrics):
 *   unit record   24-byte header (key, exposure, pending head, arm, flags,
 *                 segment) + 8 bytes per metric variable: 24 + 2·2·8 = 56;
 *                 records live in fixed-size chunks, so growth never copies;
 *   index         open addressing (linear probing) of uint32 record numbers,
 *                 load ≤ 0.7: 6–11 bytes per unit;
 *   pending       24-byte entries for outcomes a unit may still need, freed
 *                 when the watermark passes (see ledger.h).
 * Nothing is allocated per event in steady state: chunks, the index, the
 * pending arena and the id table grow geometrically and are reused.
 */
#include "ledger.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "timefmt.h"

#define F_MULTI 0x01 /* assigned to more than one arm: out of the tallies */
#define F_FINAL 0x02 /* exposure can no longer move: pending list released */
#define F_DEAD 0x04  /* to be removed at the next compaction */

#define CHUNK_SHIFT 16
#define CHUNK_RECS (1u << CHUNK_SHIFT)

struct urec {
    uint64_t key;  /* SipHash of the unit id */
    int64_t expo;  /* exposure time (µs), NO_TIME before the first assignment */
    uint32_t pend; /* head of the pending list, 0 when empty */
    uint8_t arm;   /* arm index, ARM_NONE before the first assignment */
    uint8_t flags; /* F_* */
    uint16_t seg;  /* reserved for segment ids */
    double v[];    /* per metric values, at layout offsets */
};

struct pent {
    int64_t t;     /* outcome time */
    double v;      /* outcome value */
    uint32_t next; /* next entry of the unit, 0 ends */
    uint32_t ev;   /* outcome name index (layout) */
};

struct idslot {
    uint64_t h; /* id hash, 0 = empty */
    int64_t t;  /* event time */
};

struct ledger {
    const struct layout *lay;
    const struct config *cfg;
    /* unit records */
    char **chunks;
    size_t n_chunks;
    uint32_t n_recs;
    uint32_t *index; /* record number + 1; 0 = empty */
    size_t index_cap;
    /* pending outcomes */
    struct pent *pend;
    uint32_t pend_cap, pend_free, pend_used, pend_after_sweep;
    /* event ids */
    struct idslot *ids;
    size_t ids_cap, ids_n;
    /* multi-arm units: key → mask of arms named */
    struct multi {
        uint64_t key, mask;
    } *multi;
    size_t multi_cap, multi_n;
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
};

/* ---------------------------------------------------------------- layout */

static int event_index(const struct layout *lay, const char *name)
{
    for (int i = 0; i < lay->n_events; i++)
        if (!strcmp(lay->event_names[i], name))
            return i;
    return -1;
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
    return (struct urec *)(l->chunks[i >> CHUNK_SHIFT] + (size_t)(i & (CHUNK_RECS - 1)) * l->lay->rec_size);
}

static int index_grow(struct ledger *l)
{
    size_t cap = l->index_cap ? l->index_cap * 2 : 1024;
    uint32_t *ix = calloc(cap, sizeof *ix);
    if (!ix)
        return -1;
    for (uint32_t i = 0; i < l->n_recs; i++) {
        size_t s = rec_at(l, i)->key & (cap - 1);
        while (ix[s])
            s = (s + 1) & (cap - 1);
        ix[s] = i + 1;
    }
    free(l->index);
    l->index = ix;
    l->index_cap = cap;
    return 0;
}

/* Finds the record of key; creates it when `create`. NULL if absent (or no memory). */
static struct urec *unit_find(struct ledger *l, uint64_t key, bool create)
{
    if (l->index_cap) {
        size_t mask = l->index_cap - 1, s = key & mask;
        for (; l->index[s]; s = (s + 1) & mask) {
            struct urec *r = rec_at(l, l->index[s] - 1);
            if (r->key == key)
                return r;
        }
    }
    if (!create)
        return NULL;
    if ((l->n_recs + 1) * 10 > l->index_cap * 7 && index_grow(l))
        return NULL;
    uint32_t i = l->n_recs;
    if ((i >> CHUNK_SHIFT) >= l->n_chunks) {
        char **nc = realloc(l->chunks, (l->n_chunks + 1) * sizeof *nc);
        if (!nc)
            return NULL;
        l->chunks = nc;
        if (!(nc[l->n_chunks] = malloc(CHUNK_RECS * l->lay->rec_size)))
            return NULL;
        l->n_chunks++;
    }
    struct urec *r = rec_at(l, i);
    memset(r, 0, l->lay->rec_size);
    r->key = key;
    r->expo = NO_TIME;
    r->arm = ARM_NONE;
    l->n_recs++;
    size_t mask = l->index_cap - 1, s = key & mask;
    while (l->index[s])
        s = (s + 1) & mask;
    l->index[s] = i + 1;
    return r;
}

/* ---------------------------------------------------------------- pending */

static uint32_t pend_alloc(struct ledger *l)
{
    if (!l->pend_free) {
        uint32_t cap = l->pend_cap ? l->pend_cap * 2 : 4096;
        struct pent *np = realloc(l->pend, (size_t)cap * sizeof *np);
        if (!np)
            return 0;
        l->pend = np;
        uint32_t first = l->pend_cap ? l->pend_cap : 1; /* entry 0 is the null link */
        for (uint32_t i = first; i < cap; i++)
            np[i].next = i + 1 < cap ? i + 1 : 0;
        l->pend_free = first;
        l->pend_cap = cap;
    }
    uint32_t i = l->pend_free;
    l->pend_free = l->pend[i].next;
    l->pend_used++;
    return i;
}

static void pend_release(struct ledger *l, uint32_t i)
{
    l->pend[i].next = l->pend_free;
    l->pend_free = i;
    l->pend_used--;
}

static void pend_clear(struct ledger *l, struct urec *r)
{
    uint32_t i = r->pend;
    while (i) {
        uint32_t n = l->pend[i].next;
        pend_release(l, i);
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
    for (uint32_t i = r->pend; i; i = l->pend[i].next)
        apply_outcome(l, r, l->pend[i].t, (int)l->pend[i].ev, l->pend[i].v, false);
}

/* ---------------------------------------------------------------- ids */

static int ids_rebuild(struct ledger *l, size_t cap)
{
    struct idslot *ni = calloc(cap, sizeof *ni);
    if (!ni)
        return -1;
    int64_t cutoff = l->max_time == INT64_MIN ? INT64_MIN : l->max_time - l->lay->dedup_horizon_us;
    size_t n = 0;
    for (size_t i = 0; i < l->ids_cap; i++) {
        struct idslot *o = &l->ids[i];
        if (!o->h || o->t < cutoff)
            continue;
        size_t s = o->h & (cap - 1);
        while (ni[s].h)
            s = (s + 1) & (cap - 1);
        ni[s] = *o;
        n++;
    }
    free(l->ids);
    l->ids = ni;
    l->ids_cap = cap;
    l->ids_n = n;
    return 0;
}

/* True when the id was seen (and remembered); otherwise remembers it. */
static int id_seen(struct ledger *l, uint64_t h, int64_t t)
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
    size_t mask = l->ids_cap - 1, s = h & mask;
    for (; l->ids[s].h; s = (s + 1) & mask)
        if (l->ids[s].h == h)
            return 1;
    l->ids[s].h = h;
    l->ids[s].t = t;
    l->ids_n++;
    return 0;
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

/* Drops pending entries of an unexposed unit older than `cutoff`. */
static void prune_unexposed(struct ledger *l, struct urec *r, int64_t cutoff)
{
    uint32_t *link = &r->pend;
    while (*link) {
        uint32_t i = *link;
        if (l->pend[i].t < cutoff) {
            if (l->pend[i].t >= l->cfg->window_start)
                l->cnt.orphan_outcomes++;
            *link = l->pend[i].next;
            pend_release(l, i);
        } else {
            link = &l->pend[i].next;
        }
    }
}

/* Settles what the watermark has passed and removes records no longer needed. */
static void sweep(struct ledger *l)
{
    int64_t wm = watermark(l);
    int64_t cutoff = wm == INT64_MAX ? INT64_MAX : wm - (l->cfg->has_covariate ? l->cfg->pre_us : 0);
    uint32_t kept = 0;
    bool moved = false;
    for (uint32_t i = 0; i < l->n_recs; i++) {
        struct urec *r = rec_at(l, i);
        if (r->arm != ARM_NONE) {
            if (!(r->flags & F_FINAL) && r->expo < wm) {
                pend_clear(l, r);
                r->flags |= F_FINAL;
            }
        } else {
            prune_unexposed(l, r, cutoff);
            if (!r->pend)
                r->flags |= F_DEAD;
        }
        if (r->flags & F_DEAD) {
            moved = true;
            continue;
        }
        if (kept != i)
            memcpy(rec_at(l, kept), r, l->lay->rec_size);
        kept++;
    }
    l->n_recs = kept;
    if (moved) {
        memset(l->index, 0, l->index_cap * sizeof *l->index);
        size_t mask = l->index_cap - 1;
        for (uint32_t i = 0; i < l->n_recs; i++) {
            size_t s = rec_at(l, i)->key & mask;
            while (l->index[s])
                s = (s + 1) & mask;
            l->index[s] = i + 1;
        }
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

static int apply_assign(struct ledger *l, const struct event *ev, uint64_t key)
{
    const struct config *cfg = l->cfg;
    if (!str_eq(ev->exp, cfg->experiment)) {
        l->cnt.other_experiment++;
        return REJ_NONE;
    }
    int arm = config_arm_index(cfg, ev->arm.p, ev->arm.n);
    if (arm < 0)
        return REJ_UNKNOWN_ARM;
    l->cnt.assignments++;
    if (ev->time_us < cfg->window_start || ev->time_us >= cfg->window_end) {
        l->cnt.outside_window++;
        return REJ_NONE;
    }
    bool late = ev->time_us < watermark(l);
    if (late)
        l->cnt.late_assignments++;
    struct urec *r = unit_find(l, key, true);
    if (!r)
        return -1;
    if (r->arm == ARM_NONE) {
        r->arm = (uint8_t)arm;
        r->expo = ev->time_us;
        r->flags &= (uint8_t)~F_DEAD;
        l->cnt.units_seen[arm]++;
        recompute(l, r);
        tally_unit(l, r, +1);
        return REJ_NONE;
    }
    if (arm != r->arm || (r->flags & F_MULTI)) {
        struct multi *mm = multi_get(l, key);
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
    if (ev->time_us < r->expo && !(r->flags & F_FINAL)) {
        bool counted = in_tally(r);
        if (counted)
            tally_unit(l, r, -1);
        r->expo = ev->time_us;
        recompute(l, r);
        if (counted)
            tally_unit(l, r, +1);
    }
    return REJ_NONE;
}

static int apply_outcome_event(struct ledger *l, const struct event *ev, uint64_t key)
{
    int e = -1;
    for (int i = 0; i < l->lay->n_events; i++)
        if (str_eq(ev->metric, l->lay->event_names[i])) {
            e = i;
            break;
        }
    if (e < 0) {
        l->cnt.ignored_outcomes++;
        return REJ_NONE;
    }
    l->cnt.outcomes++;
    struct urec *r = unit_find(l, key, false);
    if (!r || r->arm == ARM_NONE) {
        int64_t wm = watermark(l);
        int64_t keep_from = wm == INT64_MIN ? INT64_MIN : wm - (l->cfg->has_covariate ? l->cfg->pre_us : 0);
        if (ev->time_us < keep_from) {
            if (ev->time_us >= l->cfg->window_start)
                l->cnt.orphan_outcomes++;
            return REJ_NONE;
        }
        if (!r && !(r = unit_find(l, key, true)))
            return -1;
    }
    if (!(r->flags & F_FINAL)) {
        uint32_t i = pend_alloc(l);
        if (!i)
            return -1;
        l->pend[i] = (struct pent){ev->time_us, ev->value, r->pend, (uint32_t)e};
        r->pend = i;
    }
    if (r->arm != ARM_NONE)
        apply_outcome(l, r, ev->time_us, e, ev->value, in_tally(r));
    return REJ_NONE;
}

int ledger_apply(struct ledger *l, const struct event *ev)
{
    l->cnt.lines++;
    uint64_t key = siphash24(&l->lay->unit_key, ev->unit.p, ev->unit.n);
    if (l->lay->n_shards > 1 && key % l->lay->n_shards != l->lay->shard) {
        l->cnt.accepted++;
        l->cnt.other_shard++;
        return REJ_NONE;
    }
    if (ev->kind == EV_ASSIGN && str_eq(ev->exp, l->cfg->experiment) &&
        config_arm_index(l->cfg, ev->arm.p, ev->arm.n) < 0) {
        l->cnt.rejected[REJ_UNKNOWN_ARM]++;
        return REJ_UNKNOWN_ARM;
    }
    l->cnt.accepted++;
    if (ev->id.p) {
        uint64_t h = siphash24(&HASH_KEY_DEFAULT, ev->id.p, ev->id.n);
        int seen = id_seen(l, h, ev->time_us);
        if (seen < 0)
            return -1;
        if (seen) {
            l->cnt.duplicates++;
            struct urec *r = unit_find(l, key, false);
            if (r && in_tally(r))
                l->cnt.dup_by_arm[r->arm]++;
            return REJ_NONE;
        }
    }
    if (ev->time_us > l->max_time) {
        l->max_time = ev->time_us;
        maybe_sweep(l);
    }
    return ev->kind == EV_ASSIGN ? apply_assign(l, ev, key) : apply_outcome_event(l, ev, key);
}

void ledger_reject(struct ledger *l, enum reject r)
{
    l->cnt.lines++;
    l->cnt.rejected[r]++;
}

void ledger_finish(struct ledger *l)
{
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
    l->max_time = INT64_MIN;
    l->last_sweep = INT64_MIN;
    size_t nm = lay->cfg->n_metrics ? (size_t)lay->cfg->n_metrics : 1;
    l->mom = calloc(nm * CONFIG_MAX_ARMS, sizeof *l->mom);
    if (!l->mom) {
        free(l);
        return NULL;
    }
    return l;
}

void ledger_free(struct ledger *l)
{
    if (!l)
        return;
    for (size_t i = 0; i < l->n_chunks; i++)
        free(l->chunks[i]);
    free(l->chunks);
    free(l->index);
    free(l->pend);
    free(l->ids);
    free(l->multi);
    free(l->days);
    free(l->mom);
    free(l);
}

/* ---------------------------------------------------------------- access */

const struct counters *ledger_counters(const struct ledger *l)
{
    return &l->cnt;
}

const struct moments *ledger_moments(const struct ledger *l, int metric, int arm)
{
    return mom(l, metric, arm);
}

uint64_t ledger_units(const struct ledger *l, int arm)
{
    return l->units[arm];
}

int64_t ledger_max_time(const struct ledger *l)
{
    return l->max_time;
}

size_t ledger_days(const struct ledger *l, const struct day_row **rows)
{
    *rows = l->days;
    return l->n_days;
}

size_t ledger_n_records(const struct ledger *l)
{
    return l->n_recs;
}

size_t ledger_memory(const struct ledger *l)
{
    return l->n_chunks * CHUNK_RECS * l->lay->rec_size + l->index_cap * sizeof *l->index +
           (size_t)l->pend_cap * sizeof *l->pend + l->ids_cap * sizeof *l->ids +
           l->multi_cap * sizeof *l->multi + l->days_cap * sizeof *l->days;
}

void ledger_each_unit(const struct ledger *l,
                      void (*fn)(void *ctx, uint64_t key, int arm, const double *values), void *ctx)
{
    for (uint32_t i = 0; i < l->n_recs; i++) {
        const struct urec *r = rec_at(l, i);
        if (in_tally(r))
            fn(ctx, r->key, r->arm, r->v);
    }
}
