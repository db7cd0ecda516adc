/*
 * test_kafka.c — the Kafka adapter (kafka.h) against librdkafka's in-process
 * mock cluster: property redaction and refusal, the topic check, and the
 * publisher end to end (every line arrives once, keyed by its unit, each unit
 * in the partition the Java client would choose, in file order), also under
 * injected transient produce errors, and reporting permanent ones.
 *
 * No sleeps: every wait is a poll loop on a condition with a generous
 * deadline. Each test starts its own cluster on a dedicated handle and
 * destroys it before the handle (librdkafka aborts otherwise).
 */
#include <signal.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>
#include <zlib.h>

#include <librdkafka/rdkafka.h>
#include <librdkafka/rdkafka_mock.h>

#include "helpers.h"

#include "err.h"
#include "event.h"
#include "kafka.h"
#include "sig.h"

/* Kafka protocol ApiKey of Produce (not in the public header). */
#define APIKEY_PRODUCE 0
#define TEST_TIMEOUT_MS 10000
#define CONSUME_DEADLINE_S 30.0
#define MAX_UNITS 100 /* units of an invented log */

/* ---- helpers ---- */

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* Kafka's murmur2 (the Java client's Utils.murmur2), written from the
 * algorithm's description to check the partitioner independently. */
static int32_t java_murmur2(const void *data, size_t len)
{
    const uint32_t m = 0x5bd1e995u;
    const unsigned char *p = data;
    uint32_t h = 0x9747b28cu ^ (uint32_t)len;
    size_t i = 0;
    for (; i + 4 <= len; i += 4) {
        uint32_t k = (uint32_t)p[i] | (uint32_t)p[i + 1] << 8 | (uint32_t)p[i + 2] << 16 | (uint32_t)p[i + 3] << 24;
        k *= m;
        k ^= k >> 24;
        k *= m;
        h *= m;
        h ^= k;
    }
    switch (len & 3) {
    case 3: h ^= (uint32_t)p[i + 2] << 16; /* fall through */
    case 2: h ^= (uint32_t)p[i + 1] << 8;  /* fall through */
    case 1:
        h ^= (uint32_t)p[i];
        h *= m;
    }
    h ^= h >> 13;
    h *= m;
    h ^= h >> 15;
    return (int32_t)h;
}

static int java_partition(const char *key, size_t len, int n)
{
    return (int)(((uint32_t)java_murmur2(key, len) & 0x7fffffffu) % (uint32_t)n);
}

static void quiet_log(const rd_kafka_t *rk, int level, const char *fac, const char *buf)
{
    (void)rk;
    (void)level;
    (void)fac;
    (void)buf;
}

/* One mock cluster on its own handle. */
struct cluster {
    rd_kafka_t *hk;
    rd_kafka_mock_cluster_t *mc;
    const char *bootstraps; /* owned by mc */
};

static void cluster_start(struct cluster *c, int brokers)
{
    char why[512];
    rd_kafka_conf_t *conf = rd_kafka_conf_new();
    rd_kafka_conf_set_log_cb(conf, quiet_log);
    c->hk = rd_kafka_new(RD_KAFKA_PRODUCER, conf, why, sizeof why);
    assert_non_null(c->hk);
    c->mc = rd_kafka_mock_cluster_new(c->hk, brokers);
    assert_non_null(c->mc);
    c->bootstraps = rd_kafka_mock_cluster_bootstraps(c->mc);
}

static void cluster_stop(struct cluster *c)
{
    rd_kafka_mock_cluster_destroy(c->mc); /* before its handle */
    rd_kafka_destroy(c->hk);
}

/* Lines of an invented log: NU units, assignments and outcomes with a
 * sequence number in "id", plus a not-JSON line every 97 lines, an empty line
 * every 211 and a blank one every 307. Returned array and strings are owned by
 * the caller (lines_free). */
struct lines {
    char **v;
    size_t n;
};

