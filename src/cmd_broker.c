/*
 * cmd_broker.c — `abtally broker`: librdkafka's embedded mock cluster as a
 * Kafka-protocol broker on loopback, for trying `watch` and for tests.
 *
 * The first line of stdout is the bootstrap address, flushed at once; later
 * stdout lines only acknowledge control commands ("ok <command>"). Control
 * commands come from stdin, read with read(2) (never stdio, whose buffer
 * would hide lines from poll(2)). The cluster lives on a dedicated producer
 * handle and must be destroyed before that handle (librdkafka aborts
 * otherwise). Everything is held in memory and lost on exit.
 */
#include <errno.h>
#include <getopt.h>
#include <poll.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <librdkafka/rdkafka.h>
#include <librdkafka/rdkafka_mock.h> /* after rdkafka.h */

#include "cmd.h"
#include "err.h"
#include "kafka.h"
#include "sig.h"

#define BROKER_MAX_BROKERS 64
#define BROKER_MAX_PARTITIONS 10000
#define BROKER_DEFAULT_PARTITIONS 6
#define BROKER_CTL_LINE 1024 /* longest control command */

static const char usage[] =
    "usage: abtally broker [--topic TOPIC[:PARTITIONS]]... [--partitions N] [--brokers N]\n"
    "\n"
    "Starts librdkafka's embedded mock cluster: N Kafka-protocol brokers listening\n"
    "on 127.0.0.1 at random ports, for trying 'watch' and for tests. Prints the\n"
    "bootstrap address as the first line of stdout, then runs until SIGINT or\n"
    "SIGTERM (exit status 0).\n"
    "\n"
    "Limits of the embedded broker: data lives in memory only and is gone when the\n"
    "process ends; each partition keeps at most about 5 MiB (or 100000 batches) and\n"
    "silently drops its oldest batches beyond that, so size test data and the\n"
    "partition count to stay below it; a topic that is not created here is\n"
    "auto-created with 4 partitions when a client first names it; consumer-group\n"
    "rebalances take session.timeout.ms - 1 s (use session.timeout.ms=6000).\n"
    "\n"
    "options:\n"
    "  -t, --topic TOPIC[:P]    create TOPIC with P partitions (repeatable)\n"
    "  -p, --partitions N       partitions of a --topic given without :P (default 6)\n"
    "  -n, --brokers N          number of brokers, ids 1..N (default 1; at most 64)\n"
    "  -h, --help               this help\n"
    "      --version            print the version\n"
    "\n"
    "Control commands, one per line on stdin (for fault-injection tests); each is\n"
    "answered on stdout with \"ok <command>\" or on stderr with an error:\n"
    "  down ID                  broker ID (-1: all) drops its connections and refuses\n"
    "                           new ones, keeping its port; leaders do not move\n"
    "  up ID                    broker ID (-1: all) accepts connections again\n"
    "  leader TOPIC PART ID     make broker ID the leader of TOPIC[PART] (-1: none;\n"
    "                           an unknown TOPIC is auto-created first)\n"
    "  rtt ID MS                add MS milliseconds to every response of broker ID\n"
    "  topic TOPIC[:P]          create a topic (default partitions as above)\n"
    "  perr APIKEY CODE [N]     fail the next N (default 1) requests of APIKEY (0\n"
    "                           Produce, 1 Fetch, 3 Metadata, 8 OffsetCommit, ...)\n"
    "                           with Kafka error CODE (e.g. 6 NOT_LEADER, 29 TOPIC_AUTH)\n"
    "At the end of stdin the broker keeps running until signalled.\n"
    "\n"
    "example:\n"
    "  abtally broker --topic events:6 > bootstrap.txt &\n"
    "  abtally publish --brokers \"$(head -n1 bootstrap.txt)\" --topic events day1.jsonl\n"
    "  kill %1\n";

struct broker {
    rd_kafka_t *rk;              /* the dedicated handle that owns the cluster */
    rd_kafka_mock_cluster_t *mc; /* the mock cluster */
    int n_brokers;               /* broker ids are 1..n_brokers */
    int default_parts;           /* partitions of a topic named without :P */
};

static int parse_long(const char *s, long lo, long hi, long *out)
{
    char *end;
    errno = 0;
    long v = strtol(s, &end, 10);
    if (end == s || *end || errno || v < lo || v > hi)
        return -1;
    *out = v;
    return 0;
}

