/*
 * kafka.h — abtally's thin layer over librdkafka: setting properties without
 * ever printing a secret, logging librdkafka's own complaints, checking a
 * topic, and publishing event lines keyed by unit.
 *
 * Must never print the value of a property whose name contains "password",
 * "secret" or "key" (any case): such values show as "<redacted>". Properties
 * named test.mock.* (which silently swap the configured brokers for an
 * in-memory test cluster) are refused unless the environment variable
 * ABTALLY_ALLOW_MOCK is "1".
 *
 * This is an adapter: it may print to stderr (librdkafka's warnings, through
 * the callbacks of kafka_conf_set_logging) and read files; the core never
 * includes it.
 */
#ifndef ABTALLY_KAFKA_H
#define ABTALLY_KAFKA_H

#include <stdbool.h>
#include <stdint.h>

#include <librdkafka/rdkafka.h>

#include "err.h"

/* The environment variable that allows test.mock.* properties when "1". */
#define KAFKA_ALLOW_MOCK_ENV "ABTALLY_ALLOW_MOCK"
/* A message with this header stands for a line longer than EVENT_MAX_LINE:
 * its value is the line's first KiB; watch counts it as too_long, as replay
 * counts the line itself. */
#define KAFKA_TOO_LONG_HEADER "abtally-too-long"
/* What a secret value prints as. */
#define KAFKA_REDACTED "<redacted>"
/* After a stop request, how long kafka_publisher_flush still waits for delivery. */
#define KAFKA_STOP_GRACE_MS 2000

/* True when a property named `key` holds a secret: its name contains
 * "password", "secret" or "key", in any case. */
bool kafka_is_secret(const char *key);

/* The text to print for property `key` set to `value`: `value` itself
 * (borrowed) or the static string "<redacted>" when kafka_is_secret(key). */
const char *kafka_redact(const char *key, const char *value);

/* Sets one property given as "KEY=VALUE" (split at the first '=') on conf
 * (borrowed). Returns AB_OK, or AB_EUSAGE with *e filled when the text has no
 * '=' or an empty key, when the key is test.mock.* and ABTALLY_ALLOW_MOCK is
 * not "1", or when librdkafka refuses the property; the message names the
 * property as "kafka property 'KEY=VALUE'" with a secret value redacted, and
 * never carries librdkafka's own text for a secret (it may quote the value). */
int kafka_conf_set(rd_kafka_conf_t *conf, const char *kv, struct err *e);

/* The same with the key and the value apart. */
int kafka_conf_set_kv(rd_kafka_conf_t *conf, const char *key, const char *value, struct err *e);

/* Installs a log_cb and an error_cb on conf (borrowed) that print
 * librdkafka's messages at warning level or worse, and every error event, to
 * stderr as "abtally: kafka: ...". Also sets log_level to warning so that
 * notices are not even formatted. */
void kafka_conf_set_logging(rd_kafka_conf_t *conf);

/* What the brokers said about a topic. */
struct kafka_topic_info {
    int partitions; /* partition count (after any auto-creation) */
    bool existed;   /* listed by the brokers before this check named it */
};

/*
 * Checks topic on the client rk (borrowed): first lists all topics (a
 * request that creates none), then, when the topic is not listed, asks for
 * it by name — which makes brokers that auto-create topics create it (the
 * embedded broker then gives it 4 partitions) — retrying while it has no
 * leader, until timeout_ms passes. Fills *ti. Returns AB_OK, or AB_EINPUT
 * when the brokers do not answer in time, report an error for the topic, or
 * do not create a missing topic.
 */
int kafka_topic_check(rd_kafka_t *rk, const char *topic, int timeout_ms, struct kafka_topic_info *ti,
                      struct err *e);

/* Counters of a publisher. Once kafka_publisher_flush returned without an
 * interruption, messages == delivered + failed. */
