/*
 * cmd_watch.c — `abtally watch`: the live consumer.
 *
 * One consumer in a consumer group; each assigned partition has its own
 * ledger, loaded from DIR/<topic>-<partition>.abstate when the partition is
 * assigned and saved there when it is revoked, on every --snapshot-every and
 * on SIGINT/SIGTERM. A snapshot holds the ledger and the next offset it has
 * not applied; on assignment the consumer starts from that offset, so no
 * event is lost or counted twice whatever happened to the previous owner.
 * Correctness never depends on offsets committed to the group (the embedded
 * broker refuses commits during rebalances): commits are made only so that
 * lag shows in the usual tools.
 */
#include <errno.h>
#include <getopt.h>
#include <inttypes.h>
#include <librdkafka/rdkafka.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#include "cmd.h"
#include "engine.h"
#include "err.h"
#include "kafka.h"
#include "sig.h"
#include "state.h"
#include "timefmt.h"

static const char usage[] =
    "usage: abtally watch --config EXP.json --brokers HOST:PORT --topic T --state DIR [options]\n"
    "\n"
    "Consumes the event topic in a consumer group and prints the same records as\n"
    "'abtally replay' would for the same events: one JSON line per --every of event\n"
    "time, and the final summary when it stops. Each partition's state is saved in\n"
    "DIR (atomically, with the offset it reflects) and resumed from on start, so a\n"
    "crash or restart loses no event and counts none twice. Several watchers in one\n"
    "group split the partitions; give them one shared DIR and read the global\n"
    "readout with 'abtally check --state DIR'.\n"
    "\n"
    "options:\n"
    "  -c, --config FILE          experiment config (required)\n"
    "  -b, --brokers LIST         bootstrap brokers (required)\n"
    "  -t, --topic T              event topic (required)\n"
    "  -g, --group G              consumer group (default abtally-<experiment>)\n"
    "  -s, --state DIR            state directory (required; created if missing)\n"
    "      --reset                ignore and replace existing states (start over)\n"
    "      --snapshot-every DUR   wall-clock interval between snapshots (default 10s)\n"
    "      --drain                stop once every partition is consumed up to the end\n"
    "                             offsets found at start; print the final summary\n"
    "      --emit-topic T2        also publish every record to topic T2\n"
    "      --every DUR            record cadence in event time (default 1d)\n"
    "      --lateness DUR         out-of-order tolerance (default 1h)\n"
    "      --dedup-horizon DUR    id memory (default 24h)\n"
    "      --quarantine FILE      rejected lines: topic[partition]@offset TAB reason TAB text\n"
    "      --unit-key FILE        hash unit ids with the secret key in FILE (its first 16\n"
    "                             bytes); states are resumed only with the same key\n"
    "      --max-rate N           consume at most N events per second (gentle catch-up)\n"
    "      --kafka KEY=VALUE      any librdkafka property (TLS, SASL...); repeatable;\n"
    "                             values of secret properties are never printed\n"
    "  -q, --quiet                no progress lines on stderr\n"
    "  -h, --help                 this help\n"
    "      --version              print the version\n"
    "\n"
    "example:\n"
    "  abtally watch --config checkout.json --brokers kafka1:9092 --topic events \\\n"
    "      --state /var/lib/abtally/checkout --kafka security.protocol=SASL_SSL\n";

#define MAX_PROPS 64

struct watch {
    struct engine en;
    struct engine_opts o;
    const char *topic, *dir;
    bool reset, drain, quiet;
    int n_parts;
    int64_t *next;      /* per partition: next offset to apply (-1: from the beginning) */
    int64_t *high;      /* per partition: end offset found at start (drain) */
    bool *owned;
    rd_kafka_t *rk;
    rd_kafka_t *emit;   /* producer for --emit-topic, or NULL */
    const char *emit_topic;
    double snapshot_s;  /* wall-clock seconds between snapshots */
    double max_rate;    /* events per second, 0 = unlimited */
    double started;     /* when consumption started (for max_rate) */
    bool closing;       /* states already saved: revocations only free */
    struct err err;
    int failed;         /* a callback failed: stop with err */
    uint64_t events, events_at_log;
    double last_log;
};

