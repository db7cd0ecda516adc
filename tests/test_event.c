/*
 * test_event.c — the event decoder (event.h) and event times (timefmt.h).
 *
 * Every rejection reason of DESIGN.md ("Events") is provoked by a table of
 * lines; valid events of both kinds are read back field by field. Each line
 * is handed to the decoder in a heap buffer of exactly its length (no NUL
 * after it), so a read past the end shows up under AddressSanitizer.
 *
 * Tables write JSON with ' for " to stay readable; quote() turns every ' into
 * a " before decoding (no case needs a literal ').
 *
 * Expected epoch values come from Python's datetime, never from abtally; the
 * call that produced each one is written beside it. RFC 3339 §5.8's examples
 * are checked as printed in the RFC. abtally reads a leap second ":60" as the
 * first second of the next minute (timefmt.h), so 1990-12-31T23:59:60Z is
 * expected to equal 1991-01-01T00:00:00Z; Python cannot represent second 60,
 * so those values are computed as "second 59, plus one".
 */
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "helpers.h"
#include "event.h"
#include "source.h"
#include "timefmt.h"

/* ---------------------------------------------------------------- helpers */

/* A heap copy of s[0..n) with every ' turned into ", and no NUL after it. */
static char *quote(const char *s, size_t n)
{
    char *b = malloc(n ? n : 1);
    assert_non_null(b);
    for (size_t i = 0; i < n; i++)
        b[i] = s[i] == '\'' ? '"' : s[i];
    return b;
}

struct line_case {
    const char *name;  /* what the case shows */
    const char *line;  /* JSON with ' for " */
    enum reject want;  /* expected reason (REJ_NONE: accepted) */
};

/* Decodes each case; reports every mismatch, then fails once if any. */
static void run_cases(struct decoder *d, const struct line_case *c, size_t n)
{
    int failures = 0;
    for (size_t i = 0; i < n; i++) {
        size_t len = strlen(c[i].line);
        char *b = quote(c[i].line, len);
        struct event ev;
        enum reject got = decoder_decode(d, b, len, &ev);
        free(b);
        if (got != c[i].want) {
            print_error("case '%s': got %s, expected %s\n    line: %s\n", c[i].name,
                        reject_name(got), reject_name(c[i].want), c[i].line);
            failures++;
        }
    }
    if (failures)
        fail_msg("%d of %zu cases failed", failures, n);
}

/* Decodes a raw byte string (no quote translation) of length n. */
static enum reject decode_raw(struct decoder *d, const char *s, size_t n, struct event *ev)
{
    char *b = malloc(n ? n : 1);
    assert_non_null(b);
    memcpy(b, s, n);
    enum reject r = decoder_decode(d, b, n, ev);
    free(b);
    return r;
}

static void assert_str(struct str s, const char *want)
{
    if (!str_eq(s, want))
        fail_msg("string is '%.*s' (%u bytes), expected '%s'", s.p ? (int)s.n : 6,
                 s.p ? s.p : "(null)", s.n, want);
}

static int setup(void **state)
{
    *state = decoder_new();
    return *state ? 0 : -1;
}

static int teardown(void **state)
{
    decoder_free(*state);
    return 0;
}

/* Lines used across the tables (names invented for these tests). */
#define ASSIGN_T(t) "{'kind':'assign','time':" t ",'unit':'u-ferret-01','exp':'lamp-shop-banner','arm':'treatment'}"
#define OUTCOME_V(v) "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u-ferret-01','metric':'basket_value','value':" v "}"
#define ASSIGN_OK ASSIGN_T("'2026-11-03T10:15:02.123Z'")
#define OUTCOME_OK OUTCOME_V("42.5")

/* ------------------------------------------------------------ rejections */

