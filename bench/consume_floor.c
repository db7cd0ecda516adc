/*
 * consume_floor.c — the broker's own consume rate for `make bench`: a plain
 * librdkafka consumer with the settings `abtally watch` uses (a new consumer
 * group, subscribe, earliest offsets, no commits, rd_kafka_consumer_poll)
 * that reads every partition of a topic up to the end offsets found at start
 * and does nothing with the messages. `watch --drain` on the same topic does
 * the same reading plus decoding, the join, the records and the snapshots.
 *
 * usage: consume_floor BROKERS TOPIC GROUP
 * prints: messages bytes seconds   (seconds: wall clock, process start to end,
 * as the benchmark times `watch --drain`; the group join is included in both)
 */
#include <inttypes.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <librdkafka/rdkafka.h>

#include "err.h"
#include "kafka.h"
#include "timefmt.h"

int main(int argc, char **argv)
{
    if (argc != 4) {
        fprintf(stderr, "usage: consume_floor BROKERS TOPIC GROUP\n");
        return 2;
    }
    const char *topic = argv[2];
    double t0 = time_mono_s();
    struct err e;
    err_clear(&e);
    char errstr[512];
    rd_kafka_conf_t *conf = rd_kafka_conf_new();
    kafka_conf_set_logging(conf);
    const char *props[][2] = {
        {"bootstrap.servers", argv[1]}, {"group.id", argv[3]},          {"enable.auto.commit", "false"},
        {"auto.offset.reset", "earliest"}, {"enable.partition.eof", "true"},
    };
    for (size_t i = 0; i < sizeof props / sizeof *props; i++)
        if (kafka_conf_set_kv(conf, props[i][0], props[i][1], &e)) {
            fprintf(stderr, "consume_floor: %s\n", e.msg);
            return 1;
        }
    rd_kafka_t *rk = rd_kafka_new(RD_KAFKA_CONSUMER, conf, errstr, sizeof errstr);
    if (!rk) {
        fprintf(stderr, "consume_floor: %s\n", errstr);
        return 1;
    }
    rd_kafka_poll_set_consumer(rk);
    struct kafka_topic_info ti;
    if (kafka_topic_check(rk, topic, 30000, &ti, &e)) {
        fprintf(stderr, "consume_floor: %s\n", e.msg);
        return 1;
    }
    int n = ti.partitions;
    int64_t *high = calloc((size_t)n, sizeof *high), *next = calloc((size_t)n, sizeof *next);
    if (!high || !next)
        return 1;
    for (int p = 0; p < n; p++) {
        int64_t lo;
        if (rd_kafka_query_watermark_offsets(rk, topic, p, &lo, &high[p], 30000)) {
            fprintf(stderr, "consume_floor: end offset of partition %d: no answer\n", p);
            return 1;
        }
        next[p] = lo;
    }
    rd_kafka_topic_partition_list_t *sub = rd_kafka_topic_partition_list_new(1);
    rd_kafka_topic_partition_list_add(sub, topic, RD_KAFKA_PARTITION_UA);
    if (rd_kafka_subscribe(rk, sub)) {
        fprintf(stderr, "consume_floor: cannot subscribe\n");
        return 1;
    }
    rd_kafka_topic_partition_list_destroy(sub);
    uint64_t messages = 0, bytes = 0;
    int done = 0;
    for (int p = 0; p < n; p++)
        done += next[p] >= high[p];
    while (done < n) {
        rd_kafka_message_t *m = rd_kafka_consumer_poll(rk, 200);
        if (!m)
            continue;
        if (!m->err && m->partition >= 0 && m->partition < n) {
            int p = m->partition;
            bool was = next[p] >= high[p];
            messages++;
            bytes += m->len;
            next[p] = m->offset + 1;
            done += !was && next[p] >= high[p];
        }
        rd_kafka_message_destroy(m);
    }
    rd_kafka_consumer_close(rk);
    rd_kafka_destroy(rk);
    printf("%" PRIu64 " %" PRIu64 " %.6f\n", messages, bytes, time_mono_s() - t0);
    free(high);
    free(next);
    return 0;
}
