/*
 * test_decoder_diff.c — the fast event decoder (event.h, src/event_simdjson.cc)
 * against the reference decoder (event_ref.h, src/event_jansson.c).
 *
 * The reference defines the contract by example, so the two must agree on
 * every line: the same reason, and for an accepted line the same kind, time,
 * unit, id, exp, arm, attrs (in order), metric and value, bit for bit. Lines
 * come from every fixture (fixtures/replay/ * /input.jsonl, and every file
 * under fixtures/fuzz/, split into lines as the fuzz harness does; both read
 * at test time, from the repository root), from a table of tricky lines, from
 * generated numbers and strings, and from 100,000 random mutations of the
 * fixture lines (fixed seed). Every line is handed over in a heap buffer of
 * exactly its length, so a read past the end shows up under AddressSanitizer.
 *
 * The fast decoder hands the lines it finds malformed to the reference, so
 * agreement there is by construction; what the comparison tests is that it
 * never accepts a line the reference refuses, nor reads a field differently.
 * The fixture test also checks that it decodes well-formed event lines
 * itself (decoder_slow_lines) rather than passing them on.
 */
#include <dirent.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "helpers.h"
#include "bytebuf.h"
#include "event.h"
#include "event_ref.h"

/* ---------------------------------------------------------------- harness */

struct diff {
    struct decoder *fast;
    struct decoder_ref *ref;
    unsigned long lines, accepted, failures;
};

static int setup(void **state)
{
    struct diff *t = calloc(1, sizeof *t);
    if (!t || !(t->fast = decoder_new()) || !(t->ref = decoder_jansson_new()))
        return -1;
    *state = t;
    return 0;
}

static int teardown(void **state)
{
    struct diff *t = *state;
    decoder_free(t->fast);
    decoder_jansson_free(t->ref);
    free(t);
    return 0;
}

/* Prints a line with its bytes outside printable ASCII as \xNN (at most 200). */
static void show(const char *s, size_t n)
{
    char out[1024];
    size_t k = 0;
    for (size_t i = 0; i < n && i < 200 && k + 8 < sizeof out; i++) {
        unsigned char c = (unsigned char)s[i];
        if (c >= 0x20 && c < 0x7f)
            out[k++] = (char)c;
        else
            k += (size_t)snprintf(out + k, sizeof out - k, "\\x%02x", c);
    }
    out[k] = '\0';
    print_error("    line (%zu bytes): %s%s\n", n, out, n > 200 ? "..." : "");
}

static bool same_str(struct str a, struct str b)
{
    return (a.p == NULL) == (b.p == NULL) && a.n == b.n && (a.n == 0 || !memcmp(a.p, b.p, a.n));
}

/* What differs between two accepted events, or NULL. */
static const char *differs(const struct event *a, const struct event *b)
{
    if (a->kind != b->kind)
        return "kind";
    if (a->time_us != b->time_us)
        return "time";
    if (!same_str(a->unit, b->unit))
        return "unit";
    if (!same_str(a->id, b->id))
        return "id";
    if (!same_str(a->exp, b->exp))
        return "exp";
    if (!same_str(a->arm, b->arm))
        return "arm";
    if (!same_str(a->metric, b->metric))
        return "metric";
    if (memcmp(&a->value, &b->value, sizeof a->value))
        return "value";
    if (a->n_attrs != b->n_attrs)
        return "number of attrs";
    for (int i = 0; i < a->n_attrs; i++)
        if (!same_str(a->attrs[i].key, b->attrs[i].key) || !same_str(a->attrs[i].value, b->attrs[i].value))
            return "attrs";
    return NULL;
}

/* Decodes s[0..n) with both decoders; records (and prints the first 20)
 * disagreements. Returns the reference's reason. */
