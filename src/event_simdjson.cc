/*
 * event_simdjson.cc — the event decoder of event.h on simdjson 3.0.1
 * (Debian's libsimdjson-dev).
 *
 * What it does: copies the line into a padded buffer it owns and has
 * simdjson parse it whole (stage 1 checks UTF-8 and control characters over
 * the line, stage 2 checks the grammar, every literal, number and escape,
 * the nesting and that nothing follows the object), then reads the fields of
 * the object, in the order of the reference decoder (event_jansson.c): kind,
 * time, unit, id, then exp, arm, attrs or metric, value. On the way it refuses
 * what RFC 8259 allows but the contract does not: a key repeated in any
 * object, and "\u0000" in any key or string.
 *
 * Why the DOM parser and not On-Demand: On-Demand is compiled into the
 * program for the instruction set the compiler targets (plain x86-64 here, so
 * its generic kernel), while the DOM parser runs in the shared library, which
 * picks the best kernel of the machine at run time (AVX-512 or AVX2). On this
 * kind of machine and these lines (about 125 bytes) the DOM parser decoded
 * 5.9–7.0M lines/s against 3.1–4.4M for On-Demand doing the same work, and it
 * validates the whole line by itself, which On-Demand leaves to the caller.
 *
 * Malformed lines: which reason a malformed line gets depends on which of its
 * faults comes first (a number that overflows before a syntax error is
 * not_finite, after it not_json; nesting deeper than 2048 is not_json). This
 * decoder does not re-derive that order: a line it cannot take whole — any
 * parse error, a repeated key, "\u0000", an integer beyond 64 bits, nesting
 * deeper than simdjson's 1024 levels, a byte-order mark — goes to the
 * reference decoder (event_ref.h), whose answer is returned as is. Such lines
 * are rare and the two decoders agree on them by construction;
 * tests/test_decoder_diff.c checks that they agree on everything else.
 *
 * What it must never do: allocate per event in steady state (the padded
 * buffer, the parser and the key stack grow to the longest line seen and are
 * reused), let a C++ exception cross into C (nothing here throws: simdjson's
 * error-code API only, nothrow new), or hand out strings that point into the
 * caller's line. An event's strings point into the parser's string buffer,
 * which this decoder owns, valid until its next decode (event.h).
 */
#include <simdjson.h>

#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <new>
#include <string_view>

extern "C" {
#include "event.h"
#include "event_ref.h"
#include "timefmt.h"
}

namespace dom = simdjson::dom;
using simdjson::dom::element_type;

/* The parser's first capacity (bytes of line); it grows for longer lines. */
static const size_t FIRST_CAPACITY = 64 * 1024;
/* Containers nested deeper than this inside unknown fields go to the
 * reference decoder; it bounds the recursion of check_keys. */
static const int FAST_MAX_DEPTH = 64;

struct decoder {
    dom::parser parser;
    char *pad = nullptr; /* the line, then SIMDJSON_PADDING spaces */
    size_t pad_cap = 0;
    std::string_view *keys = nullptr; /* keys of the objects being checked (a stack) */
    size_t n_keys = 0, keys_cap = 0;
    struct decoder_ref *ref = nullptr; /* names the reason of malformed lines */
    uint64_t slow = 0;                 /* lines handed to the reference decoder */
    struct time_day_cache days = {};   /* the day of the last date read */
};

/* The top-level fields the contract knows. */
enum fid { F_KIND, F_TIME, F_UNIT, F_ID, F_EXP, F_ARM, F_ATTRS, F_METRIC, F_VALUE, F_COUNT };

static int field_id(std::string_view k) noexcept
{
    switch (k.size()) {
    case 2: return k == "id" ? F_ID : -1;
    case 3: return k == "exp" ? F_EXP : k == "arm" ? F_ARM : -1;
    case 4: return k == "kind" ? F_KIND : k == "time" ? F_TIME : k == "unit" ? F_UNIT : -1;
    case 5: return k == "attrs" ? F_ATTRS : k == "value" ? F_VALUE : -1;
    case 6: return k == "metric" ? F_METRIC : -1;
    default: return -1;
    }
}

