/*
 * kafka.c — properties, logging, the topic check and the line publisher
 * (see kafka.h).
 *
 * Must never print a secret property value, and never let librdkafka's own
 * error text for a secret property through (it quotes the value). The
 * publisher's counters change only in the application thread: delivery
 * reports are served by rd_kafka_poll/rd_kafka_flush, which this file alone
 * calls on the publisher's handle.
 */
#include "kafka.h"

#include <inttypes.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <time.h>

#include "event.h"
#include "sig.h"
#include "source.h"
#include "timefmt.h"

/* ---- properties ---- */

static bool contains_nocase(const char *hay, const char *needle)
{
    size_t n = strlen(needle);
    for (; *hay; hay++)
        if (!strncasecmp(hay, needle, n))
            return true;
    return false;
}

bool kafka_is_secret(const char *key)
{
    return key && (contains_nocase(key, "password") || contains_nocase(key, "secret") ||
                   contains_nocase(key, "key"));
}

const char *kafka_redact(const char *key, const char *value)
{
    return kafka_is_secret(key) ? KAFKA_REDACTED : value;
}

static bool mock_allowed(void)
{
    const char *v = getenv(KAFKA_ALLOW_MOCK_ENV);
    return v && !strcmp(v, "1");
}

int kafka_conf_set_kv(rd_kafka_conf_t *conf, const char *key, const char *value, struct err *e)
{
    if (!*key)
        return err_set(e, AB_EUSAGE, "kafka property: expected KEY=VALUE, got an empty KEY");
    const char *shown = kafka_redact(key, value);
    if (!strncasecmp(key, "test.mock.", 10) && !mock_allowed())
        return err_set(e, AB_EUSAGE,
                       "kafka property '%s=%s': test-only property refused, it would replace the "
                       "brokers with an in-memory cluster (set " KAFKA_ALLOW_MOCK_ENV "=1 to allow)",
                       key, shown);
    char why[512];
    why[0] = '\0';
    rd_kafka_conf_res_t res = rd_kafka_conf_set(conf, key, value, why, sizeof why);
    if (res == RD_KAFKA_CONF_OK)
        return AB_OK;
    if (res == RD_KAFKA_CONF_UNKNOWN)
        return err_set(e, AB_EUSAGE, "kafka property '%s=%s': unknown property", key, shown);
    if (kafka_is_secret(key))
        return err_set(e, AB_EUSAGE, "kafka property '%s=%s': invalid value", key, shown);
    return err_set(e, AB_EUSAGE, "kafka property '%s=%s': %s", key, shown, why[0] ? why : "invalid value");
}

int kafka_conf_set(rd_kafka_conf_t *conf, const char *kv, struct err *e)
{
    const char *eq = strchr(kv, '=');
    if (!eq)
        /* Without '=' nobody can tell a name from a mistyped secret: echo nothing. */
        return err_set(e, AB_EUSAGE, "kafka property: expected KEY=VALUE, got an argument without '='");
    size_t klen = (size_t)(eq - kv);
    char *key = malloc(klen + 1);
    if (!key)
        return err_set(e, AB_EINPUT, "kafka property: out of memory");
    memcpy(key, kv, klen);
    key[klen] = '\0';
    int rc = kafka_conf_set_kv(conf, key, eq + 1, e);
    free(key);
    return rc;
}

/* ---- logging ---- */

static void on_log(const rd_kafka_t *rk, int level, const char *fac, const char *buf)
{
    (void)rk;
    if (level <= 4) /* syslog levels: 0 emergency .. 4 warning */
        fprintf(stderr, "abtally: kafka: %s: %s\n", fac, buf);
}

static void on_error(rd_kafka_t *rk, int err, const char *reason, void *opaque)
{
    (void)rk;
    (void)opaque;
    fprintf(stderr, "abtally: kafka: %s: %s\n", rd_kafka_err2name((rd_kafka_resp_err_t)err), reason);
}

