/*
 * engine.c — decode → ledger → records (see engine.h).
 */
#include "engine.h"

#include <errno.h>
#include <fcntl.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "readout.h"
#include "source.h"
#include "report.h"
#include "timefmt.h"

void engine_opts_default(struct engine_opts *o)
{
    memset(o, 0, sizeof *o);
    o->every_us = US_PER_DAY;
    o->lateness_us = US_PER_HOUR;
    o->horizon_us = US_PER_DAY;
    o->n_shards = 1;
}

int engine_read_unit_key(const char *path, struct hash_key *key, struct err *e)
{
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0)
        return err_set(e, AB_EINPUT, "unit key '%s': %s", path, strerror(errno));
    struct stat st;
    if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
        close(fd);
        return err_set(e, AB_EINPUT, "unit key '%s': not a regular file", path);
    }
    unsigned char b[UNIT_KEY_BYTES];
    size_t got = 0;
    while (got < sizeof b) {
        ssize_t k = read(fd, b + got, sizeof b - got);
        if (k < 0 && errno == EINTR)
            continue;
        if (k < 0) {
            int saved = errno;
            close(fd);
            explicit_bzero(b, sizeof b);
            return err_set(e, AB_EINPUT, "unit key '%s': %s", path, strerror(saved));
        }
        if (k == 0)
            break;
        got += (size_t)k;
    }
    close(fd);
    if (got < sizeof b) {
        explicit_bzero(b, sizeof b);
        return err_set(e, AB_EINPUT,
                       "unit key '%s': holds %zu bytes, at least %d are needed (e.g. head -c 32 "
                       "/dev/urandom > '%s')",
                       path, got, UNIT_KEY_BYTES, path);
    }
    key->k0 = key->k1 = 0;
    for (int i = 7; i >= 0; i--) {
        key->k0 = (key->k0 << 8) | b[i];
        key->k1 = (key->k1 << 8) | b[8 + i];
    }
    explicit_bzero(b, sizeof b);
    return AB_OK;
}

int engine_init(struct engine *en, const struct engine_opts *o, int n_parts, struct err *e)
{
    memset(en, 0, sizeof *en);
    en->out = stdout;
    en->every_us = o->every_us;
    en->final_only = o->final_only;
    en->tmax = INT64_MIN;
    en->p_seq = 1.0;
    en->tmax_emitted = INT64_MIN;
    int rc;
    if ((rc = config_load(o->config_path, &en->cfg, e)))
        return rc;
    if ((rc = layout_init(&en->lay, &en->cfg, o->lateness_us, o->horizon_us, e)))
        return rc;
    if (o->unit_key && (rc = engine_read_unit_key(o->unit_key, &en->lay.unit_key, e)))
        return rc;
    if (!(en->seq = malloc(sizeof *en->seq)))
        return err_set(e, AB_EINPUT, "out of memory");
    if ((rc = seqrun_init(en->seq, &en->cfg, e)))
        return rc;
    en->lay.shard = o->shard;
    en->lay.n_shards = o->n_shards ? o->n_shards : 1;
    if (!(en->dec = decoder_new()) ||
        !(en->parts = calloc((size_t)(n_parts ? n_parts : 1), sizeof *en->parts)))
        return err_set(e, AB_EINPUT, "out of memory");
    en->n_parts = n_parts;
    if (!(en->pmax = calloc((size_t)(n_parts ? n_parts : 1), sizeof *en->pmax)) ||
        !(en->idle = calloc((size_t)(n_parts ? n_parts : 1), sizeof *en->idle)))
        return err_set(e, AB_EINPUT, "out of memory");
    for (int i = 0; i < n_parts; i++)
        en->pmax[i] = INT64_MIN;
    for (int i = 0; i < n_parts; i++)
        if (!(en->parts[i] = ledger_new(&en->lay)))
            return err_set(e, AB_EINPUT, "out of memory");
    if (o->quarantine) {
        /* rejected lines may hold personal data: readable by the owner only */
        int fd = open(o->quarantine, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0600);
        if (fd < 0 || !(en->quar = fdopen(fd, "w"))) {
            if (fd >= 0)
                close(fd);
            return err_set(e, AB_EINPUT, "quarantine '%s': %s", o->quarantine, strerror(errno));
        }
    }
    return AB_OK;
}

void engine_release(struct engine *en)
{
    if (en->parts)
        for (int i = 0; i < en->n_parts; i++)
            ledger_free(en->parts[i]);
    free(en->parts);
    for (int i = 0; i < en->n_pend; i++) {
        tallies_release(&en->pend[i].acc);
        free(en->pend[i].got);
    }
    free(en->pend);
    free(en->pmax);
    free(en->idle);
    free(en->seq);
    decoder_free(en->dec);
    if (en->quar)
        fclose(en->quar);
    layout_release(&en->lay);
    config_release(&en->cfg);
    memset(en, 0, sizeof *en);
}