static void lines_make(struct lines *L, size_t n, int n_units)
{
    assert_true(n_units > 0 && n_units <= MAX_UNITS);
    L->v = calloc(n, sizeof *L->v);
    L->n = n;
    assert_non_null(L->v);
    for (size_t i = 0; i < n; i++) {
        char buf[256];
        int u = (int)((i * 7919u) % (unsigned)n_units);
        if (i % 97 == 50)
            snprintf(buf, sizeof buf, "not json, line %zu", i);
        else if (i % 211 == 100)
            buf[0] = '\0';
        else if (i % 307 == 200)
            snprintf(buf, sizeof buf, "   ");
        else if (i % 5 == 0)
            snprintf(buf, sizeof buf,
                     "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:%02zu:%02zuZ\",\"unit\":\"u%05d\","
                     "\"exp\":\"checkout\",\"arm\":\"%s\",\"id\":\"s%zu\"}",
                     (i / 60) % 60, i % 60, u, u % 2 ? "treatment" : "control", i);
        else
            snprintf(buf, sizeof buf,
                     "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:%02zu:%02zuZ\",\"unit\":\"u%05d\","
                     "\"metric\":\"order_value\",\"value\":%zu.25,\"id\":\"s%zu\"}",
                     (i / 60) % 60, i % 60, u, i % 100, i);
        L->v[i] = strdup(buf);
        assert_non_null(L->v[i]);
    }
}

static void lines_free(struct lines *L)
{
    for (size_t i = 0; i < L->n; i++)
        free(L->v[i]);
    free(L->v);
}

/* Writes L to a new temporary file, gzip-compressed when gz; returns its path
 * (malloc'd). extra, when not NULL, is written as one more line at the end. */
static char *lines_write(const struct lines *L, bool gz, const char *extra)
{
    char tmpl[] = "/tmp/abtally-test-kafka-XXXXXX";
    int fd = mkstemp(tmpl);
    assert_true(fd >= 0);
    gzFile f = gzdopen(fd, gz ? "wb" : "wbT");
    assert_non_null(f);
    for (size_t i = 0; i < L->n; i++) {
        assert_true(gzputs(f, L->v[i]) >= 0);
        assert_true(gzputc(f, '\n') == '\n');
    }
    if (extra) {
        assert_true(gzputs(f, extra) >= 0);
        assert_true(gzputc(f, '\n') == '\n');
    }
    assert_int_equal(gzclose(f), Z_OK);
    return strdup(tmpl);
}

/* A consumed message. */
struct msg {
    int32_t partition;
    int64_t offset;
    char *key;   /* NULL when unkeyed */
    char *value; /* NUL-terminated copy; "" for an empty or null value */
};

struct msgs {
    struct msg *v;
    size_t n, cap;
};

static char *dup_bytes(const void *p, size_t n)
{
    char *s = malloc(n + 1);
    assert_non_null(s);
    if (n)
        memcpy(s, p, n);
    s[n] = '\0';
    return s;
}

/* Reads topic[0..n_parts) from the beginning with manual assignment (group.id
 * set anyway: rd_kafka_assign needs one) until `want` messages arrived or the
 * deadline passed; then checks that the partitions hold exactly `want`
 * messages (high - low watermarks), so none is duplicated. */