void kafka_conf_set_logging(rd_kafka_conf_t *conf)
{
    char why[256];
    rd_kafka_conf_set_log_cb(conf, on_log);
    rd_kafka_conf_set_error_cb(conf, on_error);
    /* "4" is always a valid log_level; the result needs no check. */
    (void)rd_kafka_conf_set(conf, "log_level", "4", why, sizeof why);
}

/* ---- topic check ---- */

/* The entry for topic in md, or NULL. */
static const rd_kafka_metadata_topic_t *md_find(const struct rd_kafka_metadata *md, const char *topic)
{
    for (int i = 0; i < md->topic_cnt; i++)
        if (md->topics[i].topic && !strcmp(md->topics[i].topic, topic))
            return &md->topics[i];
    return NULL;
}

/* Errors that mean "not there (yet)" rather than "refused". */
static bool is_transient_topic_err(rd_kafka_resp_err_t err)
{
    return err == RD_KAFKA_RESP_ERR_UNKNOWN_TOPIC_OR_PART || err == RD_KAFKA_RESP_ERR_LEADER_NOT_AVAILABLE;
}

int kafka_topic_check(rd_kafka_t *rk, const char *topic, int timeout_ms, struct kafka_topic_info *ti,
                      struct err *e)
{
    ti->partitions = 0;
    ti->existed = false;
    double deadline = time_mono_s() + timeout_ms / 1000.0;
    const struct rd_kafka_metadata *md = NULL;
    /* All topics: a listing names no topic, so it creates none. */
    rd_kafka_resp_err_t err = rd_kafka_metadata(rk, 1, NULL, &md, timeout_ms);
    if (err)
        return err_set(e, AB_EINPUT, "topic '%s': no metadata from the brokers within %d ms: %s", topic,
                       timeout_ms, rd_kafka_err2str(err));
    const rd_kafka_metadata_topic_t *t = md_find(md, topic);
    if (t && !t->err && t->partition_cnt > 0) {
        ti->existed = true;
        ti->partitions = t->partition_cnt;
    } else if (t && !is_transient_topic_err(t->err)) {
        int rc = err_set(e, AB_EINPUT, "topic '%s': %s", topic, rd_kafka_err2str(t->err));
        rd_kafka_metadata_destroy(md);
        return rc;
    }
    rd_kafka_metadata_destroy(md);
    if (ti->existed)
        return AB_OK;

    /* Ask by name: brokers that auto-create topics create it now. */
    rd_kafka_topic_t *rkt = rd_kafka_topic_new(rk, topic, NULL);
    if (!rkt)
        return err_set(e, AB_EINPUT, "topic '%s': %s", topic, rd_kafka_err2str(rd_kafka_last_error()));
    int rc = AB_OK;
    for (;;) {
        int left = (int)((deadline - time_mono_s()) * 1000);
        if (left < 100)
            left = 100;
        err = rd_kafka_metadata(rk, 0, rkt, &md, left);
        if (err) {
            rc = err_set(e, AB_EINPUT, "topic '%s': no metadata from the brokers within %d ms: %s", topic,
                         timeout_ms, rd_kafka_err2str(err));
            break;
        }
        t = md_find(md, topic);
        rd_kafka_resp_err_t terr = t ? t->err : RD_KAFKA_RESP_ERR_UNKNOWN_TOPIC_OR_PART;
        int cnt = t ? t->partition_cnt : 0;
        rd_kafka_metadata_destroy(md);
        if (!terr && cnt > 0) {
            ti->partitions = cnt;
            break;
        }
        if (terr && !is_transient_topic_err(terr)) {
            rc = err_set(e, AB_EINPUT, "topic '%s': %s", topic, rd_kafka_err2str(terr));
            break;
        }
        if (time_mono_s() >= deadline) {
            rc = err_set(e, AB_EINPUT, "topic '%s': does not exist and the brokers did not create it (%s)",
                         topic, rd_kafka_err2str(terr ? terr : RD_KAFKA_RESP_ERR_LEADER_NOT_AVAILABLE));
            break;
        }
        if (sig_stop_requested()) {
            rc = err_set(e, AB_EINPUT, "topic '%s': interrupted while waiting for it", topic);
            break;
        }
        rd_kafka_poll(rk, 200); /* back off, serving callbacks meanwhile */
    }
    rd_kafka_topic_destroy(rkt);
    return rc;
}