static void part_name(const struct watch *w, int p, char *buf, size_t n)
{
    snprintf(buf, n, "%s-%d%s", w->topic, p, STATE_SUFFIX);
}

/* Saves the state of one owned partition. */
static int save_part(struct watch *w, int p)
{
    char name[512];
    part_name(w, p, name, sizeof name);
    struct state_meta meta = {.partition = p, .n_shards = 1, .offset = w->next[p],
                              .lateness_us = w->o.lateness_us, .horizon_us = w->o.horizon_us};
    snprintf(meta.source, sizeof meta.source, "kafka");
    snprintf(meta.topic, sizeof meta.topic, "%s", w->topic);
    return state_save(w->dir, name, &meta, w->en.parts[p], &w->en.lay, &w->err);
}

static int save_all(struct watch *w)
{
    for (int p = 0; p < w->n_parts; p++)
        if (w->owned[p] && save_part(w, p))
            return AB_EINPUT;
    /* let the usual lag tools see progress; correctness never reads these */
    rd_kafka_topic_partition_list_t *l = rd_kafka_topic_partition_list_new(w->n_parts);
    for (int p = 0; p < w->n_parts; p++)
        if (w->owned[p] && w->next[p] >= 0)
            rd_kafka_topic_partition_list_add(l, w->topic, p)->offset = w->next[p];
    if (l->cnt)
        rd_kafka_commit(w->rk, l, 1);
    rd_kafka_topic_partition_list_destroy(l);
    return AB_OK;
}

/* Takes partition p: loads its state (or starts empty) and returns the offset to start at. */
static int take_part(struct watch *w, int p, int64_t *start)
{
    char name[512], path[4096];
    part_name(w, p, name, sizeof name);
    snprintf(path, sizeof path, "%s/%s", w->dir, name);
    struct stat st;
    ledger_free(w->en.parts[p]);
    w->en.parts[p] = NULL;
    if (!w->reset && stat(path, &st) == 0) {
        struct state_meta meta;
        struct ledger *l;
        if (state_load(path, &w->en.lay, &meta, &l, &w->err))
            return AB_EINPUT;
        w->en.parts[p] = l;
        w->next[p] = meta.offset;
        if (ledger_max_time(l) > w->en.tmax)
            w->en.tmax = ledger_max_time(l);
    } else {
        if (!(w->en.parts[p] = ledger_new(&w->en.lay)))
            return err_set(&w->err, AB_EINPUT, "out of memory");
        w->next[p] = -1;
    }
    w->owned[p] = true;
    *start = w->next[p] >= 0 ? w->next[p] : RD_KAFKA_OFFSET_BEGINNING;
    return AB_OK;
}

static void rebalance_cb(rd_kafka_t *rk, rd_kafka_resp_err_t err,
                         rd_kafka_topic_partition_list_t *parts, void *opaque)
{
    struct watch *w = opaque;
    /* records in progress are completed with the states held now */
    if (!w->failed && engine_flush_pending(&w->en, &w->err))
        w->failed = 1;
    if (err == RD_KAFKA_RESP_ERR__ASSIGN_PARTITIONS) {
        for (int i = 0; i < parts->cnt && !w->failed; i++) {
            rd_kafka_topic_partition_t *tp = &parts->elems[i];
            if (strcmp(tp->topic, w->topic) || tp->partition < 0 || tp->partition >= w->n_parts)
                continue;
            int64_t start;
            if (take_part(w, tp->partition, &start))
                w->failed = 1;
            tp->offset = start;
        }
        if (!w->quiet)
            fprintf(stderr, "abtally: watch: assigned %d partition(s) of '%s'\n", parts->cnt, w->topic);
        rd_kafka_assign(rk, parts);
    } else {
        for (int i = 0; i < parts->cnt; i++) {
            int p = parts->elems[i].partition;
            if (p < 0 || p >= w->n_parts || !w->owned[p])
                continue;
            if (!w->closing && !w->failed && save_part(w, p))
                w->failed = 1;
            ledger_free(w->en.parts[p]);
            w->en.parts[p] = NULL;
            w->owned[p] = false;
        }
        if (!w->quiet && !w->closing)
            fprintf(stderr, "abtally: watch: revoked %d partition(s); their states are saved\n", parts->cnt);
        rd_kafka_assign(rk, NULL);
    }
}