static void test_event__not_json(void **state)
{
    static const struct line_case cases[] = {
        {"plain words", "hello, abtally", REJ_NOT_JSON},
        {"truncated object", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1'", REJ_NOT_JSON},
        {"truncated in a string", "{'kind':'assign','time':'2026-11-03T10:15", REJ_NOT_JSON},
        {"only an opening brace", "{", REJ_NOT_JSON},
        {"a JSON array", "[1,2,3]", REJ_NOT_JSON},
        {"an event inside an array", "[" ASSIGN_OK "]", REJ_NOT_JSON},
        {"a JSON string", "'assign'", REJ_NOT_JSON},
        {"a JSON number", "42", REJ_NOT_JSON},
        {"JSON null", "null", REJ_NOT_JSON},
        {"JSON true", "true", REJ_NOT_JSON},
        {"duplicate key, same value",
         "{'kind':'assign','kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}",
         REJ_NOT_JSON},
        {"duplicate key, other value",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','unit':'u2','exp':'e','arm':'a'}",
         REJ_NOT_JSON},
        {"duplicate key inside attrs",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a',"
         "'attrs':{'platform':'ios','platform':'web'}}",
         REJ_NOT_JSON},
        {"trailing garbage", ASSIGN_OK " x", REJ_NOT_JSON},
        {"two objects on one line", ASSIGN_OK ASSIGN_OK, REJ_NOT_JSON},
        {"trailing comma", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a',}",
         REJ_NOT_JSON},
        {"NaN is not JSON", OUTCOME_V("NaN"), REJ_NOT_JSON},
        {"Infinity is not JSON", OUTCOME_V("Infinity"), REJ_NOT_JSON},
        {"raw tab inside a string", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u\t1','exp':'e','arm':'a'}",
         REJ_NOT_JSON},
        /* invalid UTF-8 (RFC 8259 §8.1 requires UTF-8): */
        {"invalid UTF-8: lone 0xff", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u\xff','exp':'e','arm':'a'}",
         REJ_NOT_JSON},
        {"invalid UTF-8: stray continuation byte",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u\x80','exp':'e','arm':'a'}", REJ_NOT_JSON},
        {"invalid UTF-8: overlong '/'", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u\xc0\xaf','exp':'e','arm':'a'}",
         REJ_NOT_JSON},
        {"invalid UTF-8: encoded surrogate",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u\xed\xa0\x80','exp':'e','arm':'a'}", REJ_NOT_JSON},
        {"invalid UTF-8: cut multi-byte sequence",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u\xe2\x82','exp':'e','arm':'a'}", REJ_NOT_JSON},
        {"invalid UTF-8 in a key", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','\xfe':'x'}",
         REJ_NOT_JSON},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
    /* single quotes are not JSON (written raw: quote() would turn them into ") */
    struct event ev;
    static const char sq[] = "{'kind':'assign'}";
    assert_int_equal(decode_raw(*state, sq, strlen(sq), &ev), REJ_NOT_JSON);
    /* a NUL byte after the object, inside the given length */
    static const char nul[] = "{\"kind\":\"assign\"}\0";
    assert_int_equal(decode_raw(*state, nul, sizeof nul - 1, &ev), REJ_NOT_JSON);
}

static void test_event__missing_field(void **state)
{
    static const struct line_case cases[] = {
        /* assign: kind, time, unit, exp, arm are required */
        {"assign without kind", "{'time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}", REJ_MISSING_FIELD},
        {"assign without time", "{'kind':'assign','unit':'u1','exp':'e','arm':'a'}", REJ_MISSING_FIELD},
        {"assign without unit", "{'kind':'assign','time':'2026-11-03T10:15:02Z','exp':'e','arm':'a'}", REJ_MISSING_FIELD},
        {"assign without exp", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','arm':'a'}", REJ_MISSING_FIELD},
        {"assign without arm", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e'}", REJ_MISSING_FIELD},
        {"assign with empty unit", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'','exp':'e','arm':'a'}",
         REJ_MISSING_FIELD},
        {"assign with empty exp", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'','arm':'a'}",
         REJ_MISSING_FIELD},
        {"assign with empty arm", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':''}",
         REJ_MISSING_FIELD},
        /* outcome: kind, time, unit, metric are required; value is optional */
        {"outcome without kind", "{'time':'2026-11-03T10:21:40Z','unit':'u1','metric':'m','value':2}", REJ_MISSING_FIELD},
        {"outcome without time", "{'kind':'outcome','unit':'u1','metric':'m','value':2}", REJ_MISSING_FIELD},
        {"outcome without unit", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','metric':'m','value':2}", REJ_MISSING_FIELD},
        {"outcome without metric", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u1','value':2}", REJ_MISSING_FIELD},
        {"outcome with empty unit", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'','metric':'m'}",
         REJ_MISSING_FIELD},
        {"outcome with empty metric", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u1','metric':''}",
         REJ_MISSING_FIELD},
        {"empty object", "{}", REJ_MISSING_FIELD},
        /* an assignment's fields do not satisfy an outcome, nor the reverse */
        {"outcome carrying exp and arm only", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u1','exp':'e','arm':'a'}",
         REJ_MISSING_FIELD},
        {"assign carrying metric only", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','metric':'m'}",
         REJ_MISSING_FIELD},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
}

/*
 * event.h: REJ_MISSING_FIELD is "a required field is absent or an empty
 * string", and kind and time are required fields of both kinds.
 */
static void test_event__empty_kind_and_time_are_missing(void **state)
{
    static const struct line_case cases[] = {
        {"assign with empty kind", "{'kind':'','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}",
         REJ_MISSING_FIELD},
        {"assign with empty time", "{'kind':'assign','time':'','unit':'u1','exp':'e','arm':'a'}", REJ_MISSING_FIELD},
        {"outcome with empty time", "{'kind':'outcome','time':'','unit':'u1','metric':'m'}", REJ_MISSING_FIELD},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
}

static void test_event__bad_type(void **state)
{
    static const struct line_case cases[] = {
        {"kind a number", "{'kind':1,'time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}", REJ_BAD_TYPE},
        {"kind an array", "{'kind':['assign'],'time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}", REJ_BAD_TYPE},
        {"time a boolean", ASSIGN_T("true"), REJ_BAD_TYPE},
        {"time an object", ASSIGN_T("{'iso':'2026-11-03T10:15:02Z'}"), REJ_BAD_TYPE},
        {"time an array", ASSIGN_T("[2026,11,3]"), REJ_BAD_TYPE},
        {"unit a number", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':12345,'exp':'e','arm':'a'}", REJ_BAD_TYPE},
        {"unit an object", "{'kind':'outcome','time':'2026-11-03T10:15:02Z','unit':{'id':'u1'},'metric':'m'}", REJ_BAD_TYPE},
        {"exp a number", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':7,'arm':'a'}", REJ_BAD_TYPE},
        {"arm a boolean", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':false}", REJ_BAD_TYPE},
        {"assign id a number", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','id':7}",
         REJ_BAD_TYPE},
        {"outcome id an array", "{'kind':'outcome','time':'2026-11-03T10:15:02Z','unit':'u1','metric':'m','id':['o-7']}",
         REJ_BAD_TYPE},
        {"metric a number", "{'kind':'outcome','time':'2026-11-03T10:15:02Z','unit':'u1','metric':3}", REJ_BAD_TYPE},
        {"value a string", OUTCOME_V("'42.5'"), REJ_BAD_TYPE},
        {"value a boolean", OUTCOME_V("true"), REJ_BAD_TYPE},
        {"value null", OUTCOME_V("null"), REJ_BAD_TYPE},
        {"value an array", OUTCOME_V("[1]"), REJ_BAD_TYPE},
        {"value an object", OUTCOME_V("{'v':1}"), REJ_BAD_TYPE},
        {"attrs a string", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','attrs':'ios'}",
         REJ_BAD_TYPE},
        {"attrs an array", "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','attrs':['ios']}",
         REJ_BAD_TYPE},
        {"attrs with a number value",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','attrs':{'platform':'ios','age':31}}",
         REJ_BAD_TYPE},
        {"attrs with a null value",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','attrs':{'platform':null}}",
         REJ_BAD_TYPE},
        {"attrs with a boolean value",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','attrs':{'beta':true}}",
         REJ_BAD_TYPE},
        {"attrs with a nested object",
         "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a','attrs':{'geo':{'c':'NZ'}}}",
         REJ_BAD_TYPE},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
}

/* Builds an assignment with k attrs pairs a0..a{k-1}. */
static char *assign_with_attrs(int k, size_t *len)
{
    size_t cap = 256 + (size_t)k * 32;
    char *b = malloc(cap);
    assert_non_null(b);
    int n = snprintf(b, cap,
                     "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\","
                     "\"exp\":\"e\",\"arm\":\"a\",\"attrs\":{");
    for (int i = 0; i < k; i++)
        n += snprintf(b + n, cap - (size_t)n, "%s\"a%d\":\"v%d\"", i ? "," : "", i, i * 7);
    n += snprintf(b + n, cap - (size_t)n, "}}");
    *len = (size_t)n;
    return b;
}

static void test_event__attrs_limit(void **state)
{
    struct event ev;
    size_t len;
    char *b = assign_with_attrs(EVENT_MAX_ATTRS, &len);
    assert_int_equal(decode_raw(*state, b, len, &ev), REJ_NONE);
    assert_int_equal(ev.n_attrs, EVENT_MAX_ATTRS);
    free(b);
    /* event.h: more than EVENT_MAX_ATTRS pairs is bad_type */
    b = assign_with_attrs(EVENT_MAX_ATTRS + 1, &len);
    assert_int_equal(decode_raw(*state, b, len, &ev), REJ_BAD_TYPE);
    free(b);
    /* an empty attrs object is no attrs */
    static const char empty[] =
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"e\",\"arm\":\"a\",\"attrs\":{}}";
    assert_int_equal(decode_raw(*state, empty, strlen(empty), &ev), REJ_NONE);
    assert_int_equal(ev.n_attrs, 0);
}

static void test_event__unknown_kind(void **state)
{
    static const struct line_case cases[] = {
        {"exposure", "{'kind':'exposure','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}", REJ_UNKNOWN_KIND},
        {"capitalised", "{'kind':'Assign','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}", REJ_UNKNOWN_KIND},
        {"trailing space", "{'kind':'assign ','time':'2026-11-03T10:15:02Z','unit':'u1','exp':'e','arm':'a'}", REJ_UNKNOWN_KIND},
        {"plural", "{'kind':'outcomes','time':'2026-11-03T10:21:40Z','unit':'u1','metric':'m'}", REJ_UNKNOWN_KIND},
        {"prefix", "{'kind':'out','time':'2026-11-03T10:21:40Z','unit':'u1','metric':'m'}", REJ_UNKNOWN_KIND},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
}

static void test_event__bad_time(void **state)
{
    static const struct line_case cases[] = {
        {"February 30", ASSIGN_T("'2026-02-30T10:15:02Z'"), REJ_BAD_TIME},
        {"February 29 of a common year", ASSIGN_T("'2026-02-29T10:15:02Z'"), REJ_BAD_TIME},
        {"February 29, 1900 (not a leap year)", ASSIGN_T("'1900-02-29T00:00:00Z'"), REJ_BAD_TIME},
        {"April 31", ASSIGN_T("'2026-04-31T00:00:00Z'"), REJ_BAD_TIME},
        {"month 13", ASSIGN_T("'2026-13-01T00:00:00Z'"), REJ_BAD_TIME},
        {"month 00", ASSIGN_T("'2026-00-10T00:00:00Z'"), REJ_BAD_TIME},
        {"day 00", ASSIGN_T("'2026-11-00T00:00:00Z'"), REJ_BAD_TIME},
        {"hour 24", ASSIGN_T("'2026-11-03T24:00:00Z'"), REJ_BAD_TIME},
        {"minute 60", ASSIGN_T("'2026-11-03T10:60:00Z'"), REJ_BAD_TIME},
        {"second 61", ASSIGN_T("'2026-11-03T10:15:61Z'"), REJ_BAD_TIME},
        {"offset hour 24", ASSIGN_T("'2026-11-03T10:15:02+24:00'"), REJ_BAD_TIME},
        {"offset minute 60", ASSIGN_T("'2026-11-03T10:15:02+08:60'"), REJ_BAD_TIME},
        {"offset without colon", ASSIGN_T("'2026-11-03T10:15:02+0800'"), REJ_BAD_TIME},
        {"offset hours only", ASSIGN_T("'2026-11-03T10:15:02+08'"), REJ_BAD_TIME},
        {"offset with seconds", ASSIGN_T("'2026-11-03T10:15:02+08:00:00'"), REJ_BAD_TIME},
        {"no offset", ASSIGN_T("'2026-11-03T10:15:02'"), REJ_BAD_TIME},
        {"date only", ASSIGN_T("'2026-11-03'"), REJ_BAD_TIME},
        {"no seconds", ASSIGN_T("'2026-11-03T10:15Z'"), REJ_BAD_TIME},
        {"empty fraction", ASSIGN_T("'2026-11-03T10:15:02.Z'"), REJ_BAD_TIME},
        {"text after Z", ASSIGN_T("'2026-11-03T10:15:02Zjunk'"), REJ_BAD_TIME},
        {"slashes", ASSIGN_T("'2026/11/03T10:15:02Z'"), REJ_BAD_TIME},
        {"two-digit year", ASSIGN_T("'26-11-03T10:15:02Z'"), REJ_BAD_TIME},
        {"five-digit year", ASSIGN_T("'10000-01-01T00:00:00Z'"), REJ_BAD_TIME},
        {"X for T", ASSIGN_T("'2026-11-03X10:15:02Z'"), REJ_BAD_TIME},
        {"one-digit hour", ASSIGN_T("'2026-11-03T9:15:02Z'"), REJ_BAD_TIME},
        {"leading space", ASSIGN_T("' 2026-11-03T10:15:02Z'"), REJ_BAD_TIME},
        {"year 1899 (before 1900)", ASSIGN_T("'1899-12-31T23:59:59Z'"), REJ_BAD_TIME},
        {"year 0000", ASSIGN_T("'0000-01-01T00:00:00Z'"), REJ_BAD_TIME},
        {"1900-01-01 00:00 +01:00 is 1899 in UTC", ASSIGN_T("'1900-01-01T00:00:00+01:00'"), REJ_BAD_TIME},
        {"9999-12-31 23:00 -01:00 is year 10000 in UTC", ASSIGN_T("'9999-12-31T23:00:00-01:00'"), REJ_BAD_TIME},
        {"digits in a string", ASSIGN_T("'1793700902123'"), REJ_BAD_TIME},
        /* epoch milliseconds must be an integer in 1900..9999 */
        {"fractional epoch ms", ASSIGN_T("1793700902123.5"), REJ_BAD_TIME},
        {"fractional epoch ms 0.25", ASSIGN_T("0.25"), REJ_BAD_TIME},
        /* python3 -c "from datetime import *; print((datetime(1900,1,1,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(milliseconds=1))"
           → -2208988800000 */
        {"epoch ms 1 ms before 1900", ASSIGN_T("-2208988800001"), REJ_BAD_TIME},
        /* python3 -c "from datetime import *; print((datetime(9999,12,31,23,59,59,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(milliseconds=1))"
           → 253402300799000; 10000-01-01 is 1000 ms later */
        {"epoch ms in year 10000", ASSIGN_T("253402300800000"), REJ_BAD_TIME},
        {"epoch ms far out, finite", ASSIGN_T("1e300"), REJ_BAD_TIME},
        {"outcome with Feb 30", "{'kind':'outcome','time':'2026-02-30T10:21:40Z','unit':'u1','metric':'m'}", REJ_BAD_TIME},
        {"outcome with fractional ms", "{'kind':'outcome','time':1793700902123.001,'unit':'u1','metric':'m'}", REJ_BAD_TIME},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
}

static void test_event__not_finite(void **state)
{
    static const struct line_case cases[] = {
        {"1e400", OUTCOME_V("1e400"), REJ_NOT_FINITE},
        {"-1e400", OUTCOME_V("-1e400"), REJ_NOT_FINITE},
        {"1.8e308 (just above DBL_MAX)", OUTCOME_V("1.8e308"), REJ_NOT_FINITE},
        {"a 400-digit integer",
         OUTCOME_V("1000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000"
                   "0000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000"
                   "0000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000"
                   "0000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000"),
         REJ_NOT_FINITE},
        /* finite extremes are values, not rejections */
        {"1.7e308 is finite", OUTCOME_V("1.7e308"), REJ_NONE},
        {"1e-300 is finite", OUTCOME_V("1e-300"), REJ_NONE},
        {"a 20-digit integer is finite", OUTCOME_V("12345678901234567890"), REJ_NONE},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
}

static void test_event__empty_line(void **state)
{
    static const struct line_case cases[] = {
        {"nothing", "", REJ_EMPTY},
        {"one space", " ", REJ_EMPTY},
        {"one tab", "\t", REJ_EMPTY},
        {"spaces and tabs", "  \t \t  ", REJ_EMPTY},
        {"a lone CR", "\r", REJ_EMPTY},
        {"blanks and CR", " \t \r", REJ_EMPTY},
    };
    run_cases(*state, cases, sizeof cases / sizeof cases[0]);
}

static void test_event__too_long_in_decoder(void **state)
{
    /* a valid assignment padded with JSON whitespace to exactly the limit: accepted */
    static const char base[] =
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"e\",\"arm\":\"a\"}";
    size_t n = EVENT_MAX_LINE + 1;
    char *b = malloc(n);
    assert_non_null(b);
    memcpy(b, base, strlen(base));
    memset(b + strlen(base), ' ', n - strlen(base));
    struct event ev;
    assert_int_equal(decoder_decode(*state, b, EVENT_MAX_LINE, &ev), REJ_NONE);
    assert_int_equal(ev.kind, EV_ASSIGN);
    assert_str(ev.unit, "u1");
    /* one byte more: too_long */
    assert_int_equal(decoder_decode(*state, b, EVENT_MAX_LINE + 1, &ev), REJ_TOO_LONG);
    free(b);
}

/* Writes bytes to a fresh temporary file; returns its path (caller frees and unlinks). */
static char *temp_file(const char *data, size_t n)
{
    const char *dir = getenv("TMPDIR");
    char *path;
    assert_true(asprintf(&path, "%s/abtally-test-event-XXXXXX", dir && *dir ? dir : "/tmp") > 0);
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    size_t off = 0;
    while (off < n) {
        ssize_t w = write(fd, data + off, n - off);
        assert_true(w > 0);
        off += (size_t)w;
    }
    assert_int_equal(close(fd), 0);
    return path;
}

/*
 * A line over EVENT_MAX_LINE read through the line reader (source.h) comes
 * flagged too long (the engine records it as too_long without decoding it);
 * the lines around it decode normally and keep their numbers.
 */
static void test_event__too_long_through_source(void **state)
{
    static const char first[] =
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u-otter-07\",\"exp\":\"e\",\"arm\":\"a\"}";
    static const char last[] =
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:00:00Z\",\"unit\":\"u-otter-07\",\"metric\":\"m\",\"value\":3.25}";
    size_t long_len = EVENT_MAX_LINE + 4096; /* valid JSON, padded past the limit */
    size_t total = sizeof first + long_len + 1 + sizeof last;
    char *data = malloc(total);
    assert_non_null(data);
    size_t off = 0;
    memcpy(data, first, sizeof first - 1);
    off += sizeof first - 1;
    data[off++] = '\n';
    memcpy(data + off, first, sizeof first - 1);
    memset(data + off + sizeof first - 1, ' ', long_len - (sizeof first - 1));
    char *long_line = data + off;
    off += long_len;
    data[off++] = '\n';
    memcpy(data + off, last, sizeof last - 1);
    off += sizeof last - 1;
    data[off++] = '\n';
    char *path = temp_file(data, off);

    struct err e;
    err_clear(&e);
    struct source *s = source_open(path, &e);
    assert_non_null(s);
    const char *line;
    size_t len;
    bool too_long;
    struct event ev;

    assert_int_equal(source_next(s, &line, &len, &too_long, &e), 1);
    assert_false(too_long);
    assert_int_equal(source_line(s), 1);
    assert_int_equal(decoder_decode(*state, line, len, &ev), REJ_NONE);

    assert_int_equal(source_next(s, &line, &len, &too_long, &e), 1);
    assert_true(too_long);
    assert_int_equal(source_line(s), 2);
    assert_true(len <= long_len);
    assert_memory_equal(line, long_line, len);
    /* the same line handed whole to the decoder is too_long as well */
    assert_int_equal(decoder_decode(*state, long_line, long_len, &ev), REJ_TOO_LONG);
    assert_string_equal(reject_name(REJ_TOO_LONG), "too_long");

    assert_int_equal(source_next(s, &line, &len, &too_long, &e), 1);
    assert_false(too_long);
    assert_int_equal(source_line(s), 3);
    assert_int_equal(decoder_decode(*state, line, len, &ev), REJ_NONE);
    assert_int_equal(ev.kind, EV_OUTCOME);
    assert_rel_close(ev.value, 3.25, 0);

    assert_int_equal(source_next(s, &line, &len, &too_long, &e), 0);
    source_close(s);
    unlink(path);
    free(path);
    free(data);
}

static void test_event__reject_names(void **state)
{
    (void)state;
    /* the names are part of the output contract (DESIGN.md, "Events" and "Output") */
    static const struct {
        enum reject r;
        const char *name;
    } names[] = {
        {REJ_NOT_JSON, "not_json"},         {REJ_MISSING_FIELD, "missing_field"},
        {REJ_BAD_TYPE, "bad_type"},         {REJ_UNKNOWN_KIND, "unknown_kind"},
        {REJ_BAD_TIME, "bad_time"},         {REJ_NOT_FINITE, "not_finite"},
        {REJ_TOO_LONG, "too_long"},         {REJ_UNKNOWN_ARM, "unknown_arm"},
        {REJ_EMPTY, "empty_line"},
    };
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        assert_string_equal(reject_name(names[i].r), names[i].name);
    /* every reason has a distinct name */
    for (int i = 1; i < REJ_COUNT; i++)
        for (int j = i + 1; j < REJ_COUNT; j++)
            assert_string_not_equal(reject_name((enum reject)i), reject_name((enum reject)j));
}

/* ---------------------------------------------------------- valid events */

/* Looks an attrs value up by key (the order of pairs is not part of the contract). */
static const struct attr *find_attr(const struct event *ev, const char *key)
{
    for (int i = 0; i < ev->n_attrs; i++)
        if (str_eq(ev->attrs[i].key, key))
            return &ev->attrs[i];
    return NULL;
}

static void test_event__assign_fields(void **state)
{
    static const char line[] = "{'kind':'assign','time':'2026-11-03T10:15:02.123Z','unit':'u00012345',"
                               "'exp':'lamp-shop-banner','arm':'treatment','id':'a-1',"
                               "'attrs':{'platform':'ios','country':'NZ','tier':'gold'}}";
    char *b = quote(line, strlen(line));
    struct event ev;
    assert_int_equal(decoder_decode(*state, b, strlen(line), &ev), REJ_NONE);
    free(b);
    assert_int_equal(ev.kind, EV_ASSIGN);
    /* python3 -c "from datetime import *; print((datetime(2026,11,3,10,15,2,123000,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
       → 1793700902123000 */
    assert_int_equal(ev.time_us, INT64_C(1793700902123000));
    assert_str(ev.unit, "u00012345");
    assert_str(ev.exp, "lamp-shop-banner");
    assert_str(ev.arm, "treatment");
    assert_str(ev.id, "a-1");
    assert_null(ev.metric.p);
    assert_int_equal(ev.n_attrs, 3);
    const struct attr *a;
    assert_non_null(a = find_attr(&ev, "platform"));
    assert_str(a->value, "ios");
    assert_non_null(a = find_attr(&ev, "country"));
    assert_str(a->value, "NZ");
    assert_non_null(a = find_attr(&ev, "tier"));
    assert_str(a->value, "gold");
    assert_null(find_attr(&ev, "plat"));
}

static void test_event__outcome_fields(void **state)
{
    static const struct {
        const char *name;
        const char *line;
        int64_t time_us;
        const char *id; /* NULL: absent */
        double value;
    } cases[] = {
        /* python3 -c "from datetime import *; print((datetime(2026,11,3,10,21,40,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
           → 1793701300000000 */
        {"value and id", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u00012345','metric':'basket_value',"
                         "'value':42.5,'id':'o-7'}",
         INT64_C(1793701300000000), "o-7", 42.5},
        {"value absent is 1, id absent",
         "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u00012345','metric':'basket_value'}",
         INT64_C(1793701300000000), NULL, 1.0},
        {"value 0", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u00012345','metric':'basket_value','value':0}",
         INT64_C(1793701300000000), NULL, 0.0},
        {"negative value", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u00012345','metric':'basket_value',"
                           "'value':-3.0625}",
         INT64_C(1793701300000000), NULL, -3.0625},
        {"integer value", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u00012345','metric':'basket_value',"
                          "'value':7}",
         INT64_C(1793701300000000), NULL, 7.0},
        {"exponent value", "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u00012345','metric':'basket_value',"
                           "'value':2.385e-3}",
         INT64_C(1793701300000000), NULL, 2.385e-3},
        /* epoch milliseconds: 1793701300000 ms is the same instant as above */
        {"epoch ms time", "{'kind':'outcome','time':1793701300000,'unit':'u00012345','metric':'basket_value','value':42.5}",
         INT64_C(1793701300000000), NULL, 42.5},
        /* python3 -c "from datetime import *; print((datetime(1969,12,31,23,59,59,999000,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
           → -1000 */
        {"negative epoch ms", "{'kind':'outcome','time':-1,'unit':'u00012345','metric':'basket_value'}", INT64_C(-1000),
         NULL, 1.0},
        {"epoch ms with exponent", "{'kind':'outcome','time':1.7937013e12,'unit':'u00012345','metric':'basket_value'}",
         INT64_C(1793701300000000), NULL, 1.0},
    };
    int failures = 0;
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        size_t len = strlen(cases[i].line);
        char *b = quote(cases[i].line, len);
        struct event ev;
        enum reject r = decoder_decode(*state, b, len, &ev);
        free(b);
        int ok = r == REJ_NONE && ev.kind == EV_OUTCOME && ev.time_us == cases[i].time_us &&
                 str_eq(ev.unit, "u00012345") && str_eq(ev.metric, "basket_value") &&
                 ev.value == cases[i].value && ev.n_attrs == 0 && ev.exp.p == NULL && ev.arm.p == NULL &&
                 (cases[i].id ? str_eq(ev.id, cases[i].id) : ev.id.p == NULL);
        if (!ok) {
            print_error("case '%s': reason %s, time %lld, value %.17g\n", cases[i].name, reject_name(r),
                        (long long)ev.time_us, ev.value);
            failures++;
        }
    }
    if (failures)
        fail_msg("%d outcome cases failed", failures);
}

/* JSON escapes are decoded; a \u0000-free string with escapes keeps its bytes. */
static void test_event__string_escapes(void **state)
{
    static const char line[] = "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\","
                               "\"unit\":\"u\\u00e9\\\"x\\\\y\",\"exp\":\"caf\xc3\xa9-banner\",\"arm\":\"b\\/c\"}";
    struct event ev;
    assert_int_equal(decode_raw(*state, line, strlen(line), &ev), REJ_NONE);
    assert_str(ev.unit, "u\xc3\xa9\"x\\y");
    assert_str(ev.exp, "caf\xc3\xa9-banner");
    assert_str(ev.arm, "b/c");
}

/*
 * event.h: strings point into memory the decoder owns, valid until the next
 * decode — not into the caller's line. The line is freed right after decoding.
 * A second decode resets every optional field.
 */
static void test_event__strings_owned_and_reset(void **state)
{
    static const char line1[] = "{'kind':'assign','time':'2026-11-03T10:15:02Z','unit':'u-heron-3','exp':'lamp-shop-banner',"
                                "'arm':'control','id':'a-99','attrs':{'platform':'web'}}";
    struct event ev;
    char *b = quote(line1, strlen(line1));
    assert_int_equal(decoder_decode(*state, b, strlen(line1), &ev), REJ_NONE);
    memset(b, 'X', strlen(line1));
    free(b);
    assert_str(ev.unit, "u-heron-3");
    assert_str(ev.exp, "lamp-shop-banner");
    assert_str(ev.arm, "control");
    assert_str(ev.id, "a-99");
    assert_int_equal(ev.n_attrs, 1);
    assert_str(ev.attrs[0].key, "platform");
    assert_str(ev.attrs[0].value, "web");

    static const char line2[] = "{'kind':'outcome','time':'2026-11-03T10:21:40Z','unit':'u2','metric':'m'}";
    b = quote(line2, strlen(line2));
    assert_int_equal(decoder_decode(*state, b, strlen(line2), &ev), REJ_NONE);
    free(b);
    assert_null(ev.id.p);
    assert_null(ev.exp.p);
    assert_null(ev.arm.p);
    assert_int_equal(ev.n_attrs, 0);
    assert_rel_close(ev.value, 1.0, 0);
    assert_str(ev.unit, "u2");
}

/* The decoder reads only len bytes: what follows them in memory is not part of the line. */
static void test_event__respects_length(void **state)
{
    static const char two[] = "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":\"u1\",\"metric\":\"m\"}"
                              "GARBAGE";
    struct event ev;
    assert_int_equal(decode_raw(*state, two, strlen(two) - strlen("GARBAGE"), &ev), REJ_NONE);
    assert_int_equal(decode_raw(*state, two, strlen(two), &ev), REJ_NOT_JSON);
}

static void test_event__str_eq(void **state)
{
    (void)state;
    struct str s = {"unit-42xyz", 7};
    assert_true(str_eq(s, "unit-42"));
    assert_false(str_eq(s, "unit-4"));
    assert_false(str_eq(s, "unit-42x"));
    struct str none = {NULL, 0};
    assert_false(str_eq(none, ""));
}

/* ------------------------------------------------------------------ times */

/* RFC 3339 §5.8 examples, parsed from exact-length buffers. */
static void test_event__time_rfc3339_examples(void **state)
{
    (void)state;
    static const struct {
        const char *text;
        int64_t us;
    } ex[] = {
        /* python3 -c "from datetime import *; print((datetime(1985,4,12,23,20,50,520000,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
           → 482196050520000 */
        {"1985-04-12T23:20:50.52Z", INT64_C(482196050520000)},
        /* python3 -c "from datetime import *; print((datetime(1996,12,19,16,39,57,tzinfo=timezone(timedelta(hours=-8)))-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
           → 851042397000000 */
        {"1996-12-19T16:39:57-08:00", INT64_C(851042397000000)},
        /* leap second, read as the next second (timefmt.h):
           python3 -c "from datetime import *; print((datetime(1990,12,31,23,59,59,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1)+1000000)"
           → 662688000000000 (= 1991-01-01T00:00:00Z) */
        {"1990-12-31T23:59:60Z", INT64_C(662688000000000)},
        /* the same leap second in local time:
           python3 -c "from datetime import *; print((datetime(1990,12,31,15,59,59,tzinfo=timezone(timedelta(hours=-8)))-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1)+1000000)"
           → 662688000000000 */
        {"1990-12-31T15:59:60-08:00", INT64_C(662688000000000)},
        /* python3 -c "from datetime import *; print((datetime(1937,1,1,12,0,27,870000,tzinfo=timezone(timedelta(minutes=20)))-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
           → -1041337172130000 */
        {"1937-01-01T12:00:27.87+00:20", INT64_C(-1041337172130000)},
    };
    for (size_t i = 0; i < sizeof ex / sizeof ex[0]; i++) {
        size_t n = strlen(ex[i].text);
        char *b = quote(ex[i].text, n);
        int64_t us = 0;
        int rc = time_parse_rfc3339(b, n, &us);
        free(b);
        if (rc != 0 || us != ex[i].us)
            fail_msg("%s: rc %d, got %lld, expected %lld", ex[i].text, rc, (long long)us, (long long)ex[i].us);
    }
}

/* The decoder reads the §5.8 examples the same way. */
static void test_event__time_examples_in_events(void **state)
{
    struct event ev;
    static const char a[] = "{\"kind\":\"assign\",\"time\":\"1937-01-01T12:00:27.87+00:20\",\"unit\":\"u1\",\"exp\":\"e\",\"arm\":\"a\"}";
    assert_int_equal(decode_raw(*state, a, strlen(a), &ev), REJ_NONE);
    assert_int_equal(ev.time_us, INT64_C(-1041337172130000)); /* as in test_event__time_rfc3339_examples */
    static const char o[] = "{\"kind\":\"outcome\",\"time\":\"1990-12-31T15:59:60-08:00\",\"unit\":\"u1\",\"metric\":\"m\"}";
    assert_int_equal(decode_raw(*state, o, strlen(o), &ev), REJ_NONE);
    assert_int_equal(ev.time_us, INT64_C(662688000000000));
}

static void test_event__time_accepted_forms(void **state)
{
    (void)state;
    static const struct {
        const char *text;
        int64_t us;
    } ok[] = {
        /* RFC 3339 §5.6 allows lowercase t and z, and a space for T (the NOTE there) */
        {"2026-11-03t10:15:02.123z", INT64_C(1793700902123000)},
        {"2026-11-03 10:15:02.123Z", INT64_C(1793700902123000)},
        /* python3 -c "from datetime import *; print((datetime(2026,11,3,10,15,2,123000,tzinfo=timezone(timedelta(hours=5,minutes=45)))-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
           → 1793680202123000 */
        {"2026-11-03T10:15:02.123+05:45", INT64_C(1793680202123000)},
        /* "-00:00" (RFC 3339 §4.3, unknown local offset) is UTC */
        {"2026-11-03T10:15:02.123-00:00", INT64_C(1793700902123000)},
        /* fraction digits past the sixth are dropped (timefmt.h) */
        {"2026-11-03T10:15:02.1234569Z", INT64_C(1793700902123456)},
        {"2026-11-03T10:15:02.000001Z", INT64_C(1793700902000001)},
        /* python3 -c "from datetime import *; print((datetime(2000,2,29,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
           → 951782400000000 (2000 is a leap year: divisible by 400) */
        {"2000-02-29T00:00:00Z", INT64_C(951782400000000)},
        /* the range ends, from the same Python calls as TIME_MIN_US / TIME_MAX_US:
           python3 -c "from datetime import *; e=datetime(1970,1,1,tzinfo=timezone.utc); print((datetime(1900,1,1,tzinfo=timezone.utc)-e)//timedelta(microseconds=1), (datetime(9999,12,31,23,59,59,tzinfo=timezone.utc)-e)//timedelta(microseconds=1))"
           → -2208988800000000 253402300799000000 */
        {"1900-01-01T00:00:00Z", INT64_C(-2208988800000000)},
        {"9999-12-31T23:59:59Z", INT64_C(253402300799000000)},
        /* python3 -c "from datetime import *; print((datetime(1970,1,1,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))" → 0 */
        {"1970-01-01T00:00:00Z", 0},
    };
    for (size_t i = 0; i < sizeof ok / sizeof ok[0]; i++) {
        size_t n = strlen(ok[i].text);
        char *b = quote(ok[i].text, n);
        int64_t us = 0;
        int rc = time_parse_rfc3339(b, n, &us);
        free(b);
        if (rc != 0 || us != ok[i].us)
            fail_msg("%s: rc %d, got %lld, expected %lld", ok[i].text, rc, (long long)us, (long long)ok[i].us);
    }
    assert_int_equal(TIME_MIN_US, INT64_C(-2208988800000000));
    /* the last microsecond of year 9999: 253402300799 s (above) + 999999 µs */
    assert_int_equal(TIME_MAX_US, INT64_C(253402300799999999));
    int64_t us = 0;
    assert_int_equal(time_parse_rfc3339("9999-12-31T23:59:59.5Z", 22, &us), 0);
    assert_int_equal(us, INT64_C(253402300799500000));
}

/* The fast path for the common forms (timefmt.c parse_common), with and
 * without the day cache, against the general parser: the same result on
 * every input. Property test on invented strings: valid times of both common
 * lengths, then the same with one byte replaced by a digit, a separator or a
 * letter; for the cache, runs of 8 strings sharing a date, valid or not
 * (fixed seed). */
static void test_event__time_fast_path_agrees(void **state)
{
    (void)state;
    static const char subst[] = "0123456789-:.TZtz +/";
    uint64_t x = 0x9e3779b97f4a7c15u;
    int accepted = 0;
    struct time_day_cache cache;
    memset(&cache, 0, sizeof cache);
    char first_of_run[10] = {0};
    for (int i = 0; i < 200000; i++) {
        x ^= x << 13, x ^= x >> 7, x ^= x << 17;
        char buf[40];
        int n = snprintf(buf, sizeof buf, "%04u-%02u-%02uT%02u:%02u:%02u", (unsigned)(x % 10000),
                         (unsigned)(x >> 14) % 14, (unsigned)(x >> 18) % 33, (unsigned)(x >> 24) % 25,
                         (unsigned)(x >> 30) % 61, (unsigned)(x >> 36) % 62);
        if ((x >> 42) & 1)
            n += snprintf(buf + n, sizeof buf - (size_t)n, ".%03u", (unsigned)(x >> 43) % 1000);
        buf[n++] = 'Z';
        buf[n] = '\0';
        if ((x >> 53) % 3 == 0) /* one byte replaced */
            buf[(x >> 20) % (uint64_t)n] = subst[(x >> 9) % (sizeof subst - 1)];
        int64_t a = 1, b = 2, c = 3;
        int ra = time_parse_rfc3339(buf, (size_t)n, &a), rb = time_parse_rfc3339_general(buf, (size_t)n, &b);
        if (ra != rb || (ra == 0 && a != b))
            fail_msg("'%s': fast path %d %lld, general %d %lld", buf, ra, (long long)a, rb, (long long)b);
        /* with the day cache: runs of 8 strings share the date of the run's first */
        if (i % 8)
            memcpy(buf, first_of_run, 10);
        else
            memcpy(first_of_run, buf, 10);
        ra = time_parse_rfc3339_cached(buf, (size_t)n, &c, &cache);
        rb = time_parse_rfc3339_general(buf, (size_t)n, &b);
        if (ra != rb || (ra == 0 && c != b))
            fail_msg("'%s': cached %d %lld, general %d %lld", buf, ra, (long long)c, rb, (long long)b);
        accepted += ra == 0;
    }
    assert_true(accepted > 10000); /* the property was checked on many valid times */
}

static void test_event__time_epoch_ms(void **state)
{
    (void)state;
    static const struct {
        double ms;
        int rc;
        int64_t us;
    } cases[] = {
        {0.0, 0, 0},
        {1793700902123.0, 0, INT64_C(1793700902123000)},
        {-1.0, 0, INT64_C(-1000)},
        {-2208988800000.0, 0, INT64_C(-2208988800000000)},   /* 1900-01-01T00:00:00Z (see above) */
        {253402300799000.0, 0, INT64_C(253402300799000000)}, /* 9999-12-31T23:59:59Z */
        {-2208988800001.0, -1, 0},
        {253402300800000.0, -1, 0},
        {1.5, -1, 0},
        {-0.5, -1, 0},
        {1793700902123.25, -1, 0},
        {NAN, -1, 0},
        {INFINITY, -1, 0},
        {-INFINITY, -1, 0},
        {1e300, -1, 0},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        int64_t us = 12345;
        int rc = time_from_epoch_ms(cases[i].ms, &us);
        if (rc != cases[i].rc || (rc == 0 && us != cases[i].us))
            fail_msg("ms %.17g: rc %d (expected %d), us %lld (expected %lld)", cases[i].ms, rc, cases[i].rc,
                     (long long)us, (long long)cases[i].us);
    }
}

static void test_event__time_format(void **state)
{
    (void)state;
    /* expected strings: python3 -c "from datetime import *; print((datetime(1970,1,1,tzinfo=timezone.utc)+timedelta(microseconds=US)).isoformat())"
       with the "+00:00" written as "Z" and the fraction trimmed of trailing zeros (timefmt.h) */
    static const struct {
        int64_t us;
        const char *text;
    } cases[] = {
        {0, "1970-01-01T00:00:00Z"},
        {INT64_C(482196050520000), "1985-04-12T23:20:50.52Z"},
        {INT64_C(-1041337172130000), "1937-01-01T11:40:27.87Z"},
        {INT64_C(-1), "1969-12-31T23:59:59.999999Z"},
        {INT64_C(1793700902123000), "2026-11-03T10:15:02.123Z"},
        {INT64_C(951782400000001), "2000-02-29T00:00:00.000001Z"},
        {INT64_C(-2208988800000000), "1900-01-01T00:00:00Z"},
        {INT64_C(253402300799000000), "9999-12-31T23:59:59Z"},
        {INT64_C(662688000000000), "1991-01-01T00:00:00Z"},
        {INT64_C(-2208988799500000), "1900-01-01T00:00:00.5Z"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        char buf[32];
        memset(buf, '#', sizeof buf);
        time_format(cases[i].us, buf, sizeof buf);
        assert_non_null(memchr(buf, '\0', sizeof buf));
        if (strcmp(buf, cases[i].text))
            fail_msg("us %lld: got %s, expected %s", (long long)cases[i].us, buf, cases[i].text);
        int64_t back = 0;
        assert_int_equal(time_parse_rfc3339(buf, strlen(buf), &back), 0);
        assert_int_equal(back, cases[i].us);
    }
}

/* format → parse is the identity over the whole accepted range (splitmix64 draws). */
static void test_event__time_format_round_trip(void **state)
{
    (void)state;
    uint64_t x = UINT64_C(0x2385a7c1e94f0b3d);
    uint64_t span = (uint64_t)(TIME_MAX_US - TIME_MIN_US) + 1;
    for (int i = 0; i < 20000; i++) {
        /* splitmix64 (Steele, Lea & Flood 2014) */
        uint64_t z = (x += UINT64_C(0x9e3779b97f4a7c15));
        z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
        z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
        z ^= z >> 31;
        int64_t us = TIME_MIN_US + (int64_t)(z % span);
        if (i % 3 == 0)
            us -= ((us % 1000) + 1000) % 1000; /* whole milliseconds too (TIME_MIN_US is one) */
        char buf[32];
        time_format(us, buf, sizeof buf);
        int64_t back = 0;
        if (time_parse_rfc3339(buf, strlen(buf), &back) || back != us)
            fail_msg("us %lld formats as %s, which reads back as %lld", (long long)us, buf, (long long)back);
    }
}

static void test_event__time_floor(void **state)
{
    (void)state;
    assert_int_equal(time_floor(0, US_PER_DAY), 0);
    assert_int_equal(time_floor(US_PER_DAY, US_PER_DAY), US_PER_DAY);
    assert_int_equal(time_floor(US_PER_DAY + US_PER_DAY / 2, US_PER_DAY), US_PER_DAY);
    assert_int_equal(time_floor(-1, US_PER_DAY), -US_PER_DAY);
    assert_int_equal(time_floor(-US_PER_DAY, US_PER_DAY), -US_PER_DAY);
    assert_int_equal(time_floor(-US_PER_DAY - 1, US_PER_DAY), -2 * US_PER_DAY);
    /* 1937-01-01T11:40:27.87Z floors to 1937-01-01T00:00:00Z:
       python3 -c "from datetime import *; print((datetime(1937,1,1,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
       → -1041379200000000 */
    assert_int_equal(time_floor(INT64_C(-1041337172130000), US_PER_DAY), INT64_C(-1041379200000000));
}

static void test_event__duration_parse(void **state)
{
    (void)state;
    static const struct {
        const char *text;
        int rc;
        int64_t us;
    } cases[] = {
        {"90s", 0, INT64_C(90000000)},
        {"30m", 0, INT64_C(1800000000)},
        {"30min", 0, INT64_C(1800000000)},
        {"1h", 0, INT64_C(3600000000)},
        {"1.5h", 0, INT64_C(5400000000)},
        {"7d", 0, INT64_C(604800000000)},
        {"1w", 0, INT64_C(604800000000)},
        {"2", 0, INT64_C(7200000000)}, /* a bare number means hours */
        {"0.25", 0, INT64_C(900000000)},
        {"0.5s", 0, INT64_C(500000)},
        {"", -1, 0},
        {"h", -1, 0},
        {"0h", -1, 0},
        {"0", -1, 0},
        {"-1h", -1, 0},
        {"1x", -1, 0},
        {"1hh", -1, 0},
        {"1 h", -1, 0},
        {"1h ", -1, 0},
        {"nan", -1, 0},
        {"inf", -1, 0},
        {"1e30d", -1, 0},
        {"1e-9s", -1, 0}, /* under a microsecond */
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        int64_t us = 0;
        int rc = duration_parse(cases[i].text, &us);
        if (rc != cases[i].rc || (rc == 0 && us != cases[i].us))
            fail_msg("'%s': rc %d (expected %d), us %lld (expected %lld)", cases[i].text, rc, cases[i].rc,
                     (long long)us, (long long)cases[i].us);
    }
    int64_t us;
    assert_int_equal(duration_parse(NULL, &us), -1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_event__not_json, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__missing_field, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__empty_kind_and_time_are_missing, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__bad_type, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__attrs_limit, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__unknown_kind, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__bad_time, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__not_finite, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__empty_line, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__too_long_in_decoder, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__too_long_through_source, setup, teardown),
        cmocka_unit_test(test_event__reject_names),
        cmocka_unit_test_setup_teardown(test_event__assign_fields, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__outcome_fields, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__string_escapes, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__strings_owned_and_reset, setup, teardown),
        cmocka_unit_test_setup_teardown(test_event__respects_length, setup, teardown),
        cmocka_unit_test(test_event__str_eq),
        cmocka_unit_test(test_event__time_rfc3339_examples),
        cmocka_unit_test_setup_teardown(test_event__time_examples_in_events, setup, teardown),
        cmocka_unit_test(test_event__time_accepted_forms),
        cmocka_unit_test(test_event__time_fast_path_agrees),
        cmocka_unit_test(test_event__time_epoch_ms),
        cmocka_unit_test(test_event__time_format),
        cmocka_unit_test(test_event__time_format_round_trip),
        cmocka_unit_test(test_event__time_floor),
        cmocka_unit_test(test_event__duration_parse),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