/* ---- publisher ---- */

/* Files published so far, so that a delivery report can name its position. */
#define POS_FILE_MAX 0xffffu

struct kafka_publisher {
    rd_kafka_t *rk;               /* the producer (owned) */
    rd_kafka_topic_t *rkt;        /* the topic handle (owned) */
    char *topic;                  /* copy of the topic name */
    struct decoder *dec;          /* decodes lines to find their unit (owned) */
    struct kafka_topic_info info; /* what the topic check found */
    struct kafka_publish_stats st;/* counters */
    char **files;                 /* names of the files opened so far, index = position file */
    uint32_t n_files;             /* entries in files */
    double t0;                    /* monotonic time of the first line; < 0 before */
};

/* A message's position as its opaque: file index in the top 16 bits and line
 * number below on 64-bit platforms; the line alone elsewhere. */
static void *pos_pack(uint32_t file, uint64_t line)
{
#if UINTPTR_MAX > 0xffffffffu
    return (void *)(uintptr_t)(((uint64_t)(file & POS_FILE_MAX) << 48) | (line & 0xffffffffffffu));
#else
    (void)file;
    return (void *)(uintptr_t)line;
#endif
}

static void pos_format(const struct kafka_publisher *p, void *pos, char *buf, size_t size)
{
    uint64_t v = (uint64_t)(uintptr_t)pos;
#if UINTPTR_MAX > 0xffffffffu
    uint32_t file = (uint32_t)(v >> 48);
    uint64_t line = v & 0xffffffffffffu;
#else
    uint32_t file = p->n_files ? p->n_files - 1 : 0;
    uint64_t line = v;
#endif
    const char *name = file < p->n_files ? p->files[file] : "?";
    snprintf(buf, size, "%s:%" PRIu64, name, line);
}

static void note_failure(struct kafka_publisher *p, void *pos, const char *why)
{
    p->st.failed++;
    if (p->st.first_error[0])
        return;
    char where[300];
    pos_format(p, pos, where, sizeof where);
    snprintf(p->st.first_error, sizeof p->st.first_error, "%s: %s", where, why);
}

static void on_delivery(rd_kafka_t *rk, const rd_kafka_message_t *m, void *opaque)
{
    (void)rk;
    struct kafka_publisher *p = opaque;
    if (m->err)
        note_failure(p, m->_private, rd_kafka_err2str(m->err));
    else
        p->st.delivered++;
}

struct kafka_publisher *kafka_publisher_new(const char *brokers, const char *topic,
                                            const char *const *props, int n_props, int timeout_ms,
                                            struct err *e)
{
    struct kafka_publisher *p = calloc(1, sizeof *p);
    rd_kafka_conf_t *conf = NULL;
    if (!p || !(p->topic = strdup(topic)) || !(p->dec = decoder_new())) {
        err_set(e, AB_EINPUT, "out of memory");
        goto fail;
    }
    p->t0 = -1;
    conf = rd_kafka_conf_new();
    kafka_conf_set_logging(conf);
    if ((brokers && kafka_conf_set_kv(conf, "bootstrap.servers", brokers, e)) ||
        kafka_conf_set_kv(conf, "partitioner", "murmur2_random", e) ||
        kafka_conf_set_kv(conf, "enable.idempotence", "true", e) ||
        /* never let librdkafka run the Kerberos kinit command through a shell */
        kafka_conf_set_kv(conf, "sasl.kerberos.min.time.before.relogin", "0", e) ||
        /* One request in flight per broker: exactly once and in order even
         * against the embedded broker, which does not check sequence numbers
         * (see kafka.h). */
        kafka_conf_set_kv(conf, "max.in.flight.requests.per.connection", "1", e) ||
        kafka_conf_set_kv(conf, "client.id", "abtally-publish", e))
        goto fail;
    for (int i = 0; i < n_props; i++)
        if (kafka_conf_set(conf, props[i], e))
            goto fail;
    rd_kafka_conf_set_dr_msg_cb(conf, on_delivery);
    rd_kafka_conf_set_opaque(conf, p);
    char why[512];
    p->rk = rd_kafka_new(RD_KAFKA_PRODUCER, conf, why, sizeof why);
    if (!p->rk) {
        /* A property's value may show in why; name no value. */
        err_set(e, AB_EINPUT, "cannot create the producer (check the --kafka properties)");
        goto fail;
    }
    conf = NULL; /* owned by p->rk now */
    if (kafka_topic_check(p->rk, topic, timeout_ms, &p->info, e))
        goto fail;
    p->rkt = rd_kafka_topic_new(p->rk, topic, NULL);
    if (!p->rkt) {
        err_set(e, AB_EINPUT, "topic '%s': %s", topic, rd_kafka_err2str(rd_kafka_last_error()));
        goto fail;
    }
    return p;
fail:
    if (conf)
        rd_kafka_conf_destroy(conf);
    kafka_publisher_free(p);
    return NULL;
}