static int emit_record(void *ctx, const char *json, size_t len)
{
    struct watch *w = ctx;
    rd_kafka_resp_err_t e;
    while ((e = rd_kafka_producev(w->emit, RD_KAFKA_V_TOPIC(w->emit_topic),
                                  RD_KAFKA_V_VALUE((void *)json, len),
                                  RD_KAFKA_V_KEY(w->en.cfg.experiment, strlen(w->en.cfg.experiment)),
                                  RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_END)) ==
           RD_KAFKA_RESP_ERR__QUEUE_FULL)
        rd_kafka_poll(w->emit, 100);
    rd_kafka_poll(w->emit, 0);
    return e ? -1 : 0;
}

static bool drained(const struct watch *w)
{
    bool any = false;
    for (int p = 0; p < w->n_parts; p++) {
        if (!w->owned[p])
            continue;
        any = true;
        int64_t pos = w->next[p] >= 0 ? w->next[p] : 0;
        if (pos < w->high[p])
            return false;
    }
    return any;
}

static void log_progress(struct watch *w, bool force)
{
    double t = time_mono_s();
    if (w->quiet || (!force && t - w->last_log < 10))
        return;
    int64_t lag = 0;
    for (int p = 0; p < w->n_parts; p++) {
        int64_t lo, hi;
        if (w->owned[p] && !rd_kafka_get_watermark_offsets(w->rk, w->topic, p, &lo, &hi) && hi >= 0)
            lag += hi - (w->next[p] >= 0 ? w->next[p] : lo);
    }
    double rate = t > w->last_log ? (double)(w->events - w->events_at_log) / (t - w->last_log) : 0;
    fprintf(stderr, "abtally: watch: %" PRIu64 " events, %.0f events/s, consumer lag %" PRId64 "\n",
            w->events, rate, lag);
    w->last_log = t;
    w->events_at_log = w->events;
}

/* Replaces in msg (NUL-terminated, size bytes) every occurrence of the value
 * of a secret --kafka property (kafka_is_secret: "password", "secret" or
 * "key" in the name) with KAFKA_REDACTED: librdkafka's own messages may
 * quote a value (e.g. the path in ssl.keystore.location). Values shorter
 * than 3 bytes are left alone (they would blank out ordinary text). */
static void scrub_secrets(char *msg, size_t size, char **props, int n_props)
{
    for (int i = 0; i < n_props; i++) {
        const char *eq = strchr(props[i], '=');
        if (!eq)
            continue;
        size_t klen = (size_t)(eq - props[i]);
        char key[256];
        if (klen >= sizeof key)
            klen = sizeof key - 1;
        memcpy(key, props[i], klen);
        key[klen] = '\0';
        const char *val = eq + 1;
        size_t vlen = strlen(val);
        if (!kafka_is_secret(key) || vlen < 3)
            continue;
        char *hit;
        while ((hit = strstr(msg, val))) {
            size_t rlen = strlen(KAFKA_REDACTED), tail = strlen(hit + vlen);
            if ((size_t)(hit - msg) + rlen + tail + 1 > size) {
                *hit = '\0'; /* no room: cut the message before the value */
                break;
            }
            memmove(hit + rlen, hit + vlen, tail + 1);
            memcpy(hit, KAFKA_REDACTED, rlen);
        }
    }
}