static enum reject compare(struct diff *t, const char *s, size_t n)
{
    char *b = malloc(n ? n : 1);
    assert_non_null(b);
    memcpy(b, s, n);
    struct event a, r;
    enum reject ra = decoder_decode(t->fast, b, n, &a);
    enum reject rr = decoder_jansson_decode(t->ref, b, n, &r);
    const char *what = ra != rr ? "reason" : ra == REJ_NONE ? differs(&a, &r) : NULL;
    t->lines++;
    t->accepted += rr == REJ_NONE;
    if (what) {
        if (t->failures < 20) {
            print_error("decoders disagree on the %s: fast %s, reference %s\n", what, reject_name(ra),
                        reject_name(rr));
            if (ra == REJ_NONE && rr == REJ_NONE && !strcmp(what, "value"))
                print_error("    value: fast %.17g, reference %.17g\n", a.value, r.value);
            show(s, n);
        }
        t->failures++;
    }
    free(b);
    return rr;
}

static void compare_z(struct diff *t, const char *s)
{
    compare(t, s, strlen(s));
}

static void finish(struct diff *t, const char *what)
{
    unsigned long failures = t->failures, lines = t->lines;
    t->lines = t->accepted = t->failures = 0;
    if (failures)
        fail_msg("%s: the decoders disagree on %lu of %lu lines", what, failures, lines);
}

/* ---------------------------------------------------------------- files */

static void buf_add(struct byte_buf *b, const char *s, size_t n)
{
    assert_int_equal(byte_buf_write(b, s, n), 0);
}

static bool read_file(const char *path, struct byte_buf *out)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return false;
    char chunk[65536];
    size_t k;
    out->n = 0;
    while ((k = fread(chunk, 1, sizeof chunk, f)) > 0)
        buf_add(out, chunk, k);
    fclose(f);
    return true;
}

/* The corpus of fixture lines, kept for the mutations. */
struct corpus {
    char **line;
    size_t *len;
    size_t n, cap;
};

static void corpus_add(struct corpus *c, const char *s, size_t n)
{
    if (c->n == c->cap) {
        c->cap = c->cap ? 2 * c->cap : 1024;
        c->line = realloc(c->line, c->cap * sizeof *c->line);
        c->len = realloc(c->len, c->cap * sizeof *c->len);
        assert_true(c->line && c->len);
    }
    c->line[c->n] = malloc(n ? n : 1);
    assert_non_null(c->line[c->n]);
    memcpy(c->line[c->n], s, n);
    c->len[c->n++] = n;
}

static void corpus_free(struct corpus *c)
{
    for (size_t i = 0; i < c->n; i++)
        free(c->line[i]);
    free(c->line);
    free(c->len);
}

/* Compares every line of a file (split at '\n', a trailing '\r' dropped as
 * the line reader does); adds them to the corpus. Returns the lines the
 * reference accepted and, in *slow, how many of those the fast decoder
 * handed on. */
static unsigned long compare_file(struct diff *t, const char *path, struct corpus *c, unsigned long *slow)
{
    struct byte_buf b = {0};
    if (!read_file(path, &b))
        fail_msg("cannot read %s", path);
    unsigned long ok = 0;
    for (size_t i = 0; i < b.n;) {
        const char *nl = memchr(b.p + i, '\n', b.n - i);
        size_t end = nl ? (size_t)(nl - b.p) : b.n, n = end - i;
        if (n && b.p[i + n - 1] == '\r')
            n--;
        if (n <= EVENT_MAX_LINE) {
            uint64_t before = decoder_slow_lines(t->fast);
            if (compare(t, b.p + i, n) == REJ_NONE) {
                ok++;
                *slow += decoder_slow_lines(t->fast) != before;
            }
            if (c)
                corpus_add(c, b.p + i, n);
        }
        i = end + 1;
    }
    free(b.p);
    return ok;
}

/* Every regular file under dir, recursively, in name order. */
static void compare_tree(struct diff *t, const char *dir, struct corpus *c, unsigned long *files)
{
    struct dirent **ents;
    int n = scandir(dir, &ents, NULL, alphasort);
    if (n < 0)
        return;
    for (int i = 0; i < n; i++) {
        const char *name = ents[i]->d_name;
        char path[4096];
        struct stat st;
        if (name[0] != '.' && snprintf(path, sizeof path, "%s/%s", dir, name) < (int)sizeof path &&
            stat(path, &st) == 0) {
            unsigned long slow = 0;
            if (S_ISDIR(st.st_mode))
                compare_tree(t, path, c, files);
            else if (S_ISREG(st.st_mode)) {
                compare_file(t, path, c, &slow);
                (*files)++;
            }
        }
        free(ents[i]);
    }
    free(ents);
}

