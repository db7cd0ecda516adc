/*
 * cmd_publish.c — `abtally publish`: event logs into a Kafka topic, one
 * message per line, keyed by the event's unit (see kafka.h for the rules).
 *
 * Prints nothing on stdout; the summary and every problem go to stderr. Never
 * prints a --kafka value that may be a secret.
 */
#include <getopt.h>
#include <inttypes.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cmd.h"
#include "err.h"
#include "event.h"
#include "kafka.h"
#include "sig.h"

static const char usage[] =
    "usage: abtally publish --brokers HOST:PORT --topic TOPIC [options] [FILE...]\n"
    "\n"
    "Writes event logs (JSON lines; plain, .gz, or - for stdin; stdin when no FILE\n"
    "is given) into a Kafka topic, one message per line, in file order, and waits\n"
    "until the brokers have acknowledged every message.\n"
    "\n"
    "  - A line that decodes as an event is keyed by its \"unit\", so all events of a\n"
    "    unit land in one partition, in order (partitioner murmur2_random: the same\n"
    "    partition for a key as the Java client).\n"
    "  - Any other line, including an empty or blank one, is published as is with\n"
    "    no key (to a random partition), so that 'watch' rejects it for the same\n"
    "    reason 'replay' rejects it; an empty line becomes an empty message.\n"
    "  - A line over 1 MiB cannot be published whole: its first KiB goes out,\n"
    "    unkeyed, with the header abtally-too-long, and 'watch' rejects it as\n"
    "    too_long just as 'replay' rejects the line.\n"
    "\n"
    "The producer is idempotent (enable.idempotence=true), keeps librdkafka's\n"
    "default batching and one request in flight per broker, so that nothing is lost\n"
    "or repeated even when the embedded broker injects faults (it does not check\n"
    "sequence numbers); against distant real brokers, --kafka\n"
    "max.in.flight.requests.per.connection=5 is safe and faster.\n"
    "\n"
    "Before producing, the topic is looked up: a topic the brokers did not have is\n"
    "reported (the embedded 'abtally broker' creates such a topic with 4\n"
    "partitions), and so is a partition count other than --partitions.\n"
    "\n"
    "options:\n"
    "  -b, --brokers LIST       bootstrap brokers, HOST:PORT[,HOST:PORT...]\n"
    "  -t, --topic TOPIC        the topic to write to\n"
    "      --kafka KEY=VALUE    a librdkafka property (repeatable; e.g. TLS or SASL\n"
    "                           settings, message.timeout.ms); values of properties\n"
    "                           named *password*, *secret*, *key* are never printed;\n"
    "                           test.mock.* needs ABTALLY_ALLOW_MOCK=1\n"
    "      --partitions N       the partition count the topic should have (warns if not)\n"
    "      --timeout SECONDS    how long to wait for the brokers' metadata (default 10)\n"
    "  -h, --help               this help\n"
    "      --version            print the version\n"
    "\n"
    "A summary goes to stderr: messages, keyed, bytes, failures, msg/s. Exit status\n"
    "0 when every message was delivered; 1 when any failed (with how many and the\n"
    "first error), on a read error, or when interrupted; 2 on a usage error.\n"
    "Messages that cannot be delivered fail after message.timeout.ms (librdkafka's\n"
    "default: 5 minutes); Ctrl-C stops at once and reports what was not confirmed.\n"
    "\n"
    "example:\n"
    "  abtally broker --topic events:6 > bootstrap.txt &\n"
    "  abtally publish --brokers \"$(head -n1 bootstrap.txt)\" --topic events day1.jsonl day2.jsonl.gz\n";

static int parse_int(const char *s, long lo, long hi, long *out)
{
    char *end;
    long v = strtol(s, &end, 10);
    if (end == s || *end || v < lo || v > hi)
        return -1;
    *out = v;
    return 0;
}