static int run(struct watch *w, const char *brokers, const char *group, char **props, int n_props)
{
    char errstr[512];
    rd_kafka_conf_t *conf = rd_kafka_conf_new();
    kafka_conf_set_logging(conf);
    const char *defaults[][2] = {
        {"enable.auto.commit", "false"},
        {"auto.offset.reset", "earliest"},
        {"enable.partition.eof", "true"},
        /* never let librdkafka run the Kerberos kinit command through a shell */
        {"sasl.kerberos.min.time.before.relogin", "0"},
        /* fetch ahead in large batches (bounded by queued.max.messages.kbytes) */
        {"queued.min.messages", "1000000"},
    };
    int rc = AB_OK;
    if (brokers)
        rc = kafka_conf_set_kv(conf, "bootstrap.servers", brokers, &w->err);
    if (!rc)
        rc = kafka_conf_set_kv(conf, "group.id", group, &w->err);
    for (size_t i = 0; !rc && i < sizeof defaults / sizeof *defaults; i++)
        rc = kafka_conf_set_kv(conf, defaults[i][0], defaults[i][1], &w->err);
    for (int i = 0; !rc && i < n_props; i++)
        rc = kafka_conf_set(conf, props[i], &w->err);
    if (rc) {
        rd_kafka_conf_destroy(conf);
        return rc;
    }
    rd_kafka_conf_set_opaque(conf, w);
    rd_kafka_conf_set_rebalance_cb(conf, rebalance_cb);
    w->rk = rd_kafka_new(RD_KAFKA_CONSUMER, conf, errstr, sizeof errstr);
    if (!w->rk) {
        rd_kafka_conf_destroy(conf);
        scrub_secrets(errstr, sizeof errstr, props, n_props);
        return err_set(&w->err, AB_EINPUT, "consumer: %s", errstr);
    }
    conf = NULL; /* owned by the handle now */
    rd_kafka_poll_set_consumer(w->rk);

    struct kafka_topic_info ti;
    if ((rc = kafka_topic_check(w->rk, w->topic, 30000, &ti, &w->err)))
        return rc;
    if (!ti.existed)
        fprintf(stderr, "abtally: watch: warning: topic '%s' did not exist; the brokers created it "
                        "with %d partitions\n", w->topic, ti.partitions);
    w->n_parts = ti.partitions;
    if ((rc = engine_set_parts(&w->en, w->n_parts, &w->err)))
        return rc;
    w->next = calloc((size_t)w->n_parts, sizeof *w->next);
    w->high = calloc((size_t)w->n_parts, sizeof *w->high);
    w->owned = calloc((size_t)w->n_parts, sizeof *w->owned);
    if (!w->next || !w->high || !w->owned)
        return err_set(&w->err, AB_EINPUT, "out of memory");
    if (w->drain)
        for (int p = 0; p < w->n_parts; p++) {
            int64_t lo;
            rd_kafka_resp_err_t e = rd_kafka_query_watermark_offsets(w->rk, w->topic, p, &lo,
                                                                     &w->high[p], 30000);
            if (e)
                return err_set(&w->err, AB_EINPUT, "end offset of '%s'[%d]: %s", w->topic, p,
                               rd_kafka_err2str(e));
        }
    if (!w->quiet)
        fprintf(stderr, "abtally: watch: topic '%s' has %d partitions; group '%s'; state in '%s'\n",
                w->topic, w->n_parts, group, w->dir);

    rd_kafka_topic_partition_list_t *sub = rd_kafka_topic_partition_list_new(1);
    rd_kafka_topic_partition_list_add(sub, w->topic, RD_KAFKA_PARTITION_UA);
    rd_kafka_resp_err_t se = rd_kafka_subscribe(w->rk, sub);
    rd_kafka_topic_partition_list_destroy(sub);
    if (se)
        return err_set(&w->err, AB_EINPUT, "subscribe '%s': %s", w->topic, rd_kafka_err2str(se));

    double last_snap = time_mono_s();
    w->last_log = time_mono_s();
    while (!sig_stop_requested() && !w->failed) {
        rd_kafka_message_t *m = rd_kafka_consumer_poll(w->rk, 200);
        if (m) {
            if (m->err == RD_KAFKA_RESP_ERR__PARTITION_EOF) {
                rc = engine_part_idle(&w->en, m->partition, true, &w->err);
            } else if (m->err) {
                fprintf(stderr, "abtally: watch: kafka: %s\n", rd_kafka_message_errstr(m));
            } else if (m->partition >= 0 && m->partition < w->n_parts && w->owned[m->partition]) {
                int p = m->partition;
                /* a message before the snapshot's offset is already in the state */
                if (w->next[p] < 0 || m->offset >= w->next[p]) {
                    char src[300];
                    snprintf(src, sizeof src, "%s[%d]@%" PRId64, w->topic, p, m->offset);
                    const char *line = m->payload ? (const char *)m->payload : "";
                    size_t len = m->len;
                    rd_kafka_headers_t *hdrs = NULL;
                    const void *hv;
                    size_t hn;
                    bool too_long = len > EVENT_MAX_LINE ||
                                    (!rd_kafka_message_headers(m, &hdrs) &&
                                     !rd_kafka_header_get_last(hdrs, KAFKA_TOO_LONG_HEADER, &hv, &hn));
                    if (too_long && len > 1024)
                        len = 1024; /* the quarantine keeps the start */
                    rc = engine_line(&w->en, p, line, len, too_long, src, (uint64_t)m->offset, &w->err);
                    w->next[p] = m->offset + 1;
                    w->events++;
                    if (w->max_rate > 0) {
                        if (!w->started)
                            w->started = time_mono_s();
                        double ahead = (double)w->events / w->max_rate - (time_mono_s() - w->started);
                        if (ahead > 0.001) {
                            struct timespec ts = {(time_t)ahead, (long)((ahead - (double)(time_t)ahead) * 1e9)};
                            nanosleep(&ts, NULL);
                        }
                    }
                }
            }
            rd_kafka_message_destroy(m);
            if (rc)
                break;
        }
        if (time_mono_s() - last_snap >= w->snapshot_s) {
            if ((rc = save_all(w)))
                break;
            last_snap = time_mono_s();
        }
        log_progress(w, false);
        if (w->drain && drained(w))
            break;
    }
    if (!rc && !w->failed)
        rc = save_all(w);
    log_progress(w, true);
    return rc ? rc : w->failed ? AB_EINPUT : AB_OK;
}