static struct corpus fixtures; /* filled by the first test, used by the mutations */

/* ---------------------------------------------------------------- tests */

static void test_decoder_diff__replay_fixtures(void **state)
{
    struct diff *t = *state;
    struct dirent **ents;
    int n = scandir("fixtures/replay", &ents, NULL, alphasort);
    if (n < 0)
        fail_msg("fixtures/replay: not found (run the tests from the repository root)");
    unsigned long files = 0, ok = 0, slow = 0;
    for (int i = 0; i < n; i++) {
        char path[4096];
        struct stat st;
        if (ents[i]->d_name[0] != '.' &&
            snprintf(path, sizeof path, "fixtures/replay/%s/input.jsonl", ents[i]->d_name) < (int)sizeof path &&
            stat(path, &st) == 0) {
            ok += compare_file(t, path, &fixtures, &slow);
            files++;
        }
        free(ents[i]);
    }
    free(ents);
    print_message("replay fixtures: %lu files, %lu lines, %lu accepted, %lu of them decoded by the reference\n",
                  files, t->lines, ok, slow);
    assert_true(files >= 1);
    assert_true(ok > 0);
    /* a well-formed event line never needs the reference decoder */
    assert_int_equal(slow, 0);
    finish(t, "replay fixtures");
}

static void test_decoder_diff__fuzz_corpus(void **state)
{
    struct diff *t = *state;
    unsigned long files = 0;
    compare_tree(t, "fixtures/fuzz", &fixtures, &files);
    print_message("fuzz corpus: %lu files, %lu lines\n", files, t->lines);
    if (!files)
        skip(); /* no corpus in this tree */
    finish(t, "fuzz corpus");
}

/* Lines that probe where a JSON parser may stray from the reference. */
#define OUT(x) "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":\"u1\",\"metric\":\"m\",\"value\":" x "}"
#define ASG(x) "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"e\",\"arm\":\"a\"" x "}"
#define UNIT(x) "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"" x "\",\"metric\":\"m\"}"
#define TIME(x) "{\"kind\":\"outcome\",\"time\":" x ",\"unit\":\"u1\",\"metric\":\"m\"}"