const struct kafka_topic_info *kafka_publisher_topic(const struct kafka_publisher *p)
{
    return &p->info;
}

const struct kafka_publish_stats *kafka_publisher_stats(const struct kafka_publisher *p)
{
    return &p->st;
}

static int check_fatal(struct kafka_publisher *p, struct err *e)
{
    char why[256];
    rd_kafka_resp_err_t err = rd_kafka_fatal_error(p->rk, why, sizeof why);
    if (!err)
        return AB_OK;
    return err_set(e, AB_EINPUT, "producer failed for good: %s: %s", rd_kafka_err2name(err), why);
}

/* Hands one message to the producer, waiting out a full queue. Returns AB_OK
 * (also when the message was refused and counted as failed), or AB_EINPUT on
 * an interruption or a fatal error. */
static int produce_one(struct kafka_publisher *p, const char *line, size_t len, const char *key, size_t klen,
                       void *pos, bool too_long, struct err *e)
{
    rd_kafka_resp_err_t err;
    for (;;) {
        if (too_long)
            err = rd_kafka_producev(p->rk, RD_KAFKA_V_RKT(p->rkt), RD_KAFKA_V_PARTITION(RD_KAFKA_PARTITION_UA),
                                    RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_VALUE((void *)line, len),
                                    RD_KAFKA_V_HEADER(KAFKA_TOO_LONG_HEADER, "1", 1),
                                    RD_KAFKA_V_OPAQUE(pos), RD_KAFKA_V_END);
        else
            err = rd_kafka_producev(p->rk, RD_KAFKA_V_RKT(p->rkt), RD_KAFKA_V_PARTITION(RD_KAFKA_PARTITION_UA),
                                    RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_VALUE((void *)line, len),
                                    RD_KAFKA_V_KEY((const void *)key, klen), RD_KAFKA_V_OPAQUE(pos),
                                    RD_KAFKA_V_END);
        if (err != RD_KAFKA_RESP_ERR__QUEUE_FULL)
            break;
        if (sig_stop_requested())
            return AB_EINPUT; /* the caller names the position */
        p->st.queue_waits++;
        rd_kafka_poll(p->rk, 100); /* delivery reports free room in the queue */
    }
    p->st.messages++;
    if (err == RD_KAFKA_RESP_ERR__FATAL)
        return check_fatal(p, e) ? AB_EINPUT : err_set(e, AB_EINPUT, "producer failed for good");
    if (err) {
        note_failure(p, pos, rd_kafka_err2str(err));
    } else {
        p->st.bytes += len;
        if (key)
            p->st.keyed++;
    }
    rd_kafka_poll(p->rk, 0);
    return AB_OK;
}