/* Kafka's legal topic names: 1..249 of [a-zA-Z0-9._-], not "." or "..". */
static bool is_topic_name(const char *s, size_t n)
{
    if (n == 0 || n > 249 || (n == 1 && s[0] == '.') || (n == 2 && s[0] == '.' && s[1] == '.'))
        return false;
    for (size_t i = 0; i < n; i++) {
        char c = s[i];
        if (!((c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '.' ||
              c == '_' || c == '-'))
            return false;
    }
    return true;
}

/* Splits "TOPIC[:P]" into name[] and *parts. */
static int parse_topic(const char *spec, int default_parts, char *name, size_t size, int *parts, struct err *e)
{
    const char *colon = strchr(spec, ':');
    size_t n = colon ? (size_t)(colon - spec) : strlen(spec);
    if (!is_topic_name(spec, n) || n >= size)
        return err_set(e, AB_EUSAGE, "topic '%s': a name is 1 to 249 of a-z A-Z 0-9 . _ -", spec);
    memcpy(name, spec, n);
    name[n] = '\0';
    *parts = default_parts;
    if (colon) {
        long v;
        if (parse_long(colon + 1, 1, BROKER_MAX_PARTITIONS, &v))
            return err_set(e, AB_EUSAGE, "topic '%s': partitions must be 1..%d", spec, BROKER_MAX_PARTITIONS);
        *parts = (int)v;
    }
    return AB_OK;
}

static int create_topic(struct broker *b, const char *spec, struct err *e)
{
    char name[256];
    int parts, rc;
    if ((rc = parse_topic(spec, b->default_parts, name, sizeof name, &parts, e)))
        return rc;
    int rf = b->n_brokers < 3 ? b->n_brokers : 3;
    rd_kafka_resp_err_t err = rd_kafka_mock_topic_create(b->mc, name, parts, rf);
    if (err)
        return err_set(e, AB_EINPUT, "topic '%s': %s", name, rd_kafka_err2str(err));
    return AB_OK;
}

static int parse_broker_id(const struct broker *b, const char *s, int32_t *id, struct err *e)
{
    long v;
    if (parse_long(s, -1, b->n_brokers, &v) || v == 0)
        return err_set(e, AB_EUSAGE, "broker id '%s': expected 1..%d or -1 for all", s, b->n_brokers);
    *id = (int32_t)v;
    return AB_OK;
}

/* Runs one control command line (NUL-terminated, no newline). */
static int control(struct broker *b, char *line, struct err *e)
{
    char *w[6];
    int n = 0;
    for (char *tok = line, *save = NULL; n < 6; tok = NULL) {
        char *t = strtok_r(tok, " \t\r", &save);
        if (!t)
            break;
        w[n++] = t;
    }
    if (n == 0)
        return AB_OK;
    int32_t id = 0;
    long v = 0, cnt = 1;
    rd_kafka_resp_err_t err = RD_KAFKA_RESP_ERR_NO_ERROR;
    int rc;
    if ((!strcmp(w[0], "down") || !strcmp(w[0], "up")) && n == 2) {
        if ((rc = parse_broker_id(b, w[1], &id, e)))
            return rc;
        err = w[0][0] == 'd' ? rd_kafka_mock_broker_set_down(b->mc, id) : rd_kafka_mock_broker_set_up(b->mc, id);
    } else if (!strcmp(w[0], "leader") && n == 4) {
        if (!is_topic_name(w[1], strlen(w[1])))
            return err_set(e, AB_EUSAGE, "'%s': not a topic name", w[1]);
        if (parse_long(w[2], 0, BROKER_MAX_PARTITIONS - 1, &v))
            return err_set(e, AB_EUSAGE, "partition '%s': expected 0..%d", w[2], BROKER_MAX_PARTITIONS - 1);
        if ((rc = parse_broker_id(b, w[3], &id, e)))
            return rc;
        err = rd_kafka_mock_partition_set_leader(b->mc, w[1], (int32_t)v, id);
    } else if (!strcmp(w[0], "rtt") && n == 3) {
        if ((rc = parse_broker_id(b, w[1], &id, e)))
            return rc;
        if (parse_long(w[2], 0, 600000, &v))
            return err_set(e, AB_EUSAGE, "rtt '%s': expected 0..600000 ms", w[2]);
        err = rd_kafka_mock_broker_set_rtt(b->mc, id, (int)v);
    } else if (!strcmp(w[0], "topic") && n == 2) {
        return create_topic(b, w[1], e);
    } else if (!strcmp(w[0], "perr") && (n == 3 || n == 4)) {
        long key, code;
        if (parse_long(w[1], 0, 32767, &key))
            return err_set(e, AB_EUSAGE, "api key '%s': expected 0..32767", w[1]);
        if (parse_long(w[2], -200, 32767, &code))
            return err_set(e, AB_EUSAGE, "error code '%s': expected a Kafka error number", w[2]);
        if (n == 4 && parse_long(w[3], 1, 1000, &cnt))
            return err_set(e, AB_EUSAGE, "count '%s': expected 1..1000", w[3]);
        rd_kafka_resp_err_t errs[1000];
        for (long i = 0; i < cnt; i++)
            errs[i] = (rd_kafka_resp_err_t)code;
        rd_kafka_mock_push_request_errors_array(b->mc, (int16_t)key, (size_t)cnt, errs);
    } else {
        return err_set(e, AB_EUSAGE, "unknown command or wrong arguments (down ID, up ID, leader TOPIC PART ID, "
                                     "rtt ID MS, topic TOPIC[:P], perr APIKEY CODE [N])");
    }
    if (err)
        return err_set(e, AB_EINPUT, "%s", rd_kafka_err2str(err));
    return AB_OK;
}

/* Reader state of the control stream. */
struct ctl {
    char buf[BROKER_CTL_LINE + 1]; /* bytes of the current line */
    size_t len;                    /* bytes in buf */
    bool overlong;                 /* the current line outgrew buf: drop it */
    bool open;                     /* stdin not yet at its end */
};

static void ctl_line(struct broker *b, struct ctl *c)
{
    c->buf[c->len] = '\0';
    char echo[BROKER_CTL_LINE + 1];
    memcpy(echo, c->buf, c->len + 1);
    if (c->len && echo[c->len - 1] == '\r')
        echo[c->len - 1] = '\0';
    struct err e;
    err_clear(&e);
    if (c->overlong) {
        cli_error(AB_EUSAGE, "broker: control line longer than %d bytes ignored", BROKER_CTL_LINE);
    } else if (control(b, c->buf, &e)) {
        cli_error(e.code, "broker: '%s': %s", echo, e.msg);
    } else if (echo[strspn(echo, " \t")]) {
        printf("ok %s\n", echo);
        fflush(stdout);
    }
    c->len = 0;
    c->overlong = false;
}

/* Reads what stdin has and runs each complete line. */
static void ctl_read(struct broker *b, struct ctl *c)
{
    char chunk[4096];
    ssize_t got = read(STDIN_FILENO, chunk, sizeof chunk);
    if (got < 0) {
        if (errno == EINTR || errno == EAGAIN)
            return;
        cli_error(AB_EINPUT, "broker: stdin: %s; control commands are off", strerror(errno));
        c->open = false;
        return;
    }
    if (got == 0) {
        if (c->len)
            ctl_line(b, c);
        c->open = false;
        return;
    }
    for (ssize_t i = 0; i < got; i++) {
        if (chunk[i] == '\n') {
            ctl_line(b, c);
        } else if (c->len < BROKER_CTL_LINE) {
            c->buf[c->len++] = chunk[i];
        } else {
            c->overlong = true;
        }
    }
}

/* True when reading stdin now cannot stop us: not a terminal, or a terminal
 * whose foreground we hold (a background read would raise SIGTTIN). */
static bool may_read_stdin(void)
{
    return !isatty(STDIN_FILENO) || tcgetpgrp(STDIN_FILENO) == getpgrp();
}

static void run(struct broker *b)
{
    struct ctl c = {.len = 0, .overlong = false, .open = true};
    while (!sig_stop_requested()) {
        struct pollfd pfd = {.fd = STDIN_FILENO, .events = POLLIN, .revents = 0};
        bool watch = c.open && may_read_stdin();
        int n = poll(watch ? &pfd : NULL, watch ? 1 : 0, 200);
        if (n > 0 && (pfd.revents & (POLLIN | POLLHUP | POLLERR)))
            ctl_read(b, &c);
        else if (n > 0 && (pfd.revents & POLLNVAL))
            c.open = false; /* stdin closed: nothing to read, keep serving */
    }
}

int cmd_broker(int argc, char **argv)
{
    enum { O_VERSION = 256 };
    static const struct option opts[] = {
        {"topic", required_argument, NULL, 't'},
        {"partitions", required_argument, NULL, 'p'},
        {"brokers", required_argument, NULL, 'n'},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    struct broker b = {.rk = NULL, .mc = NULL, .n_brokers = 1, .default_parts = BROKER_DEFAULT_PARTITIONS};
    struct err e;
    err_clear(&e);
    const char **topics = calloc((size_t)argc + 1, sizeof *topics); /* at most one per argument */
    int n_topics = 0;
    if (!topics)
        return cli_error(AB_EINPUT, "broker: out of memory");
    long v;
    int c, rc = AB_OK;
    optind = 1;
    while (!rc && (c = getopt_long(argc, argv, "t:p:n:h", opts, NULL)) != -1) {
        switch (c) {
        case 't': topics[n_topics++] = optarg; break;
        case 'p':
            if (parse_long(optarg, 1, BROKER_MAX_PARTITIONS, &v))
                rc = cli_error(AB_EUSAGE, "broker: --partitions '%s': expected 1..%d", optarg,
                               BROKER_MAX_PARTITIONS);
            else
                b.default_parts = (int)v;
            break;
        case 'n':
            if (parse_long(optarg, 1, BROKER_MAX_BROKERS, &v))
                rc = cli_error(AB_EUSAGE, "broker: --brokers '%s': expected 1..%d", optarg, BROKER_MAX_BROKERS);
            else
                b.n_brokers = (int)v;
            break;
        case 'h': rc = -1; break;
        case O_VERSION: rc = -2; break;
        default: rc = cli_usage(usage, 0); break;
        }
    }
    if (rc == -1 || rc == -2) {
        free(topics);
        return rc == -1 ? cli_usage(usage, 1) : cli_version();
    }
    if (!rc && optind < argc)
        rc = cli_error(AB_EUSAGE, "broker: unexpected argument '%s' (try 'abtally broker --help')", argv[optind]);
    /* Check every topic, and repeated names, before starting anything. */
    for (int i = 0; !rc && i < n_topics; i++) {
        char name[256], other[256];
        int parts;
        if ((rc = parse_topic(topics[i], b.default_parts, name, sizeof name, &parts, &e)))
            cli_error(rc, "broker: %s", e.msg);
        for (int j = 0; !rc && j < i; j++)
            if (!parse_topic(topics[j], b.default_parts, other, sizeof other, &parts, &e) && !strcmp(name, other))
                rc = cli_error(AB_EUSAGE, "broker: --topic '%s': named twice", name);
    }
    if (!rc && (rc = sig_install(&e)))
        cli_error(rc, "broker: %s", e.msg);
    if (rc) {
        free(topics);
        return rc;
    }

    rd_kafka_conf_t *conf = rd_kafka_conf_new();
    kafka_conf_set_logging(conf); /* warnings and worse only: hides the no-bootstrap notice */
    char why[512];
    b.rk = rd_kafka_new(RD_KAFKA_PRODUCER, conf, why, sizeof why);
    if (!b.rk) {
        rd_kafka_conf_destroy(conf);
        free(topics);
        return cli_error(AB_EINPUT, "broker: cannot create the client handle: %s", why);
    }
    conf = NULL; /* owned by b.rk now */
    b.mc = rd_kafka_mock_cluster_new(b.rk, b.n_brokers);
    if (!b.mc) {
        rd_kafka_destroy(b.rk);
        free(topics);
        return cli_error(AB_EINPUT, "broker: cannot start the embedded cluster");
    }

    for (int i = 0; !rc && i < n_topics; i++)
        if ((rc = create_topic(&b, topics[i], &e)))
            cli_error(rc, "broker: %s", e.msg);
    free(topics);

    if (!rc) {
        printf("%s\n", rd_kafka_mock_cluster_bootstraps(b.mc));
        if (fflush(stdout) != 0)
            rc = cli_error(AB_EINPUT, "broker: stdout: cannot write the bootstrap address");
    }
    if (!rc) {
        fprintf(stderr,
                "abtally: broker: %d broker%s on %s; stop with Ctrl-C or SIGTERM\n"
                "abtally: broker: note: data lives in memory only and is lost when this process ends; "
                "each partition keeps at most ~5 MiB (or 100000 batches) and silently drops its oldest "
                "batches beyond that, so size the data and the partition count to stay below it; topics "
                "not created here are auto-created with 4 partitions\n",
                b.n_brokers, b.n_brokers == 1 ? "" : "s", rd_kafka_mock_cluster_bootstraps(b.mc));
        run(&b);
    }
    rd_kafka_mock_cluster_destroy(b.mc); /* the cluster first, then its handle */
    rd_kafka_destroy(b.rk);
    return rc;
}
