/*
 * event_jansson.c — the reference event decoder (event_ref.h) on Jansson.
 *
 * It defines the contract of event.h by example: the fast decoder
 * (event_simdjson.cc) must give the same reason and the same event for every
 * line, which tests/test_decoder_diff.c checks, and it hands the lines it
 * finds malformed to this decoder to name the reason. Speed does not matter
 * here; clarity does.
 *
 * Every string of the event is copied into the decoder's own buffer, so no
 * json_t outlives decoder_jansson_decode(). Integers are read as doubles
 * (JSON_DECODE_INT_AS_REAL) so that a huge integer is a number, not a syntax
 * error; times in epoch milliseconds must hold an integer value.
 * Duplicate keys make the line ambiguous and are rejected as not_json.
 */
#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "event_ref.h"
#include "timefmt.h"

struct decoder_ref {
    char *buf;  /* copies of the event's strings */
    size_t cap; /* bytes in buf */
    size_t len; /* bytes used */
};

struct decoder_ref *decoder_jansson_new(void)
{
    return calloc(1, sizeof(struct decoder_ref));
}

void decoder_jansson_free(struct decoder_ref *d)
{
    if (d) {
        free(d->buf);
        free(d);
    }
}

/* Copies a Jansson string into the decoder buffer (sized beforehand). */
static struct str keep(struct decoder_ref *d, const json_t *s)
{
    size_t n = json_string_length(s);
    struct str r = {d->buf + d->len, (uint32_t)n};
    memcpy(d->buf + d->len, json_string_value(s), n);
    d->len += n;
    return r;
}

/* Required non-empty string field. */
static enum reject get_str(struct decoder_ref *d, json_t *o, const char *k, struct str *out)
{
    json_t *v = json_object_get(o, k);
    if (!v)
        return REJ_MISSING_FIELD;
    if (!json_is_string(v))
        return REJ_BAD_TYPE;
    if (json_string_length(v) == 0)
        return REJ_MISSING_FIELD;
    *out = keep(d, v);
    return REJ_NONE;
}

static enum reject decode_time(json_t *t, int64_t *us)
{
    if (!t || (json_is_string(t) && json_string_length(t) == 0))
        return REJ_MISSING_FIELD;
    if (json_is_string(t))
        return time_parse_rfc3339(json_string_value(t), json_string_length(t), us) ? REJ_BAD_TIME
                                                                                  : REJ_NONE;
    if (json_is_number(t))
        return time_from_epoch_ms(json_number_value(t), us) ? REJ_BAD_TIME : REJ_NONE;
    return REJ_BAD_TYPE;
}

static enum reject decode_obj(struct decoder_ref *d, json_t *o, struct event *ev)
{
    enum reject r;
    json_t *kind = json_object_get(o, "kind");
    if (!kind)
        return REJ_MISSING_FIELD;
    if (!json_is_string(kind))
        return REJ_BAD_TYPE;
    if (json_string_length(kind) == 0)
        return REJ_MISSING_FIELD;
    const char *k = json_string_value(kind);
    if (!strcmp(k, "assign"))
        ev->kind = EV_ASSIGN;
    else if (!strcmp(k, "outcome"))
        ev->kind = EV_OUTCOME;
    else
        return REJ_UNKNOWN_KIND;
    if ((r = decode_time(json_object_get(o, "time"), &ev->time_us)))
        return r;
    if ((r = get_str(d, o, "unit", &ev->unit)))
        return r;
    json_t *id = json_object_get(o, "id");
    if (id) {
        if (!json_is_string(id))
            return REJ_BAD_TYPE;
        if (json_string_length(id)) /* an empty id is no id */
            ev->id = keep(d, id);
    }
    if (ev->kind == EV_ASSIGN) {
        if ((r = get_str(d, o, "exp", &ev->exp)) || (r = get_str(d, o, "arm", &ev->arm)))
            return r;
        json_t *attrs = json_object_get(o, "attrs");
        if (attrs) {
            if (!json_is_object(attrs) || json_object_size(attrs) > EVENT_MAX_ATTRS)
                return REJ_BAD_TYPE;
            const char *key;
            json_t *val;
            json_object_foreach(attrs, key, val)
            {
                if (!json_is_string(val))
                    return REJ_BAD_TYPE;
                struct attr *a = &ev->attrs[ev->n_attrs++];
                size_t kn = strlen(key);
                a->key = (struct str){d->buf + d->len, (uint32_t)kn};
                memcpy(d->buf + d->len, key, kn);
                d->len += kn;
                a->value = keep(d, val);
            }
        }
    } else {
        if ((r = get_str(d, o, "metric", &ev->metric)))
            return r;
        json_t *v = json_object_get(o, "value");
        if (v) {
            if (!json_is_number(v))
                return REJ_BAD_TYPE;
            ev->value = json_number_value(v);
            if (!isfinite(ev->value))
                return REJ_NOT_FINITE;
        }
    }
    return REJ_NONE;
}

enum reject decoder_jansson_decode(struct decoder_ref *d, const char *line, size_t len, struct event *ev)
{
    memset(ev, 0, sizeof *ev);
    ev->value = 1.0;
    size_t start;
    enum reject pre = event_line_start(line, len, &start);
    if (pre != REJ_NONE)
        return pre;
    /* Every string of the event is a substring of the line, so len bytes suffice. */
    if (d->cap < len + 1) {
        size_t cap = len + 1 > 4096 ? len + 1 : 4096;
        char *nb = realloc(d->buf, cap);
        if (!nb)
            return REJ_TOO_LONG;
        d->buf = nb;
        d->cap = cap;
    }
    d->len = 0;
    json_error_t je;
    json_t *o = json_loadb(line, len, JSON_DECODE_INT_AS_REAL | JSON_REJECT_DUPLICATES, &je);
    if (!o) {
        /* Jansson reports an out-of-range number as a syntax error. */
        if (strstr(je.text, "overflow"))
            return REJ_NOT_FINITE;
        return REJ_NOT_JSON;
    }
    enum reject r = json_is_object(o) ? decode_obj(d, o, ev) : REJ_NOT_JSON;
    json_decref(o);
    return r;
}