static void test_decoder_diff__tricky_lines(void **state)
{
    struct diff *t = *state;
    static const char *const lines[] = {
        /* numbers */
        OUT("42.5"), OUT("-0"), OUT("-0.0"), OUT("0"), OUT("-0e0"), OUT("-0E-0"), OUT("0e-0"), OUT("1e308"),
        OUT("1.7976931348623157e308"), OUT("1.7976931348623158e308"), OUT("1.7976931348623159e308"),
        OUT("1e309"), OUT("-1e309"), OUT("1e400"), OUT("1E-400"), OUT("-1E-400"), OUT("4.9e-324"),
        OUT("2.4703282292062327e-324"), OUT("2.4703282292062328e-324"), OUT("2.2250738585072011e-308"),
        OUT("2.2250738585072014e-308"), OUT("9007199254740993"), OUT("9223372036854775807"),
        OUT("9223372036854775808"), OUT("-9223372036854775808"), OUT("-9223372036854775809"),
        OUT("18446744073709551615"), OUT("18446744073709551616"), OUT("-18446744073709551616"),
        OUT("123456789012345678901234567890"), OUT("0.1234567890123456789012345678901234567890"),
        OUT("0.00000000000000000000000000001234567890123456789"), OUT("1000e306"), OUT("1000e305"),
        OUT("0.0001e312"), OUT("10000000000000000000000000000000000000000000e-40"), OUT("1e00000000000000000001"),
        OUT("1e-00000000000000000001"), OUT("0e999999999999999999999"), OUT("1e999999999999999999999"),
        OUT("3.141592653589793238462643383279502884197169399375105820974944"), OUT("01"), OUT("-01"),
        OUT("1."), OUT(".5"), OUT("+1"), OUT("-"), OUT("1e"), OUT("1e+"), OUT("1E5"), OUT("0x10"),
        OUT("NaN"), OUT("-NaN"), OUT("Infinity"), OUT("-Infinity"), OUT("inf"), OUT("1_000"), OUT("\"1\""),
        OUT("true"), OUT("null"), OUT("[1]"), OUT("{}"), OUT("1 2"), OUT("--1"), OUT("1.5e3.2"),
        OUT("1e400,\"x\":"), OUT("1,\"value\":2"),
        /* times */
        TIME("1793701300000"), TIME("1793701300000.0"), TIME("1793701300000.5"), TIME("1.7937013e12"),
        TIME("-0"), TIME("0"), TIME("-2208988800000"), TIME("-2208988800001"), TIME("253402300799999"),
        TIME("253402300800000"), TIME("1e400"), TIME("1e300"), TIME("\"\""), TIME("\"2026-11-03T10:21:40Z\""),
        TIME("\"2026-11-03t10:21:40z\""), TIME("\"2026-11-03 10:21:40+05:30\""), TIME("\"2026-11-03T10:21:60Z\""),
        TIME("\"2026-11-03T10:21:40.1234567891Z\""), TIME("\"2026-13-03T10:21:40Z\""), TIME("\"now\""),
        TIME("\"2026-11-03T10:21:40\\u005a\""), TIME("true"), TIME("null"), TIME("[]"), TIME("{}"),
        /* strings and escapes */
        UNIT("u\\u00e9"), UNIT("u\\u00E9"), UNIT("\\ud83d\\ude00"), UNIT("\\ud83d"), UNIT("\\ude00"),
        UNIT("\\ud83d\\u0041"), UNIT("\\ud83dx"), UNIT("\\udbff\\udfff"), UNIT("\\u0000"), UNIT("a\\u0000b"),
        UNIT("\\\\u0000"), UNIT("\\u000"), UNIT("\\u00g0"), UNIT("\\x41"), UNIT("\\'"), UNIT("\\/"),
        UNIT("\\b\\f\\n\\r\\t\\\"\\\\"), UNIT("\\"), UNIT("a\tb"), UNIT("a\x01"), UNIT("a\x7f"), UNIT("caf\xc3\xa9"),
        UNIT("\xc3"), UNIT("\xc3\x28"), UNIT("\xe2\x82\xac"), UNIT("\xe2\x82"), UNIT("\xf0\x9f\x98\x80"),
        UNIT("\xf4\x90\x80\x80"), UNIT("\xed\xa0\x80"), UNIT("\xc0\xaf"), UNIT("\xe0\x80\xaf"), UNIT("\xff"),
        UNIT("\xef\xbb\xbf"), UNIT(""), UNIT(" "), UNIT("u-0"), UNIT("-0"),
        /* keys */
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"k\\u0000\":1}",
        "{\"kin\\u0064\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"\\u0074ime\":1793701300000,\"time\":1,\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":1,\"x\":2}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":{\"a\":1,\"a\":1}}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":[{\"a\":1},{\"a\":1,\"b\":[{\"c\":1,\"c\":2}]}]}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":{\"a\":1,\"\\u0061\":1}}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"\":1}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"\":1,\"\":2}",
        "{\"kind\":\"outcome\",\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"value\":1,\"value\":1}",
        /* attrs */
        ASG(""), ASG(",\"attrs\":{}"), ASG(",\"attrs\":{\"p\":\"ios\"}"), ASG(",\"attrs\":{\"p\":\"ios\",\"p\":\"web\"}"),
        ASG(",\"attrs\":{\"p\":\"ios\",\"\\u0070\":\"web\"}"), ASG(",\"attrs\":{\"p\":1}"),
        ASG(",\"attrs\":{\"p\":null}"), ASG(",\"attrs\":[]"), ASG(",\"attrs\":\"p=ios\""), ASG(",\"attrs\":null"),
        ASG(",\"attrs\":{\"b\":\"2\",\"a\":\"1\",\"c\":\"\"}"), ASG(",\"attrs\":{\"\":\"\"}"),
        ASG(",\"attrs\":{\"p\":\"\\u00e9\",\"q\\u00e9\":\"x\"}"),
        ASG(",\"attrs\":{\"a\":\"1\",\"b\":\"2\",\"c\":\"3\",\"d\":\"4\",\"e\":\"5\",\"f\":\"6\",\"g\":\"7\",\"h\":\"8\","
            "\"i\":\"9\",\"j\":\"10\",\"k\":\"11\",\"l\":\"12\",\"m\":\"13\",\"n\":\"14\",\"o\":\"15\",\"p\":\"16\"}"),
        ASG(",\"attrs\":{\"a\":\"1\",\"b\":\"2\",\"c\":\"3\",\"d\":\"4\",\"e\":\"5\",\"f\":\"6\",\"g\":\"7\",\"h\":\"8\","
            "\"i\":\"9\",\"j\":\"10\",\"k\":\"11\",\"l\":\"12\",\"m\":\"13\",\"n\":\"14\",\"o\":\"15\",\"p\":\"16\",\"q\":\"17\"}"),
        ASG(",\"attrs\":{\"a\":\"1\",\"b\":\"2\",\"c\":\"3\",\"d\":\"4\",\"e\":\"5\",\"f\":\"6\",\"g\":\"7\",\"h\":\"8\","
            "\"i\":\"9\",\"j\":\"10\",\"k\":\"11\",\"l\":\"12\",\"m\":\"13\",\"n\":\"14\",\"o\":\"15\",\"p\":\"16\",\"a\":\"17\"}"),
        ASG(",\"id\":\"\""), ASG(",\"id\":null"), ASG(",\"id\":7"), ASG(",\"id\":\"a-1\""), ASG(",\"exp\":\"e2\""),
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"\",\"arm\":\"a\"}",
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"e\"}",
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"e\",\"arm\":7}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"e\",\"arm\":7}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"metric\":\"\"}",
        "{\"kind\":\"Outcome\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":1,\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":7,\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:15:02Z\",\"metric\":\"m\",\"value\":\"x\"}",
        /* structure, whitespace, trailing bytes */
        "{}", "[]", "[{}]", "{", "}", "{\"a\"}", "{\"a\":}", "{\"a\":1,}", "{,}", "{\"a\" 1}", "{\"a\":1 \"b\":2}",
        "{'kind':'outcome'}", "{kind:\"outcome\"}", "null", "true", "\"x\"", "1", "1e400", "-0", "[1e400]",
        " \t\r{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"} \t\r",
        "{ \"kind\" : \"outcome\" , \"time\" : 1793701300000 , \"unit\" : \"u1\" , \"metric\" : \"m\" }",
        "{\n\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}\f",
        "\f{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}",
        "\v{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}",
        "\xc2\xa0{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}",
        "\xef\xbb\xbf{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"} x",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}{}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"} 1e400",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"} \xff",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\"}\xc3",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":tru}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":nul}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":falsey}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":[1,2,]}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":[1e400,x]}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":[x,1e400]}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":\"\xff\",\"y\":1e400}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"y\":1e400,\"x\":\"\xff\"}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"y\":1e400,\"y\":1}",
        "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"y\":1,\"y\":1e400}",
        "", " ", "\t", "\r", " \t\r ", "\n", "\x00", "{\"kind\":\"outcome\"\x00}",
    };
    for (size_t i = 0; i < sizeof lines / sizeof lines[0]; i++)
        compare_z(t, lines[i]);
    /* the same with a NUL byte inside (strlen would cut it short) */
    static const char nul[] = "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u\0\",\"metric\":\"m\"}";
    compare(t, nul, sizeof nul - 1);
    finish(t, "tricky lines");
}