/* Pushes key k of the object whose keys start at keys[base]; false when it
 * repeats one of them (not_json), or out of memory. */
static bool push_key(struct decoder *d, size_t base, std::string_view k) noexcept
{
    for (size_t i = base; i < d->n_keys; i++)
        if (d->keys[i] == k)
            return false;
    if (d->n_keys == d->keys_cap) {
        size_t cap = d->keys_cap ? 2 * d->keys_cap : 64;
        void *nk = realloc(static_cast<void *>(d->keys), cap * sizeof *d->keys);
        if (!nk)
            return false;
        d->keys = static_cast<std::string_view *>(nk);
        d->keys_cap = cap;
    }
    d->keys[d->n_keys++] = k;
    return true;
}

/* Checks that no object inside e repeats a key (simdjson keeps both). */
static bool check_keys(struct decoder *d, dom::element e, int depth) noexcept
{
    switch (e.type()) {
    case element_type::OBJECT: {
        if (depth >= FAST_MAX_DEPTH)
            return false;
        size_t base = d->n_keys;
        dom::object o = e.get_object().value_unsafe();
        for (dom::key_value_pair kv : o)
            if (!push_key(d, base, kv.key) || !check_keys(d, kv.value, depth + 1))
                return false;
        d->n_keys = base;
        return true;
    }
    case element_type::ARRAY: {
        if (depth >= FAST_MAX_DEPTH)
            return false;
        dom::array a = e.get_array().value_unsafe();
        for (dom::element x : a)
            if (!check_keys(d, x, depth + 1))
                return false;
        return true;
    }
    default:
        return true;
    }
}

/* A number as the reference reads it: every number as a double (an integer
 * converts exactly as strtod rounds it: to nearest). */
static double number(dom::element e) noexcept
{
    switch (e.type()) {
    case element_type::INT64: return (double)e.get_int64().value_unsafe();
    case element_type::UINT64: return (double)e.get_uint64().value_unsafe();
    default: return e.get_double().value_unsafe();
    }
}

/* What one known field held. */
struct slot {
    element_type type;
    std::string_view s; /* when a string */
    double num;         /* when a number */
};

static bool is_number(element_type t) noexcept
{
    return t == element_type::INT64 || t == element_type::UINT64 || t == element_type::DOUBLE;
}

static struct str to_str(std::string_view s) noexcept
{
    return str{s.data(), (uint32_t)s.size()};
}

/* A required non-empty string field (the reference's get_str). */
static enum reject need_str(unsigned seen, const struct slot *f, int id, struct str *out) noexcept
{
    if (!(seen & (1u << id)))
        return REJ_MISSING_FIELD;
    if (f[id].type != element_type::STRING)
        return REJ_BAD_TYPE;
    if (f[id].s.empty())
        return REJ_MISSING_FIELD;
    *out = to_str(f[id].s);
    return REJ_NONE;
}

/* What "attrs" held when it was an object. */
struct attrs_seen {
    size_t n;        /* pairs */
    bool non_string; /* a value is not a string */
    struct attr a[EVENT_MAX_ATTRS];
};

/* The checks of the reference's decode_obj, in its order, on a well-formed line. */
static enum reject judge(unsigned seen, const struct slot *f, const struct attrs_seen *at,
                         struct time_day_cache *days, struct event *ev) noexcept
{
    enum reject r;
    if (!(seen & (1u << F_KIND)))
        return REJ_MISSING_FIELD;
    if (f[F_KIND].type != element_type::STRING)
        return REJ_BAD_TYPE;
    std::string_view k = f[F_KIND].s;
    if (k.empty())
        return REJ_MISSING_FIELD;
    if (k == "assign")
        ev->kind = EV_ASSIGN;
    else if (k == "outcome")
        ev->kind = EV_OUTCOME;
    else
        return REJ_UNKNOWN_KIND;