static void consume_all(const char *bootstraps, const char *topic, int n_parts, size_t want, struct msgs *out)
{
    char why[512];
    rd_kafka_conf_t *conf = rd_kafka_conf_new();
    struct err e;
    rd_kafka_conf_set_log_cb(conf, quiet_log);
    assert_int_equal(kafka_conf_set_kv(conf, "bootstrap.servers", bootstraps, &e), AB_OK);
    assert_int_equal(kafka_conf_set(conf, "group.id=abtally-test-kafka", &e), AB_OK);
    assert_int_equal(kafka_conf_set(conf, "enable.auto.commit=false", &e), AB_OK);
    assert_int_equal(kafka_conf_set(conf, "auto.offset.reset=earliest", &e), AB_OK);
    assert_int_equal(kafka_conf_set(conf, "session.timeout.ms=6000", &e), AB_OK);
    assert_int_equal(kafka_conf_set(conf, "heartbeat.interval.ms=500", &e), AB_OK);
    /* The mock holds a fetch for fetch.wait.max.ms (500 by default) when a
     * partition has no more data; shorter rounds keep the test quick. */
    assert_int_equal(kafka_conf_set(conf, "fetch.wait.max.ms=20", &e), AB_OK);
    rd_kafka_t *rk = rd_kafka_new(RD_KAFKA_CONSUMER, conf, why, sizeof why);
    assert_non_null(rk);
    conf = NULL;
    rd_kafka_topic_partition_list_t *l = rd_kafka_topic_partition_list_new(n_parts);
    for (int p = 0; p < n_parts; p++)
        rd_kafka_topic_partition_list_add(l, topic, p)->offset = RD_KAFKA_OFFSET_BEGINNING;
    assert_int_equal(rd_kafka_assign(rk, l), RD_KAFKA_RESP_ERR_NO_ERROR);
    rd_kafka_topic_partition_list_destroy(l);

    double deadline = now_s() + CONSUME_DEADLINE_S;
    while (out->n < want && now_s() < deadline) {
        rd_kafka_message_t *m = rd_kafka_consumer_poll(rk, 100);
        if (!m)
            continue;
        if (!m->err) {
            if (out->n == out->cap) {
                out->cap = out->cap ? 2 * out->cap : 1024;
                out->v = realloc(out->v, out->cap * sizeof *out->v);
                assert_non_null(out->v);
            }
            struct msg *x = &out->v[out->n++];
            x->partition = m->partition;
            x->offset = m->offset;
            x->key = m->key ? dup_bytes(m->key, m->key_len) : NULL;
            x->value = dup_bytes(m->payload, m->payload ? m->len : 0);
        }
        rd_kafka_message_destroy(m); /* in the turn that polled it */
    }
    int64_t total = 0;
    for (int p = 0; p < n_parts; p++) {
        int64_t lo = 0, hi = 0;
        assert_int_equal(rd_kafka_query_watermark_offsets(rk, topic, p, &lo, &hi, TEST_TIMEOUT_MS),
                         RD_KAFKA_RESP_ERR_NO_ERROR);
        total += hi - lo;
    }
    rd_kafka_consumer_close(rk);
    rd_kafka_destroy(rk);
    if (out->n != want || total != (int64_t)want)
        fail_msg("'%s': consumed %zu messages, the partitions hold %lld, expected %zu", topic, out->n,
                 (long long)total, want);
}

static void msgs_free(struct msgs *M)
{
    for (size_t i = 0; i < M->n; i++) {
        free(M->v[i].key);
        free(M->v[i].value);
    }
    free(M->v);
}

