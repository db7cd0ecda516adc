/*
 * event.h — the event decoder: one line of bytes in, one event or one
 * rejection reason out. Nothing else in abtally parses event JSON, so the
 * parser behind this interface can be replaced freely.
 *
 * An event's strings point into memory owned by the decoder and stay valid
 * until the next decoder_decode() on the same decoder. The decoder knows no
 * config: checks that need one (unknown_arm) happen in the ledger.
 */
#ifndef ABTALLY_EVENT_H
#define ABTALLY_EVENT_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/* Lines longer than this are rejected as too_long (the reader never holds them whole). */
#define EVENT_MAX_LINE (1024 * 1024)
/* At most this many attrs pairs per assignment (more: bad_type). */
#define EVENT_MAX_ATTRS 16

enum ev_kind { EV_ASSIGN = 1, EV_OUTCOME = 2 };

/* Reasons a line is rejected. The names (reject_name) are part of the output contract. */
enum reject {
    REJ_NONE = 0,
    REJ_NOT_JSON,      /* not a JSON object (syntax, invalid UTF-8, duplicate key, not an object) */
    REJ_MISSING_FIELD, /* a required field is absent or an empty string */
    REJ_BAD_TYPE,      /* a field has the wrong JSON type */
    REJ_UNKNOWN_KIND,  /* "kind" is neither "assign" nor "outcome" */
    REJ_BAD_TIME,      /* "time" is not RFC 3339 nor integer epoch milliseconds in 1900..9999 */
    REJ_NOT_FINITE,    /* "value" is not a finite number (e.g. 1e400) */
    REJ_TOO_LONG,      /* the line exceeds EVENT_MAX_LINE bytes */
    REJ_UNKNOWN_ARM,   /* an assignment of this experiment names an arm not in the config */
    REJ_EMPTY,         /* an empty (or all-blank) line */
    REJ_COUNT
};

struct str {
    const char *p; /* not NUL-terminated in general; NULL when absent */
    uint32_t n;
};

struct attr {
    struct str key, value;
};

struct event {
    enum ev_kind kind;
    int64_t time_us;         /* event time, µs since the epoch (UTC) */
    struct str unit;         /* randomization unit id (required) */
    struct str id;           /* optional event id for de-duplication (p == NULL if absent) */
    struct str exp;          /* assign: experiment name (required) */
    struct str arm;          /* assign: arm name (required) */
    int n_attrs;             /* assign: number of attrs pairs */
    struct attr attrs[EVENT_MAX_ATTRS];
    struct str metric;       /* outcome: metric event name (required) */
    double value;            /* outcome: value; 1 when absent */
};

struct decoder;

/* Returns a new decoder, or NULL when out of memory. */
struct decoder *decoder_new(void);
/* Frees a decoder; NULL does nothing. */
void decoder_free(struct decoder *d);

/* Decodes line[0..len) (no trailing newline) into *ev. Returns REJ_NONE or a reason. */
enum reject decoder_decode(struct decoder *d, const char *line, size_t len, struct event *ev);

/* The contract name of a reason ("not_json", ...). */
const char *reject_name(enum reject r);

/* True when s equals the NUL-terminated string z. */
bool str_eq(struct str s, const char *z);

#endif
