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

int engine_init(struct engine *en, const struct engine_opts *o, int n_parts, struct err *e)
{
    memset(en, 0, sizeof *en);
    en->out = stdout;
    en->every_us = o->every_us;
    en->final_only = o->final_only;
    en->tmax = INT64_MIN;
    en->p_seq = 1.0;
    int rc;
    if ((rc = config_load(o->config_path, &en->cfg, e)))
        return rc;
    if ((rc = layout_init(&en->lay, &en->cfg, o->lateness_us, o->horizon_us, e)))
        return rc;
    en->lay.shard = o->shard;
    en->lay.n_shards = o->n_shards ? o->n_shards : 1;
    if (!(en->dec = decoder_new()) || !(en->parts = calloc((size_t)n_parts, sizeof *en->parts)))
        return err_set(e, AB_EINPUT, "out of memory");
    en->n_parts = n_parts;
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

int engine_record(struct engine *en, int64_t time, bool final, json_t **out, int *verdict,
                  struct err *e)
{
    struct tallies t;
    struct readout rd;
    *out = NULL;
    int rc = tallies_collect(&t, &en->lay, en->parts, en->n_parts, final, e);
    if (!rc && readout_compute(&rd, &en->cfg, &t, en->p_seq))
        rc = err_set(e, AB_EINPUT, "out of memory");
    if (!rc) {
        en->p_seq = rd.p_seq;
        if (verdict)
            *verdict = rd.verdict;
        if (!(*out = report_record(&en->lay, &t, &rd, time, final)))
            rc = err_set(e, AB_EINPUT, "out of memory");
        readout_release(&rd);
    }
    tallies_release(&t);
    return rc;
}

int engine_emit(struct engine *en, int64_t time, bool final, struct err *e)
{
    json_t *rec;
    int rc = engine_record(en, time, final, &rec, NULL, e);
    if (rc)
        return rc;
    char *text = json_dumps(rec, JSON_COMPACT | JSON_REAL_PRECISION(17));
    json_decref(rec);
    if (!text)
        return err_set(e, AB_EINPUT, "out of memory");
    size_t len = strlen(text);
    if (fwrite(text, 1, len, en->out) != len || fputc('\n', en->out) == EOF)
        rc = err_set(e, AB_EINPUT, "output: write failed: %s", strerror(errno));
    if (!rc && en->on_record && en->on_record(en->on_record_ctx, text, len))
        rc = err_set(e, AB_EINPUT, "output: the record could not be published");
    free(text);
    return rc;
}

int engine_line(struct engine *en, int part, const char *line, size_t len, bool too_long,
                const char *src, uint64_t lineno, struct err *e)
{
    struct ledger *l = en->parts[part];
    struct event ev;
    enum reject r = too_long ? REJ_TOO_LONG : decoder_decode(en->dec, line, len, &ev);
    if (r != REJ_NONE) {
        ledger_reject(l, r);
        return quarantine(en, src, lineno, r, line, len, e);
    }
    if (ev.time_us > en->tmax) {
        int64_t b = time_floor(ev.time_us, en->every_us);
        bool crossed = en->tmax != INT64_MIN && b > en->tmax;
        en->tmax = ev.time_us;
        if (crossed && b > en->cfg.window_start && !en->final_only) {
            int rc = engine_emit(en, b, false, e);
            if (rc)
                return rc;
        }
    }
    int rc = ledger_apply(l, &ev);
    if (rc < 0)
        return err_set(e, AB_EINPUT, "out of memory at %s:%llu", src, (unsigned long long)lineno);
    if (rc == REJ_UNKNOWN_ARM)
        return quarantine(en, src, lineno, REJ_UNKNOWN_ARM, line, len, e);
    return AB_OK;
}

int engine_finish(struct engine *en, struct err *e)
{
    for (int i = 0; i < en->n_parts; i++)
        ledger_finish(en->parts[i]);
    if (en->quar && fflush(en->quar))
        return err_set(e, AB_EINPUT, "quarantine: write failed: %s", strerror(errno));
    return engine_emit(en, en->tmax == INT64_MIN ? 0 : en->tmax, true, e);
}