static void test_decoder_diff__deep_nesting(void **state)
{
    struct diff *t = *state;
    static const int depths[] = {1, 2, 63, 64, 65, 100, 1023, 1024, 1025, 2046, 2047, 2048, 2049, 5000};
    for (size_t k = 0; k < sizeof depths / sizeof depths[0]; k++) {
        for (int variant = 0; variant < 3; variant++) {
            struct byte_buf b = {0};
            const char *head = "{\"kind\":\"outcome\",\"time\":1793701300000,\"unit\":\"u1\",\"metric\":\"m\",\"x\":";
            buf_add(&b, head, strlen(head));
            for (int i = 0; i < depths[k]; i++)
                buf_add(&b, variant == 1 ? "{\"a\":" : "[", variant == 1 ? 5 : 1);
            buf_add(&b, variant == 2 ? "1e400" : "1", variant == 2 ? 5 : 1);
            for (int i = 0; i < depths[k]; i++)
                buf_add(&b, variant == 1 ? "}" : "]", 1);
            buf_add(&b, "}", 1);
            compare(t, b.p, b.n);
            free(b.p);
        }
    }
    finish(t, "deep nesting");
}

/* ---------------------------------------------------------------- random */

static uint64_t rng = 0x9e3779b97f4a7c15u;

static uint64_t next(void)
{
    /* xorshift64*, fixed seed: the same lines on every run */
    rng ^= rng >> 12;
    rng ^= rng << 25;
    rng ^= rng >> 27;
    return rng * 0x2545f4914f6cdd1du;
}