static int parse_dur(const char *opt, const char *v, int64_t *out)
{
    if (duration_parse(v, out))
        return cli_error(AB_EUSAGE, "watch: %s '%s': not a duration like 10s, 1h, 1d", opt, v);
    return AB_OK;
}

int cmd_watch(int argc, char **argv)
{
    enum { O_EVERY = 256, O_LATE, O_HORIZON, O_QUAR, O_SNAP, O_DRAIN, O_EMIT, O_KAFKA, O_RESET, O_RATE, O_UNIT_KEY, O_VERSION };
    static const struct option opts[] = {
        {"config", required_argument, NULL, 'c'},
        {"brokers", required_argument, NULL, 'b'},
        {"topic", required_argument, NULL, 't'},
        {"group", required_argument, NULL, 'g'},
        {"state", required_argument, NULL, 's'},
        {"reset", no_argument, NULL, O_RESET},
        {"snapshot-every", required_argument, NULL, O_SNAP},
        {"drain", no_argument, NULL, O_DRAIN},
        {"emit-topic", required_argument, NULL, O_EMIT},
        {"every", required_argument, NULL, O_EVERY},
        {"lateness", required_argument, NULL, O_LATE},
        {"dedup-horizon", required_argument, NULL, O_HORIZON},
        {"quarantine", required_argument, NULL, O_QUAR},
        {"kafka", required_argument, NULL, O_KAFKA},
        {"max-rate", required_argument, NULL, O_RATE},
        {"unit-key", required_argument, NULL, O_UNIT_KEY},
        {"quiet", no_argument, NULL, 'q'},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    struct watch *w = calloc(1, sizeof *w);
    char *props[MAX_PROPS];
    int n_props = 0, c, rc = AB_OK;
    const char *brokers = NULL, *group = NULL;
    int64_t snap_us = 10 * US_PER_SEC;
    if (!w)
        return cli_error(AB_EINPUT, "watch: out of memory");
    engine_opts_default(&w->o);
    optind = 1;
    while (!rc && (c = getopt_long(argc, argv, "c:b:t:g:s:qh", opts, NULL)) != -1) {
        switch (c) {
        case 'c': w->o.config_path = optarg; break;
        case 'b': brokers = optarg; break;
        case 't': w->topic = optarg; break;
        case 'g': group = optarg; break;
        case 's': w->dir = optarg; break;
        case 'q': w->quiet = true; break;
        case O_RESET: w->reset = true; break;
        case O_SNAP: rc = parse_dur("--snapshot-every", optarg, &snap_us); break;
        case O_DRAIN: w->drain = true; break;
        case O_EMIT: w->emit_topic = optarg; break;
        case O_EVERY: rc = parse_dur("--every", optarg, &w->o.every_us); break;
        case O_LATE: rc = parse_dur("--lateness", optarg, &w->o.lateness_us); break;
        case O_HORIZON: rc = parse_dur("--dedup-horizon", optarg, &w->o.horizon_us); break;
        case O_QUAR: w->o.quarantine = optarg; break;
        case O_UNIT_KEY: w->o.unit_key = optarg; break;
        case O_RATE: {
            char *end;
            w->max_rate = strtod(optarg, &end);
            if (end == optarg || *end || !(w->max_rate > 0 && w->max_rate < 1e12))
                rc = cli_error(AB_EUSAGE, "watch: --max-rate '%s': expected a positive number", optarg);
            break;
        }
        case O_KAFKA:
            if (n_props == MAX_PROPS)
                rc = cli_error(AB_EUSAGE, "watch: at most %d --kafka properties", MAX_PROPS);
            else if (!strchr(optarg, '='))
                rc = cli_error(AB_EUSAGE, "watch: --kafka expects KEY=VALUE");
            else
                props[n_props++] = optarg;
            break;
        case 'h': free(w); return cli_usage(usage, 1);
        case O_VERSION: free(w); return cli_version();
        default: free(w); return cli_usage(usage, 0);
        }
    }
    if (!rc && (!w->o.config_path || !w->topic || !w->dir || (!brokers && !n_props)))
        rc = cli_error(AB_EUSAGE, "watch: --config, --brokers, --topic and --state are required "
                                  "(try 'abtally watch --help')");
    if (!rc && optind < argc)
        rc = cli_error(AB_EUSAGE, "watch: unexpected argument '%s'", argv[optind]);
    if (rc) {
        free(w);
        return rc;
    }
    w->snapshot_s = (double)snap_us / 1e6;
    err_clear(&w->err);
    rc = engine_init(&w->en, &w->o, 0, &w->err);
    char defgroup[300];
    if (!rc && !group) {
        snprintf(defgroup, sizeof defgroup, "abtally-%s", w->en.cfg.experiment);
        group = defgroup;
    }
    if (!rc && mkdir(w->dir, 0700) != 0 && errno != EEXIST)
        rc = err_set(&w->err, AB_EINPUT, "--state '%s': %s", w->dir, strerror(errno));
    if (!rc)
        rc = sig_install(&w->err);
    if (!rc && w->emit_topic) {
        char errstr[512];
        rd_kafka_conf_t *pc = rd_kafka_conf_new();
        kafka_conf_set_logging(pc);
        if (brokers)
            rc = kafka_conf_set_kv(pc, "bootstrap.servers", brokers, &w->err);
        for (int i = 0; !rc && i < n_props; i++)
            rc = kafka_conf_set(pc, props[i], &w->err);
        if (!rc && !(w->emit = rd_kafka_new(RD_KAFKA_PRODUCER, pc, errstr, sizeof errstr))) {
            scrub_secrets(errstr, sizeof errstr, props, n_props);
            rc = err_set(&w->err, AB_EINPUT, "emit producer: %s", errstr);
        }
        if (!w->emit)
            rd_kafka_conf_destroy(pc);
        w->en.on_record = emit_record;
        w->en.on_record_ctx = w;
    }
    if (!rc)
        rc = run(w, brokers, group, props, n_props);
    if (!rc)
        rc = engine_finish(&w->en, &w->err);
    w->closing = true;
    if (w->rk) {
        rd_kafka_consumer_close(w->rk);
        rd_kafka_destroy(w->rk);
    }
    if (w->emit) {
        if (rd_kafka_flush(w->emit, 30000) && !rc)
            rc = err_set(&w->err, AB_EINPUT, "emit topic: records not delivered within 30 s");
        rd_kafka_destroy(w->emit);
    }
    engine_release(&w->en);
    free(w->next);
    free(w->high);
    free(w->owned);
    if (rc)
        cli_error(rc, "watch: %s", w->err.msg);
    free(w);
    return rc;
}