static int quarantine(struct engine *en, const char *src, uint64_t lineno, enum reject r,
                      const char *line, size_t len, struct err *e)
{
    if (!en->quar)
        return AB_OK;
    fprintf(en->quar, "%s\t%llu\t%s\t", src, (unsigned long long)lineno, reject_name(r));
    fwrite(line, 1, len, en->quar);
    if (fputc('\n', en->quar) == EOF)
        return err_set(e, AB_EINPUT, "quarantine: write failed: %s", strerror(errno));
    return AB_OK;
}

/* The record of tallies t (owned by the caller). */
static int record_of(struct engine *en, struct tallies *t, int64_t time, bool final, json_t **out,
                     int *verdict, struct err *e)
{
    struct readout rd;
    *out = NULL;
    if (readout_compute(&rd, &en->cfg, t, en->p_seq))
        return err_set(e, AB_EINPUT, "out of memory");
    en->p_seq = rd.p_seq;
    if (verdict)
        *verdict = rd.verdict;
    seqrun_update(en->seq, t, (const struct effect(*)[CONFIG_MAX_ARMS])rd.eff, time, final);
    int rc = AB_OK;
    if (!(*out = report_record(&en->lay, t, &rd, en->seq, time, final)))
        rc = err_set(e, AB_EINPUT, "out of memory");
    readout_release(&rd);
    return rc;
}

int engine_record(struct engine *en, int64_t time, bool final, json_t **out, int *verdict,
                  struct err *e)
{
    struct tallies t;
    *out = NULL;
    int rc = tallies_collect(&t, &en->lay, en->parts, en->n_parts, final, e);
    if (!rc)
        rc = record_of(en, &t, time, final, out, verdict, e);
    tallies_release(&t);
    return rc;
}

static int print_record(struct engine *en, json_t *rec, struct err *e)
{
    /* --final-only computes every record (the sequential state depends on
     * them) but prints only the final summary */
    if (en->final_only && !json_is_true(json_object_get(rec, "final"))) {
        json_decref(rec);
        return AB_OK;
    }
    char *text = json_dumps(rec, JSON_COMPACT | JSON_REAL_PRECISION(17));
    json_decref(rec);
    if (!text)
        return err_set(e, AB_EINPUT, "out of memory");
    size_t len = strlen(text);
    int rc = AB_OK;
    if (en->out && (fwrite(text, 1, len, en->out) != len || fputc('\n', en->out) == EOF))
        rc = err_set(e, AB_EINPUT, "output: write failed: %s", strerror(errno));
    if (!rc && en->on_record && en->on_record(en->on_record_ctx, text, len))
        rc = err_set(e, AB_EINPUT, "output: the record could not be published");
    free(text);
    return rc;
}

int engine_emit(struct engine *en, int64_t time, bool final, struct err *e)
{
    json_t *rec;
    int rc = engine_record(en, time, final, &rec, NULL, e);
    return rc ? rc : print_record(en, rec, e);
}

int engine_set_parts(struct engine *en, int n, struct err *e)
{
    free(en->parts);
    free(en->pmax);
    free(en->idle);
    en->parts = calloc((size_t)(n ? n : 1), sizeof *en->parts);
    en->pmax = calloc((size_t)(n ? n : 1), sizeof *en->pmax);
    en->idle = calloc((size_t)(n ? n : 1), sizeof *en->idle);
    en->n_parts = n;
    if (!en->parts || !en->pmax || !en->idle)
        return err_set(e, AB_EINPUT, "out of memory");
    for (int i = 0; i < n; i++)
        en->pmax[i] = INT64_MIN;
    return AB_OK;
}

/* Adds partition p's current running tallies to acc. */
static int capture(struct engine *en, int p, struct tallies *acc, struct err *e)
{
    struct tallies t;
    int rc = tallies_collect(&t, &en->lay, &en->parts[p], 1, false, e);
    if (!rc && tallies_add(acc, &t, &en->lay))
        rc = err_set(e, AB_EINPUT, "out of memory");
    tallies_release(&t);
    return rc;
}

/* Emits the oldest pending record, capturing the partitions still missing. */
static int emit_first(struct engine *en, struct err *e)
{
    struct pending_rec *pr = &en->pend[0];
    int rc = AB_OK;
    for (int p = 0; !rc && p < en->n_parts; p++)
        if (en->parts[p] && !pr->got[p])
            rc = capture(en, p, &pr->acc, e);
    json_t *rec = NULL;
    if (!rc)
        rc = record_of(en, &pr->acc, pr->b, false, &rec, NULL, e);
    tallies_release(&pr->acc);
    free(pr->got);
    memmove(en->pend, en->pend + 1, (size_t)(en->n_pend - 1) * sizeof *en->pend);
    en->n_pend--;
    return rc ? rc : print_record(en, rec, e);
}

/* Emits the pending records every partition has passed (or is idle for). */
static int emit_ready(struct engine *en, struct err *e)
{
    while (en->n_pend) {
        for (int p = 0; p < en->n_parts; p++)
            if (en->parts[p] && !en->pend[0].got[p] && !en->idle[p])
                return AB_OK;
        int rc = emit_first(en, e);
        if (rc)
            return rc;
    }
    return AB_OK;
}