static size_t below(size_t n)
{
    return n ? (size_t)(next() % n) : 0;
}

/* Random numbers in every JSON form (and a few non-JSON ones) as "value". */
static void test_decoder_diff__numbers(void **state)
{
    struct diff *t = *state;
    for (int i = 0; i < 40000; i++) {
        char num[512];
        size_t n = 0;
        if (below(3) == 0)
            num[n++] = '-';
        size_t idig = 1 + (below(4) ? below(20) : below(400));
        if (below(8) == 0)
            num[n++] = '0';
        for (size_t j = 0; j < idig && n < 450; j++)
            num[n++] = (char)('0' + (j == 0 && below(4) ? 1 + below(9) : below(10)));
        if (below(2)) {
            num[n++] = '.';
            size_t f = 1 + (below(4) ? below(25) : below(400));
            for (size_t j = 0; j < f && n < 480; j++)
                num[n++] = (char)('0' + below(10));
        }
        if (below(2)) {
            num[n++] = below(2) ? 'e' : 'E';
            if (below(2))
                num[n++] = below(2) ? '-' : '+';
            int e = below(3) ? (int)below(30) : (int)below(700);
            n += (size_t)snprintf(num + n, sizeof num - n, "%s%d", below(10) == 0 ? "00" : "", e);
        }
        num[n] = '\0';
        char line[700];
        snprintf(line, sizeof line, OUT("%s"), num);
        compare_z(t, line);
        /* the same number as epoch milliseconds */
        snprintf(line, sizeof line, TIME("%s"), num);
        compare_z(t, line);
    }
    finish(t, "numbers");
}

/* Random strings of escapes and UTF-8 as unit ids and attrs. */
static void test_decoder_diff__strings(void **state)
{
    struct diff *t = *state;
    static const char *const bits[] = {
        "a", "Z", "0", " ", "-", "\\\"", "\\\\", "\\/", "\\b", "\\f", "\\n", "\\r", "\\t", "\\u0041",
        "\\u00e9", "\\u20ac", "\\ud83d", "\\ude00", "\\ud83d\\ude00", "\\udbff\\udfff", "\\u0000", "\\u001f",
        "\\uD800", "\\uDFFF", "\\uFFFF", "\\uFEFF", "\\u12", "\\x", "\\", "\xc3\xa9", "\xe2\x82\xac",
        "\xf0\x9f\x98\x80", "\xc3", "\xff", "\xed\xa0\x80", "\x7f", "\x1f", "\t", "\"", "'",
    };
    size_t nb = sizeof bits / sizeof bits[0];
    for (int i = 0; i < 20000; i++) {
        char s[256];
        size_t n = 0;
        size_t parts = below(6);
        for (size_t j = 0; j < parts; j++) {
            const char *b = bits[below(nb)];
            size_t k = strlen(b);
            memcpy(s + n, b, k);
            n += k;
        }
        s[n] = '\0';
        char line[1024];
        int len;
        if (i % 2)
            len = snprintf(line, sizeof line, UNIT("%s"), s);
        else
            len = snprintf(line, sizeof line, ASG(",\"attrs\":{\"k%s\":\"%s\",\"q\":\"%s\"}"), s, s, i % 4 ? "v" : s);
        compare(t, line, (size_t)len);
    }
    finish(t, "strings");
}