    if (!(seen & (1u << F_TIME)))
        return REJ_MISSING_FIELD;
    const struct slot *t = &f[F_TIME];
    if (t->type == element_type::STRING) {
        if (t->s.empty())
            return REJ_MISSING_FIELD;
        if (time_parse_rfc3339_cached(t->s.data(), t->s.size(), &ev->time_us, days))
            return REJ_BAD_TIME;
    } else if (is_number(t->type)) {
        if (time_from_epoch_ms(t->num, &ev->time_us))
            return REJ_BAD_TIME;
    } else {
        return REJ_BAD_TYPE;
    }

    if ((r = need_str(seen, f, F_UNIT, &ev->unit)))
        return r;
    if (seen & (1u << F_ID)) {
        if (f[F_ID].type != element_type::STRING)
            return REJ_BAD_TYPE;
        if (!f[F_ID].s.empty()) /* an empty id is no id */
            ev->id = to_str(f[F_ID].s);
    }
    if (ev->kind == EV_ASSIGN) {
        if ((r = need_str(seen, f, F_EXP, &ev->exp)) || (r = need_str(seen, f, F_ARM, &ev->arm)))
            return r;
        if (seen & (1u << F_ATTRS)) {
            if (f[F_ATTRS].type != element_type::OBJECT || at->n > EVENT_MAX_ATTRS || at->non_string)
                return REJ_BAD_TYPE;
            ev->n_attrs = (int)at->n;
            memcpy(ev->attrs, at->a, at->n * sizeof *at->a);
        }
    } else {
        if ((r = need_str(seen, f, F_METRIC, &ev->metric)))
            return r;
        if (seen & (1u << F_VALUE)) {
            if (!is_number(f[F_VALUE].type))
                return REJ_BAD_TYPE;
            ev->value = f[F_VALUE].num;
            if (!std::isfinite(ev->value))
                return REJ_NOT_FINITE;
        }
    }
    return REJ_NONE;
}

/* True when the line may hold a number token "-0" (a JSON integer: the parser
 * reads it as the integer 0 and loses the sign the reference keeps). Asked
 * only when "value" is an integer 0; strings may give false alarms. */
static bool may_hold_minus_zero(const char *p, size_t n) noexcept
{
    const char *end = p + n;
    for (const char *q = p; (q = static_cast<const char *>(memchr(q, '-', (size_t)(end - q)))); q++)
        if (end - q >= 2 && q[1] == '0' &&
            (end - q == 2 || !((q[2] >= '0' && q[2] <= '9') || q[2] == '.' || q[2] == 'e' || q[2] == 'E')))
            return true;
    return false;
}

/* The line in d->pad as one event; false when it is not a well-formed object
 * this decoder takes whole (the reference decoder then decides). */