int engine_flush_pending(struct engine *en, struct err *e)
{
    while (en->n_pend) {
        int rc = emit_first(en, e);
        if (rc)
            return rc;
    }
    return AB_OK;
}

int engine_part_idle(struct engine *en, int p, bool idle, struct err *e)
{
    if (p < 0 || p >= en->n_parts)
        return AB_OK;
    en->idle[p] = idle;
    return idle ? emit_ready(en, e) : AB_OK;
}

/* Partition p passes from pmax to t: capture it for every boundary in
 * (pmax, t] (opening records as needed), then emit what is complete. */
static int pass_boundaries(struct engine *en, int p, int64_t t, struct err *e)
{
    int64_t from = en->pmax[p];
    en->pmax[p] = t;
    en->idle[p] = false;
    int64_t b = time_floor(t, en->every_us);
    /* a partition's first event opens no record: the stream has only begun */
    if (from != INT64_MIN && b > from && b > en->cfg.window_start) {
        int64_t v = from;
        if (en->tmax_emitted > v)
            v = en->tmax_emitted;
        if (en->cfg.window_start > v)
            v = en->cfg.window_start;
        int64_t x = time_floor(v, en->every_us) + en->every_us;
        if (x <= b && (b - x) / en->every_us > 1000)
            x = b - 1000 * en->every_us;
        for (; x <= b; x += en->every_us) {
            struct pending_rec *np = realloc(en->pend, (size_t)(en->n_pend + 1) * sizeof *np);
            if (!np)
                return err_set(e, AB_EINPUT, "out of memory");
            en->pend = np;
            struct pending_rec *pr = &en->pend[en->n_pend];
            memset(pr, 0, sizeof *pr);
            pr->b = x;
            if (!(pr->got = calloc((size_t)en->n_parts, sizeof *pr->got)))
                return err_set(e, AB_EINPUT, "out of memory");
            en->n_pend++;
            int rc = tallies_collect(&pr->acc, &en->lay, NULL, 0, false, e);
            if (rc)
                return rc;
            en->tmax_emitted = x;
        }
    }
    for (int i = 0; i < en->n_pend; i++) {
        struct pending_rec *pr = &en->pend[i];
        if (pr->b > from && pr->b <= t && !pr->got[p]) {
            int rc = capture(en, p, &pr->acc, e);
            if (rc)
                return rc;
            pr->got[p] = true;
        }
    }
    return emit_ready(en, e);
}

int engine_line(struct engine *en, int part, const char *line, size_t len, bool too_long,
                const char *src, uint64_t lineno, struct err *e)
{
    struct ledger *l = part >= 0 && part < en->n_parts ? en->parts[part] : NULL;
    if (!l)
        return err_set(e, AB_EINPUT, "%s:%llu: no state for partition %d", src,
                       (unsigned long long)lineno, part);
    struct event ev;
    enum reject r = too_long ? REJ_TOO_LONG : decoder_decode(en->dec, line, len, &ev);
    if (r != REJ_NONE) {
        ledger_reject(l, r);
        return quarantine(en, src, lineno, r, line, len, e);
    }
    if (ev.time_us > en->tmax)
        en->tmax = ev.time_us;
    if (ev.time_us > en->pmax[part]) {
        int rc = pass_boundaries(en, part, ev.time_us, e);
        if (rc)
            return rc;
    }
    int rc = ledger_apply(l, &ev);
    if (rc < 0)
        return err_set(e, AB_EINPUT, "out of memory at %s:%llu", src, (unsigned long long)lineno);
    if (rc == REJ_UNKNOWN_ARM)
        return quarantine(en, src, lineno, REJ_UNKNOWN_ARM, line, len, e);
    return AB_OK;
}

int engine_read_file(struct engine *en, const char *path,
                     void (*tick)(void *ctx, const struct source *s, uint64_t lines), void *ctx,
                     uint64_t *bytes, struct err *e)
{
    struct source *s = source_open(path, e);
    if (!s)
        return e->code;
    const char *line;
    size_t len;
    bool too_long;
    int got, rc = AB_OK;
    uint64_t n = 0;
    while ((got = source_next(s, &line, &len, &too_long, e)) == 1) {
        if ((rc = engine_line(en, 0, line, len, too_long, source_name(s), source_line(s), e)))
            break;
        if (tick && !(++n & 0xffff))
            tick(ctx, s, n);
    }
    if (got < 0)
        rc = e->code;
    if (bytes)
        *bytes = source_offset(s);
    source_close(s);
    return rc;
}

int engine_finish(struct engine *en, struct err *e)
{
    int rc = engine_flush_pending(en, e);
    if (rc)
        return rc;
    for (int i = 0; i < en->n_parts; i++)
        if (en->parts[i])
            ledger_finish(en->parts[i]);
    if (en->quar && fflush(en->quar))
        return err_set(e, AB_EINPUT, "quarantine: write failed: %s", strerror(errno));
    return engine_emit(en, en->tmax == INT64_MIN ? 0 : en->tmax, true, e);
}