/* Snippets a mutation may insert: tokens that change a line's meaning. */
static const char *const snippets[] = {
    "{", "}", "[", "]", "\"", ":", ",", "\\", "\\u0000", "\\ud800", "\\u00e9", "1e400", "-0", "0", "NaN",
    "null", "true", "\xef\xbb\xbf", "\xff", "\xc3", "\xc3\xa9", " ", "\t", "\r", "\x00", "\x01", "\"kind\":",
    "\"kind\":\"assign\",", "\"value\":", "\"attrs\":{\"p\":\"ios\"},", "\"id\":\"\",", "1793701300000",
    "\"2026-11-03T10:21:40Z\"", "e", ".", "123456789012345678901234567890",
};

/* Applies 1 to 3 random edits to s[0..n) into out; returns the new length. */
static size_t mutate(const char *s, size_t n, char *out, size_t cap)
{
    size_t m = n < cap ? n : cap;
    memcpy(out, s, m);
    int edits = 1 + (int)below(3);
    for (int e = 0; e < edits; e++) {
        size_t at = below(m + 1);
        switch (below(7)) {
        case 0: /* replace a byte */
            if (m)
                out[below(m)] = (char)below(256);
            break;
        case 1: /* delete a span */
            if (m) {
                size_t k = 1 + below(m - at < 8 ? m - at + 1 : 8);
                if (at + k > m)
                    k = m - at;
                memmove(out + at, out + at + k, m - at - k);
                m -= k;
            }
            break;
        case 2: /* insert a snippet */
        case 3: {
            const char *sn = snippets[below(sizeof snippets / sizeof snippets[0])];
            size_t k = sn[0] ? strlen(sn) : 1; /* "\x00" is one NUL byte */
            if (m + k <= cap) {
                memmove(out + at + k, out + at, m - at);
                memcpy(out + at, sn, k);
                m += k;
            }
            break;
        }
        case 4: /* duplicate a span */
            if (m) {
                size_t from = below(m), k = 1 + below(20);
                if (from + k > m)
                    k = m - from;
                if (m + k <= cap) {
                    char tmp[32];
                    memcpy(tmp, out + from, k);
                    memmove(out + at + k, out + at, m - at);
                    memcpy(out + at, tmp, k);
                    m += k;
                }
            }
            break;
        case 5: /* swap two bytes */
            if (m > 1) {
                size_t a = below(m), b = below(m);
                char c = out[a];
                out[a] = out[b];
                out[b] = c;
            }
            break;
        default: /* cut short */
            m = at;
            break;
        }
    }
    return m;
}

static void test_decoder_diff__mutations(void **state)
{
    struct diff *t = *state;
    if (!fixtures.n)
        fail_msg("no fixture lines to mutate");
    char out[8192];
    unsigned long accepted = 0;
    for (int i = 0; i < 100000; i++) {
        size_t k = below(fixtures.n);
        size_t n = mutate(fixtures.line[k], fixtures.len[k], out, sizeof out);
        accepted += compare(t, out, n) == REJ_NONE;
    }
    print_message("mutations: %lu lines, %lu still accepted\n", t->lines, accepted);
    finish(t, "mutations");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_decoder_diff__replay_fixtures),
        cmocka_unit_test(test_decoder_diff__fuzz_corpus),
        cmocka_unit_test(test_decoder_diff__tricky_lines),
        cmocka_unit_test(test_decoder_diff__deep_nesting),
        cmocka_unit_test(test_decoder_diff__numbers),
        cmocka_unit_test(test_decoder_diff__strings),
        cmocka_unit_test(test_decoder_diff__mutations),
    };
    int rc = cmocka_run_group_tests(tests, setup, teardown);
    corpus_free(&fixtures);
    return rc;
}
