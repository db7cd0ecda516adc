/*
 * source.h — reading event lines from files, .gz files and stdin.
 *
 * A line reader over zlib's gzread, which reads plain and gzip files alike,
 * through a large buffer. A line longer than EVENT_MAX_LINE is reported as
 * too long and skipped to its end without being held whole. A trailing "\r"
 * is removed. This is an adapter: it may do I/O; the core never does.
 */
#ifndef ABTALLY_SOURCE_H
#define ABTALLY_SOURCE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "err.h"

struct source;

/* Opens path ("-" is stdin). NULL on failure with *e filled. */
struct source *source_open(const char *path, struct err *e);
void source_close(struct source *s);

/* Reads the next line. Returns 1 with *line and *len set (valid until the next
 * call; *too_long set when the line was cut, then *len is the prefix kept),
 * 0 at the end, -1 on a read error (*e filled). */
int source_next(struct source *s, const char **line, size_t *len, bool *too_long, struct err *e);

/* Name for messages, and the 1-based number of the line last returned. */
const char *source_name(const struct source *s);
uint64_t source_line(const struct source *s);
/* Bytes of the file consumed so far (compressed bytes for .gz). */
uint64_t source_offset(const struct source *s);

#endif