int cmd_publish(int argc, char **argv)
{
    enum { O_KAFKA = 256, O_PARTS, O_TIMEOUT, O_VERSION };
    static const struct option opts[] = {
        {"brokers", required_argument, NULL, 'b'},
        {"topic", required_argument, NULL, 't'},
        {"kafka", required_argument, NULL, O_KAFKA},
        {"partitions", required_argument, NULL, O_PARTS},
        {"timeout", required_argument, NULL, O_TIMEOUT},
        {"help", no_argument, NULL, 'h'},
        {"version", no_argument, NULL, O_VERSION},
        {NULL, 0, NULL, 0},
    };
    const char *brokers = NULL, *topic = NULL;
    long want_parts = 0, timeout_s = 10;
    const char **props = calloc((size_t)argc + 1, sizeof *props); /* at most one per argument */
    int n_props = 0;
    if (!props)
        return cli_error(AB_EINPUT, "publish: out of memory");
    int c, rc;
    optind = 1;
    while ((c = getopt_long(argc, argv, "b:t:h", opts, NULL)) != -1) {
        switch (c) {
        case 'b': brokers = optarg; break;
        case 't': topic = optarg; break;
        case O_KAFKA: props[n_props++] = optarg; break;
        case O_PARTS:
            if (parse_int(optarg, 1, 1000000, &want_parts)) {
                free(props);
                return cli_error(AB_EUSAGE, "publish: --partitions '%s': expected a count >= 1", optarg);
            }
            break;
        case O_TIMEOUT:
            if (parse_int(optarg, 1, 3600, &timeout_s)) {
                free(props);
                return cli_error(AB_EUSAGE, "publish: --timeout '%s': expected whole seconds in 1..3600", optarg);
            }
            break;
        case 'h': free(props); return cli_usage(usage, 1);
        case O_VERSION: free(props); return cli_version();
        default: free(props); return cli_usage(usage, 0);
        }
    }
    bool props_brokers = false;
    for (int i = 0; i < n_props; i++)
        if (!strncmp(props[i], "bootstrap.servers=", 18) || !strncmp(props[i], "metadata.broker.list=", 21))
            props_brokers = true;
    if (!topic || !*topic || (!brokers && !props_brokers)) {
        free(props);
        return cli_error(AB_EUSAGE, "publish: --brokers and --topic are required (try 'abtally publish --help')");
    }

    struct err e;
    err_clear(&e);
    if ((rc = sig_install_interrupting(&e))) { /* a read blocked on an idle pipe must not hold up a stop */
        free(props);
        return cli_error(rc, "publish: %s", e.msg);
    }
    struct kafka_publisher *p = kafka_publisher_new(brokers, topic, props, n_props, (int)(timeout_s * 1000), &e);
    free(props);
    if (!p)
        return cli_error(e.code, "publish: %s", e.msg);

    const struct kafka_topic_info *ti = kafka_publisher_topic(p);
    if (!ti->existed)
        fprintf(stderr,
                "abtally: publish: topic '%s' did not exist; the brokers created it with %d partitions "
                "(create it first with the partition count you want, e.g. 'abtally broker --topic %s:6')\n",
                topic, ti->partitions, topic);
    else if (want_parts && ti->partitions != want_parts)
        fprintf(stderr, "abtally: publish: topic '%s' has %d partitions, not the %ld expected\n", topic,
                ti->partitions, want_parts);

    char *stdin_only[] = {"-"};
    char **files = optind < argc ? argv + optind : stdin_only;
    int n_files = optind < argc ? argc - optind : 1;
    rc = AB_OK;
    for (int i = 0; !rc && i < n_files; i++)
        rc = kafka_publish_file(p, files[i], &e);
    /* Even after a read error, wait for what was sent, so the result is known. */
    struct err fe;
    err_clear(&fe);
    int frc = kafka_publisher_flush(p, &fe);

    const struct kafka_publish_stats *st = kafka_publisher_stats(p);
    double rate = st->seconds > 0 ? (double)st->delivered / st->seconds : 0;
    fprintf(stderr,
            "abtally: publish: %" PRIu64 " messages (%" PRIu64 " keyed by unit, %" PRIu64
            " unkeyed), %" PRIu64 " bytes to '%s' (%d partition%s): %" PRIu64 " delivered, %" PRIu64
            " failed in %.2f s (%.0f msg/s)\n",
            st->messages, st->keyed, st->messages - st->keyed, st->bytes, topic, ti->partitions,
            ti->partitions == 1 ? "" : "s", st->delivered, st->failed, st->seconds, rate);
    if (st->too_long)
        fprintf(stderr,
                "abtally: publish: %" PRIu64 " lines over %d bytes sent as too_long markers, the first at %s\n",
                st->too_long, EVENT_MAX_LINE, st->first_too_long);
    kafka_publisher_free(p);
    if (rc)
        return cli_error(rc, "publish: %s%s%s", e.msg, frc ? "; " : "", frc ? fe.msg : "");
    if (frc)
        return cli_error(frc, "publish: %s", fe.msg);
    return AB_OK;
}