static int cmp_str(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* The sequence number in "id":"sN", or -1. */
static long seq_of(const char *value)
{
    const char *p = strstr(value, "\"id\":\"s");
    return p ? strtol(p + 7, NULL, 10) : -1;
}

/* Every line of L arrived exactly once; decodable lines are keyed by their
 * unit, in the Java client's partition for that key, in file order per unit;
 * the others are unkeyed. */
static void check_roundtrip(const struct lines *L, const struct msgs *M, int n_parts)
{
    assert_int_equal(M->n, L->n);
    char **want = malloc(L->n * sizeof *want), **got = malloc(M->n * sizeof *got);
    assert_non_null(want);
    assert_non_null(got);
    for (size_t i = 0; i < L->n; i++) {
        want[i] = L->v[i];
        got[i] = M->v[i].value;
    }
    qsort(want, L->n, sizeof *want, cmp_str);
    qsort(got, M->n, sizeof *got, cmp_str);
    for (size_t i = 0; i < L->n; i++)
        assert_string_equal(got[i], want[i]);
    free(want);
    free(got);

    struct decoder *d = decoder_new();
    assert_non_null(d);
    long last_seq[MAX_UNITS];
    for (int u = 0; u < MAX_UNITS; u++)
        last_seq[u] = -1;
    size_t keyed = 0;
    for (size_t i = 0; i < M->n; i++) {
        const struct msg *x = &M->v[i];
        struct event ev;
        if (decoder_decode(d, x->value, strlen(x->value), &ev) == REJ_NONE) {
            assert_non_null(x->key);
            assert_true(str_eq(ev.unit, x->key));
            assert_int_equal(x->partition, java_partition(x->key, strlen(x->key), n_parts));
            long u = strtol(x->key + 1, NULL, 10); /* "uNNNNN" */
            long s = seq_of(x->value);
            assert_true(u >= 0 && u < MAX_UNITS);
            assert_true(s > last_seq[u]); /* file order within the unit */
            last_seq[u] = s;
            keyed++;
        } else {
            assert_null(x->key);
        }
    }
    assert_true(keyed > 0 && keyed < M->n);
    decoder_free(d);
}

static struct kafka_publisher *publisher(const struct cluster *c, const char *topic, const char *const *props,
                                         int n_props)
{
    struct err e;
    err_clear(&e);
    struct kafka_publisher *p = kafka_publisher_new(c->bootstraps, topic, props, n_props, TEST_TIMEOUT_MS, &e);
    if (!p)
        fail_msg("kafka_publisher_new: %s", e.msg);
    return p;
}

/* ---- tests ---- */

static void test_kafka__murmur2_matches_the_java_client(void **state)
{
    (void)state;
    /* Vectors from the Kafka Java client's UtilsTest.testMurmur2. */
    static const struct {
        const char *in;
        int32_t out;
    } cases[] = {
        {"21", -973932308},
        {"foobar", -790332482},
        {"a-little-bit-long-string", -985981536},
        {"a-little-bit-longer-string", -1486304829},
        {"lkjh234lh9fiuh90y23oiuhsafujhadof229phr9h19h89h8", -58897971},
        {"abc", 479470107},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++)
        assert_int_equal(java_murmur2(cases[i].in, strlen(cases[i].in)), cases[i].out);
}

static void test_kafka__redact_hides_secret_names(void **state)
{
    (void)state;
    static const char *const secret[] = {"sasl.password", "SASL.PASSWORD", "ssl.key.password",
                                         "ssl.key.pem", "sasl.oauthbearer.client.secret", "ssl.keystore.location",
                                         "my.Secret.thing", "api_KEY"};
    static const char *const plain[] = {"bootstrap.servers", "security.protocol", "sasl.username",
                                        "linger.ms", "client.id"};
    for (size_t i = 0; i < sizeof secret / sizeof secret[0]; i++) {
        assert_true(kafka_is_secret(secret[i]));
        assert_string_equal(kafka_redact(secret[i], "hunter2"), KAFKA_REDACTED);
    }
    for (size_t i = 0; i < sizeof plain / sizeof plain[0]; i++) {
        assert_false(kafka_is_secret(plain[i]));
        assert_string_equal(kafka_redact(plain[i], "v"), "v");
    }
}

static void test_kafka__conf_set_never_prints_secrets(void **state)
{
    (void)state;
    rd_kafka_conf_t *conf = rd_kafka_conf_new();
    struct err e;
    err_clear(&e);
    assert_int_equal(kafka_conf_set(conf, "linger.ms=7", &e), AB_OK);
    assert_int_equal(kafka_conf_set(conf, "client.id=a=b", &e), AB_OK); /* split at the first '=' */
    char v[64];
    size_t n = sizeof v;
    assert_int_equal(rd_kafka_conf_get(conf, "client.id", v, &n), RD_KAFKA_CONF_OK);
    assert_string_equal(v, "a=b");

    /* Unknown property with a secret-looking name. */
    assert_int_equal(kafka_conf_set(conf, "no.such.password=hunter2", &e), AB_EUSAGE);
    assert_non_null(strstr(e.msg, "no.such.password=<redacted>"));
    assert_null(strstr(e.msg, "hunter2"));
    /* A valid secret is set, and its value is kept. */
    assert_int_equal(kafka_conf_set(conf, "sasl.password=hunter2", &e), AB_OK);
    /* Invalid value of a plain property: the reason is shown. */
    assert_int_equal(kafka_conf_set(conf, "linger.ms=soon", &e), AB_EUSAGE);
    assert_non_null(strstr(e.msg, "linger.ms=soon"));
    /* No '=' at all: the text is not echoed (it may be a mistyped secret). */
    assert_int_equal(kafka_conf_set(conf, "hunter2", &e), AB_EUSAGE);
    assert_null(strstr(e.msg, "hunter2"));
    assert_int_equal(kafka_conf_set(conf, "=hunter2", &e), AB_EUSAGE);
    assert_null(strstr(e.msg, "hunter2"));
    rd_kafka_conf_destroy(conf);
}

static void test_kafka__test_mock_keys_need_the_env(void **state)
{
    (void)state;
    rd_kafka_conf_t *conf = rd_kafka_conf_new();
    struct err e;
    err_clear(&e);
    unsetenv(KAFKA_ALLOW_MOCK_ENV);
    assert_int_equal(kafka_conf_set(conf, "test.mock.num.brokers=1", &e), AB_EUSAGE);
    assert_non_null(strstr(e.msg, KAFKA_ALLOW_MOCK_ENV));
    assert_int_equal(kafka_conf_set(conf, "TEST.MOCK.num.brokers=1", &e), AB_EUSAGE);
    setenv(KAFKA_ALLOW_MOCK_ENV, "yes", 1); /* only "1" allows */
    assert_int_equal(kafka_conf_set(conf, "test.mock.num.brokers=1", &e), AB_EUSAGE);
    setenv(KAFKA_ALLOW_MOCK_ENV, "1", 1);
    assert_int_equal(kafka_conf_set(conf, "test.mock.num.brokers=1", &e), AB_OK);
    unsetenv(KAFKA_ALLOW_MOCK_ENV);
    rd_kafka_conf_destroy(conf);
}

static void test_kafka__topic_check_tells_created_from_existing(void **state)
{
    (void)state;
    struct cluster c;
    cluster_start(&c, 1);
    assert_int_equal(rd_kafka_mock_topic_create(c.mc, "made", 3, 1), RD_KAFKA_RESP_ERR_NO_ERROR);
    struct kafka_publisher *p = publisher(&c, "made", NULL, 0);
    assert_true(kafka_publisher_topic(p)->existed);
    assert_int_equal(kafka_publisher_topic(p)->partitions, 3);
    kafka_publisher_free(p);
    /* Unknown topic: the mock creates it with its default of 4 partitions. */
    p = publisher(&c, "typo", NULL, 0);
    assert_false(kafka_publisher_topic(p)->existed);
    assert_int_equal(kafka_publisher_topic(p)->partitions, 4);
    kafka_publisher_free(p);
    /* A topic the brokers refuse is an error that names it. */
    assert_int_equal(rd_kafka_mock_topic_create(c.mc, "locked", 2, 1), RD_KAFKA_RESP_ERR_NO_ERROR);
    rd_kafka_mock_topic_set_error(c.mc, "locked", RD_KAFKA_RESP_ERR_TOPIC_AUTHORIZATION_FAILED);
    struct err e;
    err_clear(&e);
    assert_null(kafka_publisher_new(c.bootstraps, "locked", NULL, 0, 3000, &e));
    assert_int_equal(e.code, AB_EINPUT);
    assert_non_null(strstr(e.msg, "'locked'"));
    cluster_stop(&c);
}

/* Consumes topic "events" back, checks the round trip of L, then removes
 * the input file f and stops the cluster (the common end of a publish test). */
static void roundtrip_and_stop(struct cluster *c, int n_parts, struct lines *L, char *f)
{
    struct msgs M = {NULL, 0, 0};
    consume_all(c->bootstraps, "events", n_parts, L->n, &M);
    check_roundtrip(L, &M, n_parts);
    msgs_free(&M);
    unlink(f);
    free(f);
    lines_free(L);
    cluster_stop(c);
}

static void test_kafka__publish_roundtrip(void **state)
{
    (void)state;
    struct cluster c;
    cluster_start(&c, 1);
    assert_int_equal(rd_kafka_mock_topic_create(c.mc, "events", 3, 1), RD_KAFKA_RESP_ERR_NO_ERROR);
    struct lines L;
    lines_make(&L, 3000, 40);
    /* One line over EVENT_MAX_LINE at the end of the first file: sent as a
     * too_long marker (its first KiB, unkeyed, with the header). */
    char *huge = malloc(EVENT_MAX_LINE + 100);
    assert_non_null(huge);
    memset(huge, 'x', EVENT_MAX_LINE + 99);
    huge[EVENT_MAX_LINE + 99] = '\0';
    struct lines half1 = {L.v, 1500}, half2 = {L.v + 1500, 1500};
    char *f1 = lines_write(&half1, false, huge), *f2 = lines_write(&half2, true, NULL);
    free(huge);

    static const char *const props[] = {"linger.ms=10"};
    struct kafka_publisher *p = publisher(&c, "events", props, 1);
    struct err e;
    err_clear(&e);
    assert_int_equal(kafka_publish_file(p, f1, &e), AB_OK);
    assert_int_equal(kafka_publish_file(p, f2, &e), AB_OK);
    assert_int_equal(kafka_publisher_flush(p, &e), AB_OK);
    const struct kafka_publish_stats *st = kafka_publisher_stats(p);
    assert_int_equal(st->lines, 3001);
    assert_int_equal(st->messages, 3001);
    assert_int_equal(st->delivered, 3001);
    assert_int_equal(st->failed, 0);
    assert_int_equal(st->too_long, 1);
    assert_non_null(strstr(st->first_too_long, ":1501"));
    assert_string_equal(st->first_error, "");
    kafka_publisher_free(p);

    struct msgs M = {NULL, 0, 0};
    consume_all(c.bootstraps, "events", 3, L.n + 1, &M);
    /* the too_long marker: the line's first KiB, unkeyed; the rest round-trip */
    size_t marker = M.n;
    for (size_t i = 0; i < M.n; i++)
        if (!M.v[i].key && strlen(M.v[i].value) == 1024 && M.v[i].value[0] == 'x')
            marker = i;
    assert_true(marker < M.n);
    free(M.v[marker].value);
    memmove(&M.v[marker], &M.v[marker + 1], (M.n - marker - 1) * sizeof *M.v);
    M.n--;
    check_roundtrip(&L, &M, 3);
    msgs_free(&M);
    unlink(f1);
    unlink(f2);
    free(f1);
    free(f2);
    lines_free(&L);
    cluster_stop(&c);
}

static void test_kafka__publish_survives_transient_errors(void **state)
{
    (void)state;
    struct cluster c;
    cluster_start(&c, 3);
    assert_int_equal(rd_kafka_mock_topic_create(c.mc, "events", 6, 3), RD_KAFKA_RESP_ERR_NO_ERROR);
    struct lines L;
    lines_make(&L, 2000, 25);
    char *f = lines_write(&L, false, NULL);
    struct kafka_publisher *p = publisher(&c, "events", NULL, 0);
    /* The next produce requests fail: not leader twice, a dropped connection,
     * a timeout; librdkafka retries each without losing or repeating. This
     * holds because the publisher keeps one request in flight per broker: the
     * mock does not check the idempotent producer's sequence numbers, so with
     * several in flight a later batch overtakes a failed one, and librdkafka
     * then takes the failed batch for written (measured: 1 of 2000 lost, or
     * 29 duplicated, when the test ran slowly under valgrind). */
    rd_kafka_mock_push_request_errors(c.mc, APIKEY_PRODUCE, 4, RD_KAFKA_RESP_ERR_NOT_LEADER_FOR_PARTITION,
                                      RD_KAFKA_RESP_ERR_NOT_LEADER_FOR_PARTITION, RD_KAFKA_RESP_ERR__TRANSPORT,
                                      RD_KAFKA_RESP_ERR_REQUEST_TIMED_OUT);
    struct err e;
    err_clear(&e);
    assert_int_equal(kafka_publish_file(p, f, &e), AB_OK);
    if (kafka_publisher_flush(p, &e))
        fail_msg("flush: %s", e.msg);
    const struct kafka_publish_stats *st = kafka_publisher_stats(p);
    assert_int_equal(st->delivered, L.n);
    assert_int_equal(st->failed, 0);
    kafka_publisher_free(p);

    roundtrip_and_stop(&c, 6, &L, f);
}

static void test_kafka__publish_waits_out_a_full_queue(void **state)
{
    (void)state;
    struct cluster c;
    cluster_start(&c, 1);
    assert_int_equal(rd_kafka_mock_topic_create(c.mc, "events", 2, 1), RD_KAFKA_RESP_ERR_NO_ERROR);
    struct lines L;
    lines_make(&L, 200, 10);
    char *f = lines_write(&L, false, NULL);
    /* A local queue of 50 messages and 100 ms per response: the queue is
     * full long before the first acknowledgement can come back. */
    static const char *const props[] = {"queue.buffering.max.messages=50"};
    struct kafka_publisher *p = publisher(&c, "events", props, 1);
    rd_kafka_mock_broker_set_rtt(c.mc, -1, 100);
    struct err e;
    err_clear(&e);
    assert_int_equal(kafka_publish_file(p, f, &e), AB_OK);
    if (kafka_publisher_flush(p, &e))
        fail_msg("flush: %s", e.msg);
    const struct kafka_publish_stats *st = kafka_publisher_stats(p);
    assert_true(st->queue_waits > 0);
    assert_int_equal(st->delivered, L.n);
    kafka_publisher_free(p);
    rd_kafka_mock_broker_set_rtt(c.mc, -1, 0);

    roundtrip_and_stop(&c, 2, &L, f);
}

static void test_kafka__publish_reports_permanent_errors(void **state)
{
    (void)state;
    struct cluster c;
    cluster_start(&c, 1);
    assert_int_equal(rd_kafka_mock_topic_create(c.mc, "events", 2, 1), RD_KAFKA_RESP_ERR_NO_ERROR);
    struct lines L;
    lines_make(&L, 50, 10);
    char *f = lines_write(&L, false, NULL);
    static const char *const props[] = {"message.timeout.ms=10000"};
    struct kafka_publisher *p = publisher(&c, "events", props, 1);
    rd_kafka_resp_err_t errs[8];
    for (int i = 0; i < 8; i++)
        errs[i] = RD_KAFKA_RESP_ERR_TOPIC_AUTHORIZATION_FAILED;
    rd_kafka_mock_push_request_errors_array(c.mc, APIKEY_PRODUCE, 8, errs);
    struct err e;
    err_clear(&e);
    assert_int_equal(kafka_publish_file(p, f, &e), AB_OK);
    assert_int_equal(kafka_publisher_flush(p, &e), AB_EINPUT);
    const struct kafka_publish_stats *st = kafka_publisher_stats(p);
    assert_true(st->failed > 0);
    assert_int_equal(st->delivered + st->failed, st->messages);
    assert_non_null(strstr(e.msg, "failed"));
    assert_non_null(strstr(st->first_error, "uthoriz"));
    assert_non_null(strstr(st->first_error, f)); /* names the file and line */
    kafka_publisher_free(p);
    rd_kafka_mock_clear_request_errors(c.mc, APIKEY_PRODUCE);
    unlink(f);
    free(f);
    lines_free(&L);
    cluster_stop(&c);
}

static void test_kafka__publish_stops_on_the_stop_flag(void **state)
{
    (void)state;
    struct cluster c;
    cluster_start(&c, 1);
    assert_int_equal(rd_kafka_mock_topic_create(c.mc, "events", 2, 1), RD_KAFKA_RESP_ERR_NO_ERROR);
    struct lines L;
    lines_make(&L, 20, 5);
    char *f = lines_write(&L, false, NULL);
    struct kafka_publisher *p = publisher(&c, "events", NULL, 0);
    struct err e;
    err_clear(&e);
    sig_request_stop(SIGINT);
    assert_true(sig_stop_requested());
    assert_int_equal(sig_stop_signal(), SIGINT);
    assert_int_equal(kafka_publish_file(p, f, &e), AB_EINPUT);
    assert_non_null(strstr(e.msg, "interrupted at"));
    assert_int_equal(kafka_publisher_stats(p)->messages, 0);
    sig_reset();
    assert_false(sig_stop_requested());
    kafka_publisher_free(p);
    unlink(f);
    free(f);
    lines_free(&L);
    cluster_stop(&c);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_kafka__murmur2_matches_the_java_client),
        cmocka_unit_test(test_kafka__redact_hides_secret_names),
        cmocka_unit_test(test_kafka__conf_set_never_prints_secrets),
        cmocka_unit_test(test_kafka__test_mock_keys_need_the_env),
        cmocka_unit_test(test_kafka__topic_check_tells_created_from_existing),
        cmocka_unit_test(test_kafka__publish_roundtrip),
        cmocka_unit_test(test_kafka__publish_survives_transient_errors),
        cmocka_unit_test(test_kafka__publish_waits_out_a_full_queue),
        cmocka_unit_test(test_kafka__publish_reports_permanent_errors),
        cmocka_unit_test(test_kafka__publish_stops_on_the_stop_flag),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