int kafka_publish_file(struct kafka_publisher *p, const char *path, struct err *e)
{
    struct source *s = source_open(path, e);
    if (!s)
        return e->code;
    char **files = realloc(p->files, (p->n_files + 1) * sizeof *files);
    if (!files) {
        source_close(s);
        return err_set(e, AB_EINPUT, "out of memory");
    }
    p->files = files;
    if (!(p->files[p->n_files] = strdup(source_name(s)))) {
        source_close(s);
        return err_set(e, AB_EINPUT, "out of memory");
    }
    uint32_t file = p->n_files++;
    if (p->t0 < 0)
        p->t0 = time_mono_s();

    const char *line;
    size_t len;
    bool too_long;
    int got, rc = AB_OK;
    while ((got = source_next(s, &line, &len, &too_long, e)) == 1) {
        uint64_t lineno = source_line(s);
        if (sig_stop_requested()) {
            rc = err_set(e, AB_EINPUT, "interrupted at %s:%" PRIu64, source_name(s), lineno);
            break;
        }
        p->st.lines++;
        if (too_long && !p->st.too_long++)
            snprintf(p->st.first_too_long, sizeof p->st.first_too_long, "%s:%" PRIu64, source_name(s),
                     lineno);
        struct event ev;
        const char *key = NULL;
        size_t klen = 0;
        if (!too_long && decoder_decode(p->dec, line, len, &ev) == REJ_NONE && ev.unit.p) {
            key = ev.unit.p;
            klen = ev.unit.n;
        }
        if ((rc = produce_one(p, line, len, key, klen, pos_pack(file, lineno), too_long, e))) {
            if (!check_fatal(p, e) && sig_stop_requested())
                err_set(e, AB_EINPUT, "interrupted at %s:%" PRIu64, source_name(s), lineno);
            break;
        }
        if ((p->st.messages & 1023) == 0 && (rc = check_fatal(p, e)))
            break;
    }
    if (got < 0 && !rc) {
        if (sig_stop_requested()) /* the signal broke a blocked read */
            rc = err_set(e, AB_EINPUT, "interrupted at %s:%" PRIu64, source_name(s), source_line(s) + 1);
        else
            rc = e->code ? e->code : AB_EINPUT;
    }
    source_close(s);
    return rc;
}

int kafka_publisher_flush(struct kafka_publisher *p, struct err *e)
{
    struct err fatal;
    err_clear(&fatal);
    double grace_end = -1;
    while (rd_kafka_outq_len(p->rk) > 0 && !check_fatal(p, &fatal)) {
        if (sig_stop_requested()) {
            if (grace_end < 0)
                grace_end = time_mono_s() + KAFKA_STOP_GRACE_MS / 1000.0;
            else if (time_mono_s() >= grace_end)
                break;
        }
        rd_kafka_flush(p->rk, 100);
    }
    bool stopped = rd_kafka_outq_len(p->rk) > 0;
    if (stopped) {
        /* Fail what is left and gather the purge reports. */
        rd_kafka_purge(p->rk, RD_KAFKA_PURGE_F_QUEUE | RD_KAFKA_PURGE_F_INFLIGHT);
        rd_kafka_flush(p->rk, 5000);
    }
    if (p->t0 >= 0)
        p->st.seconds = time_mono_s() - p->t0;
    const struct kafka_publish_stats *st = &p->st;
    if (fatal.code)
        return err_set(e, fatal.code, "%s; %" PRIu64 " of %" PRIu64 " messages not delivered", fatal.msg,
                       st->messages - st->delivered, st->messages);
    if (stopped)
        return err_set(e, AB_EINPUT, "interrupted: %" PRIu64 " of %" PRIu64 " messages not confirmed delivered",
                       st->messages - st->delivered, st->messages);
    if (st->failed)
        return err_set(e, AB_EINPUT, "%" PRIu64 " of %" PRIu64 " messages failed; first: %s", st->failed,
                       st->messages, st->first_error);
    return AB_OK;
}

void kafka_publisher_free(struct kafka_publisher *p)
{
    if (!p)
        return;
    if (p->rkt)
        rd_kafka_topic_destroy(p->rkt);
    if (p->rk) {
        rd_kafka_purge(p->rk, RD_KAFKA_PURGE_F_QUEUE | RD_KAFKA_PURGE_F_INFLIGHT);
        rd_kafka_destroy(p->rk);
    }
    for (uint32_t i = 0; i < p->n_files; i++)
        free(p->files[i]);
    free(p->files);
    decoder_free(p->dec);
    free(p->topic);
    free(p);
}