static bool fast(struct decoder *d, size_t len, enum reject *r, struct event *ev) noexcept
{
    /* "\u0000" in a string or key: the reference refuses it, simdjson does not */
    if (memchr(d->pad, '\\', len) && memmem(d->pad, len, "\\u0000", 6))
        return false;
    dom::element root;
    if (d->parser.parse(d->pad, len, false).get(root) || root.type() != element_type::OBJECT)
        return false;
    struct slot f[F_COUNT];
    dom::object attrs;
    unsigned seen = 0;
    d->n_keys = 0;
    dom::object obj = root.get_object().value_unsafe();
    for (dom::key_value_pair kv : obj) {
        int id = field_id(kv.key);
        if (id < 0) {
            if (!push_key(d, 0, kv.key) || !check_keys(d, kv.value, 1))
                return false;
            continue;
        }
        if (seen & (1u << id))
            return false; /* a repeated key */
        seen |= 1u << id;
        struct slot *s = &f[id];
        s->type = kv.value.type();
        if (s->type == element_type::STRING)
            s->s = kv.value.get_string().value_unsafe();
        else if (is_number(s->type))
            s->num = number(kv.value);
        else if (!check_keys(d, kv.value, 1))
            return false;
        if (id == F_ATTRS && s->type == element_type::OBJECT)
            attrs = kv.value.get_object().value_unsafe();
    }
    struct attrs_seen at;
    at.n = 0;
    at.non_string = false;
    if (seen & (1u << F_ATTRS) && f[F_ATTRS].type == element_type::OBJECT) {
        for (dom::key_value_pair kv : attrs) {
            if (kv.value.type() != element_type::STRING)
                at.non_string = true;
            else if (at.n < EVENT_MAX_ATTRS)
                at.a[at.n] = attr{to_str(kv.key), to_str(kv.value.get_string().value_unsafe())};
            at.n++;
        }
    }
    if (seen & (1u << F_VALUE) && f[F_VALUE].type == element_type::INT64 && f[F_VALUE].num == 0 &&
        may_hold_minus_zero(d->pad, len))
        return false; /* the reference keeps the sign of "-0" */
    *r = judge(seen, f, &at, &d->days, ev);
    return true;
}

extern "C" struct decoder *decoder_new(void)
{
    struct decoder *d = new (std::nothrow) decoder();
    if (!d)
        return nullptr;
    if (!(d->ref = decoder_jansson_new()) || d->parser.allocate(FIRST_CAPACITY)) {
        decoder_free(d);
        return nullptr;
    }
    return d;
}

extern "C" void decoder_free(struct decoder *d)
{
    if (!d)
        return;
    decoder_jansson_free(d->ref);
    free(d->pad);
    free(static_cast<void *>(d->keys));
    delete d;
}

extern "C" uint64_t decoder_slow_lines(const struct decoder *d)
{
    return d->slow;
}

static void str_none(str &s) noexcept
{
    s.p = nullptr;
    s.n = 0;
}

/* What every decode starts from: no fields, value 1. The attrs array past
 * n_attrs is left as it is (512 bytes; only n_attrs pairs mean anything). */
static void ev_clear(struct event *ev) noexcept
{
    ev->kind = (enum ev_kind)0;
    ev->time_us = 0;
    /* each field on its own: a chained assignment reads each one back
     * (padding included) before the next store, and that read waits for
     * every older store to commit (a failed store-to-load forward), which
     * after a store that missed the cache took 35 ns a line */
    str_none(ev->unit);
    str_none(ev->id);
    str_none(ev->exp);
    str_none(ev->arm);
    str_none(ev->metric);
    ev->n_attrs = 0;
    ev->value = 1.0;
}

extern "C" enum reject decoder_decode(struct decoder *d, const char *line, size_t len,
                                      struct event *ev)
{
    ev_clear(ev);
    size_t i;
    enum reject pre = event_line_start(line, len, &i);
    if (pre != REJ_NONE)
        return pre;
    /* Only an object can be an event: a byte-order mark, an array or a bare
     * value goes to the reference decoder, whatever simdjson makes of it. */
    if (line[i] == '{') {
        size_t need = len + simdjson::SIMDJSON_PADDING;
        if (d->pad_cap < need) {
            size_t cap = need > 4096 ? need : 4096;
            char *np = static_cast<char *>(realloc(d->pad, cap));
            if (np) {
                d->pad = np;
                d->pad_cap = cap;
            }
        }
        if (d->pad_cap >= need) {
            memcpy(d->pad, line, len);
            memset(d->pad + len, ' ', simdjson::SIMDJSON_PADDING);
            enum reject r;
            if (fast(d, len, &r, ev))
                return r;
            ev_clear(ev);
        }
    }
    d->slow++;
    return decoder_jansson_decode(d->ref, line, len, ev);
}