struct kafka_publish_stats {
    uint64_t lines;             /* lines read from the inputs */
    uint64_t messages;          /* lines handed to the producer (all but skipped ones) */
    uint64_t keyed;             /* of those, messages keyed by the event's unit */
    uint64_t bytes;             /* value bytes of the messages */
    uint64_t delivered;         /* messages the brokers acknowledged */
    uint64_t failed;            /* messages refused at once or failed in a delivery report */
    uint64_t too_long;          /* lines longer than EVENT_MAX_LINE, published as too_long markers */
    uint64_t queue_waits;       /* times a full local queue was waited out */
    double seconds;             /* wall time from the first line to the end of the flush */
    char first_error[400];      /* "<file>:<line>: <why>" of the first failure, or "" */
    char first_too_long[300];   /* "<file>:<line>" of the first such line, or "" */
};

struct kafka_publisher;

/*
 * Creates an idempotent producer for `topic` on `brokers` (bootstrap list;
 * may be NULL when props set bootstrap.servers) with the murmur2_random
 * partitioner (the keyed partitioning of the Java client; unkeyed messages go
 * to a random partition), librdkafka's default batching and one produce
 * request in flight per broker (max.in.flight.requests.per.connection=1).
 * The last is for the embedded broker: librdkafka 2.0.2's mock does not check
 * the producer's sequence numbers, so with several requests in flight a
 * retried batch can be overtaken, and then be lost (reported delivered) or
 * written twice. On loopback it costs no measurable throughput (decoding
 * dominates); against distant real brokers, --kafka
 * max.in.flight.requests.per.connection=5 is safe and faster. Then applies
 * props[0..n_props) ("KEY=VALUE", through kafka_conf_set, so they override the
 * defaults), then checks the topic with kafka_topic_check(timeout_ms).
 * Returns the publisher (free with kafka_publisher_free) or NULL with *e
 * filled: AB_EUSAGE for a refused property, AB_EINPUT otherwise. Strings are
 * borrowed; the publisher keeps copies.
 */
struct kafka_publisher *kafka_publisher_new(const char *brokers, const char *topic,
                                            const char *const *props, int n_props, int timeout_ms,
                                            struct err *e);

/* What the topic check found. */
const struct kafka_topic_info *kafka_publisher_topic(const struct kafka_publisher *p);

/*
 * Publishes every line of path (plain, .gz, or "-" for stdin; read through
 * source.h) as one message, without waiting for delivery:
 *   - a line that decodes as an event (event.h) is keyed by its unit, so all
 *     events of a unit land in one partition, in file order;
 *   - a line that does not decode, including an empty or blank line, is
 *     published as is (an empty line as an empty message) with no key, so a
 *     consumer rejects it for the same reason replay would;
 *   - a line longer than EVENT_MAX_LINE cannot be held whole: its first KiB
 *     is published, unkeyed, with the KAFKA_TOO_LONG_HEADER header and
 *     counted in too_long (watch and replay both reject it as too_long).
 * A full local queue is waited out by polling. A message the producer refuses
 * at once counts as failed and publishing goes on. Returns AB_OK, or
 * AB_EINPUT with *e filled when the file cannot be read, when the stop flag
 * (sig.h) is raised ("interrupted at <file>:<line>", also when it broke a
 * blocked read) or on a fatal producer error.
 */
int kafka_publish_file(struct kafka_publisher *p, const char *path, struct err *e);

/*
 * Waits for the delivery report of every message, polling in short steps for
 * as long as messages are outstanding (each fails at the latest after
 * message.timeout.ms). Once the stop flag is up, waits at most
 * KAFKA_STOP_GRACE_MS more; then, or at once on a fatal producer error,
 * purges what is left and gathers the purge reports. Returns AB_OK when every message was delivered, else
 * AB_EINPUT with *e saying how many failed or were not confirmed and the
 * first error.
 */
int kafka_publisher_flush(struct kafka_publisher *p, struct err *e);

/* The counters so far (borrowed; valid until kafka_publisher_free). */
const struct kafka_publish_stats *kafka_publisher_stats(const struct kafka_publisher *p);

/* Destroys the producer without waiting (flush first); NULL does nothing. */
void kafka_publisher_free(struct kafka_publisher *p);

#endif
