/*
 * test_source.c — the line reader (source.h) over plain files, gzip files
 * (written here with zlib's gzopen/gzwrite) and stdin.
 *
 * Every file is built in memory from a list of lines whose expected reading
 * is known by construction: the line's bytes, without its "\n" or "\r\n".
 * Lines longer than EVENT_MAX_LINE must come flagged too long, with a prefix
 * of the line, and must not disturb the lines after them. The reader keeps a
 * 1 MiB buffer, so lines are placed to straddle that boundary as well.
 */
#include <fcntl.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <zlib.h>

#include "helpers.h"
#include "bytebuf.h"
#include "event.h"
#include "source.h"

#define MIB (1024u * 1024u) /* the reader's buffer size (source.c) */

/* ---------------------------------------------------------------- helpers */

struct fx {
    char dir[256]; /* a fresh temporary directory, removed by teardown */
    int n_files;
};

static int setup(void **state)
{
    struct fx *f = calloc(1, sizeof *f);
    if (!f)
        return -1;
    const char *t = getenv("TMPDIR");
    snprintf(f->dir, sizeof f->dir, "%s/abtally-test-source-XXXXXX", t && *t ? t : "/tmp");
    if (!mkdtemp(f->dir)) {
        free(f);
        return -1;
    }
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    struct fx *f = *state;
    for (int i = 0; i < f->n_files; i++) {
        char p[320];
        snprintf(p, sizeof p, "%s/f%d", f->dir, i);
        unlink(p);
        snprintf(p, sizeof p, "%s/f%d.gz", f->dir, i);
        unlink(p);
    }
    rmdir(f->dir);
    free(f);
    return 0;
}

static void buf_put(struct byte_buf *b, const void *s, size_t n)
{
    assert_int_equal(byte_buf_write(b, s, n), 0);
}

static void buf_fill(struct byte_buf *b, char c, size_t n)
{
    char chunk[4096];
    memset(chunk, c, sizeof chunk);
    while (n) {
        size_t k = n < sizeof chunk ? n : sizeof chunk;
        buf_put(b, chunk, k);
        n -= k;
    }
}

/* The expected reading of one line: its bytes at data[off..off+len) of the file image. */
struct want {
    size_t off, len;
    bool too_long;
};

/* A file image and the lines it must read as. */
struct image {
    struct byte_buf data;
    struct want *w;
    size_t n, cap;
};

/* Appends a line of content bytes (pattern c, or a counter pattern when c is 0),
 * ended by "\n", "\r\n" or nothing (eol 0, 1, 2). */
static void add_line(struct image *im, size_t len, char c, int eol)
{
    if (im->n == im->cap) {
        im->cap = im->cap ? im->cap * 2 : 64;
        im->w = realloc(im->w, im->cap * sizeof *im->w);
        assert_non_null(im->w);
    }
    size_t off = im->data.n;
    if (c)
        buf_fill(&im->data, c, len);
    else
        for (size_t i = 0; i < len; i++) {
            /* printable, position-dependent bytes, never '\r' or '\n' */
            char ch = (char)('!' + (off + i) * 2654435761u % 90);
            buf_put(&im->data, &ch, 1);
        }
    im->w[im->n++] = (struct want){off, len, len > EVENT_MAX_LINE};
    if (eol == 0)
        buf_put(&im->data, "\n", 1);
    else if (eol == 1)
        buf_put(&im->data, "\r\n", 2);
}

static void image_free(struct image *im)
{
    free(im->data.p);
    free(im->w);
}

/* Writes a plain file; returns its path in p. */
static void write_plain(struct fx *f, const char *data, size_t n, char *p, size_t pn)
{
    snprintf(p, pn, "%s/f%d", f->dir, f->n_files++);
    FILE *fp = fopen(p, "wb");
    assert_non_null(fp);
    if (n)
        assert_int_equal(fwrite(data, 1, n, fp), n);
    assert_int_equal(fclose(fp), 0);
}

/* Writes a gzip file with zlib's gzopen/gzwrite, in several gzwrite calls. */
static void write_gz(struct fx *f, const char *data, size_t n, char *p, size_t pn)
{
    snprintf(p, pn, "%s/f%d.gz", f->dir, f->n_files++);
    gzFile gz = gzopen(p, "wb6");
    assert_non_null(gz);
    size_t off = 0;
    while (off < n) {
        size_t k = n - off < 300000 ? n - off : 300000;
        assert_int_equal(gzwrite(gz, data + off, (unsigned)k), (int)k);
        off += k;
    }
    assert_int_equal(gzclose(gz), Z_OK);
}

/* Reads path to its end and checks every line against the image.
 * Prints the first mismatch and returns 1, or returns 0 (the caller frees, then fails). */
static int expect_lines(const char *path, const struct image *im)
{
    struct err e;
    err_clear(&e);
    struct source *s = source_open(path, &e);
    if (!s) {
        print_error("source_open(%s): %s\n", path, e.msg);
        return 1;
    }
    const char *line;
    size_t len;
    bool too_long;
    int bad = 0;
    for (size_t i = 0; i < im->n && !bad; i++) {
        const struct want *w = &im->w[i];
        int rc = source_next(s, &line, &len, &too_long, &e);
        bad = 1;
        if (rc != 1)
            print_error("%s: line %zu: source_next returned %d (%s)\n", path, i + 1, rc, e.msg);
        else if (source_line(s) != i + 1)
            print_error("%s: line %zu: source_line says %llu\n", path, i + 1, (unsigned long long)source_line(s));
        else if (too_long != w->too_long)
            print_error("%s: line %zu (%zu bytes): too_long is %d\n", path, i + 1, w->len, too_long);
        else if (w->too_long && (len > w->len || memcmp(line, im->data.p + w->off, len)))
            /* only a prefix of the line is kept */
            print_error("%s: line %zu: the kept %zu bytes are not a prefix of the line\n", path, i + 1, len);
        else if (!w->too_long && (len != w->len || memcmp(line, im->data.p + w->off, len)))
            print_error("%s: line %zu: got %zu bytes, expected %zu (or different bytes)\n", path, i + 1, len, w->len);
        else
            bad = 0;
    }
    if (!bad) {
        int rc = source_next(s, &line, &len, &too_long, &e);
        if (rc != 0) {
            print_error("%s: after %zu lines source_next returned %d, expected the end (0)\n", path, im->n, rc);
            bad = 1;
        } else if (source_next(s, &line, &len, &too_long, &e) != 0 || source_line(s) != im->n) {
            /* the end stays the end */
            print_error("%s: reading past the end did not stay at the end\n", path);
            bad = 1;
        }
    }
    source_close(s);
    return bad;
}

/* Checks the image as a plain file and as a gzip file; returns the number of failures. */
static int expect_both(struct fx *f, const struct image *im)
{
    char p[320];
    write_plain(f, im->data.p, im->data.n, p, sizeof p);
    int bad = expect_lines(p, im);
    write_gz(f, im->data.p, im->data.n, p, sizeof p);
    return bad + expect_lines(p, im);
}

/* Checks an image, frees it, then fails if it did not read as expected. */
static void expect_image(struct fx *f, struct image *im)
{
    int bad = expect_both(f, im);
    image_free(im);
    if (bad)
        fail_msg("%d of 2 readings (plain, gzip) differ from the file's lines", bad);
}

/* Reads a literal file content and compares with NULL-terminated expected lines. */
static void expect_text(struct fx *f, const char *data, size_t n, const char *const *lines)
{
    struct image im = {0};
    buf_put(&im.data, data, n);
    for (size_t i = 0; lines[i]; i++) {
        /* locate each expected line in order inside the file image */
        if (im.n == im.cap) {
            im.cap = im.cap ? im.cap * 2 : 16;
            im.w = realloc(im.w, im.cap * sizeof *im.w);
            assert_non_null(im.w);
        }
        size_t from = im.n ? im.w[im.n - 1].off + im.w[im.n - 1].len : 0;
        size_t k = strlen(lines[i]);
        const char *hit = k ? memmem(data + from, n - from, lines[i], k) : data + from;
        assert_non_null(hit);
        im.w[im.n++] = (struct want){(size_t)(hit - data), k, false};
    }
    expect_image(f, &im);
}

/* ------------------------------------------------------------------ tests */

static void test_source__plain_lines(void **state)
{
    static const char d[] = "{\"a\":1}\nbb\n\nccc\n";
    static const char *const lines[] = {"{\"a\":1}", "bb", "", "ccc", NULL};
    expect_text(*state, d, sizeof d - 1, lines);
}

static void test_source__last_line_without_newline(void **state)
{
    static const char d[] = "first\nsecond";
    static const char *const lines[] = {"first", "second", NULL};
    expect_text(*state, d, sizeof d - 1, lines);
    static const char d2[] = "x";
    static const char *const lines2[] = {"x", NULL};
    expect_text(*state, d2, sizeof d2 - 1, lines2);
}

static void test_source__crlf(void **state)
{
    /* a trailing "\r" is removed; a "\r" inside a line stays */
    static const char d[] = "alpha\r\nbeta\r\n\r\nmid\rdle\r\ngamma\r";
    static const char *const lines[] = {"alpha", "beta", "", "mid\rdle", "gamma", NULL};
    expect_text(*state, d, sizeof d - 1, lines);
}

static void test_source__empty_lines(void **state)
{
    static const char *const none[] = {NULL};
    expect_text(*state, "", 0, none);
    static const char *const one[] = {"", NULL};
    expect_text(*state, "\n", 1, one);
    static const char *const three[] = {"", "", "", NULL};
    expect_text(*state, "\n\r\n\n", 4, three);
    static const char *const mixed[] = {"", "  ", "x", "", NULL};
    expect_text(*state, "\n  \nx\n\n", 7, mixed);
}

/* A file written as two gzip members one after the other (as `cat a.gz b.gz` makes) reads whole. */
static void test_source__gzip_members(void **state)
{
    struct fx *f = *state;
    char p1[320], p2[320], p3[320];
    static const char a[] = "one\ntwo\n", b[] = "three\r\nfour";
    write_gz(f, a, sizeof a - 1, p1, sizeof p1);
    write_gz(f, b, sizeof b - 1, p2, sizeof p2);
    struct byte_buf cat = {0};
    for (int k = 0; k < 2; k++) {
        FILE *fp = fopen(k ? p2 : p1, "rb");
        assert_non_null(fp);
        char chunk[4096];
        size_t n;
        while ((n = fread(chunk, 1, sizeof chunk, fp)) > 0)
            buf_put(&cat, chunk, n);
        fclose(fp);
    }
    write_plain(f, cat.p, cat.n, p3, sizeof p3);
    free(cat.p);
    struct err e;
    err_clear(&e);
    struct source *s = source_open(p3, &e);
    assert_non_null(s);
    static const char *const want[] = {"one", "two", "three", "four"};
    const char *line;
    size_t len;
    bool tl;
    for (int i = 0; i < 4; i++) {
        assert_int_equal(source_next(s, &line, &len, &tl, &e), 1);
        assert_int_equal(len, strlen(want[i]));
        assert_memory_equal(line, want[i], len);
    }
    assert_int_equal(source_next(s, &line, &len, &tl, &e), 0);
    source_close(s);
}

/* A line of exactly EVENT_MAX_LINE bytes is a line; the one after it too. */
static void test_source__exact_limit(void **state)
{
    struct image im = {0};
    add_line(&im, EVENT_MAX_LINE, 0, 0);
    add_line(&im, 5, 'a', 0);
    add_line(&im, 3, 0, 0);
    add_line(&im, EVENT_MAX_LINE, 'q', 0);
    add_line(&im, EVENT_MAX_LINE, 0, 2); /* the last line, no newline */
    expect_image(*state, &im);

    /* the same after a short line, so the long one starts inside the buffer */
    struct image im2 = {0};
    add_line(&im2, 17, 0, 0);
    add_line(&im2, EVENT_MAX_LINE, 0, 0);
    add_line(&im2, 2, 'z', 2);
    expect_image(*state, &im2);
}

/*
 * The same file with CRLF line ends reads as the same lines: a line of
 * exactly EVENT_MAX_LINE bytes followed by "\r\n" is EVENT_MAX_LINE bytes
 * once its "\r" is removed, so it is not too long.
 */
static void test_source__exact_limit_crlf(void **state)
{
    struct image im = {0};
    add_line(&im, 40, 0, 1);
    add_line(&im, EVENT_MAX_LINE, 0, 1);
    add_line(&im, 8, 'k', 1);
    expect_image(*state, &im);
}

/* Lines over the limit: flagged, prefix kept, and the next line reads correctly. */
static void test_source__too_long(void **state)
{
    struct image im = {0};
    add_line(&im, 12, 0, 0);
    add_line(&im, EVENT_MAX_LINE + 1, 0, 0);          /* one byte over */
    add_line(&im, 30, 'n', 0);
    add_line(&im, 3 * MIB + 12345, 0, 0);             /* three buffers long */
    add_line(&im, EVENT_MAX_LINE + 700000, 'w', 1);   /* over, with CRLF */
    add_line(&im, 0, 0, 0);
    add_line(&im, 2 * MIB, 0, 0);                     /* exactly two buffers */
    add_line(&im, 2 * MIB + 1, 'v', 0);               /* two back to back */
    add_line(&im, 9, 0, 0);
    add_line(&im, EVENT_MAX_LINE + 1, 0, 2);          /* the last line, over, no newline */
    expect_image(*state, &im);

    /* a long line first in the file */
    struct image im2 = {0};
    add_line(&im2, EVENT_MAX_LINE + 2, 0, 0);
    add_line(&im2, 4, 'r', 0);
    expect_image(*state, &im2);
}

/* Lines placed so that one straddles the 1 MiB buffer boundary, and so do "\r\n" pairs. */
static void test_source__straddles_buffer(void **state)
{
    /* line 2 runs from just before the boundary to just after it */
    struct image a = {0};
    add_line(&a, MIB - 100, 0, 0);
    add_line(&a, 300, 0, 0);
    add_line(&a, 5, 's', 0);
    expect_image(*state, &a);

    /* the "\r" is the buffer's last byte and the "\n" the next buffer's first */
    struct image b = {0};
    add_line(&b, 100, 0, 0);                  /* 101 bytes with its "\n" */
    add_line(&b, MIB - 1 - 101, 0, 1);       /* its "\r" at byte MIB - 1 */
    add_line(&b, 6, 't', 1);
    expect_image(*state, &b);

    /* the first line's "\r" at byte MIB - 1, the line started at byte 0 */
    struct image c = {0};
    add_line(&c, MIB - 1, 0, 1);
    add_line(&c, 6, 'u', 0);
    expect_image(*state, &c);

    /* a "\n" as the last byte of the first MiB and of the second */
    struct image d = {0};
    add_line(&d, MIB - 1, 0, 0);
    add_line(&d, MIB - 1, 0, 0);
    add_line(&d, 0, 0, 0);
    add_line(&d, 7, 'x', 0);
    expect_image(*state, &d);
}

/* Many lines of varied lengths and ends (splitmix64 draws), plain and gzip. */
static void test_source__many_lines(void **state)
{
    struct image im = {0};
    uint64_t x = UINT64_C(0x5eed0fab7a11e5);
    while (im.data.n < 6 * MIB) {
        uint64_t z = (x += UINT64_C(0x9e3779b97f4a7c15));
        z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
        z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
        z ^= z >> 31;
        size_t len;
        switch (z % 16) {
        case 0:
            len = MIB / 2 + (size_t)(z >> 8) % MIB; /* 0.5 .. 1.5 MiB: some over the limit */
            break;
        case 1:
            len = 0;
            break;
        default:
            len = (size_t)(z >> 8) % 3000;
        }
        if (len == EVENT_MAX_LINE)
            len++; /* the exact limit is test_source__exact_limit's */
        add_line(&im, len, 0, (int)((z >> 40) % 2));
    }
    add_line(&im, 77, 0, 2);
    expect_image(*state, &im);
}

static void test_source__line_numbers_and_offset(void **state)
{
    struct fx *f = *state;
    static const char d[] = "a\n\nbb\r\nccc";
    char p[320];
    write_plain(f, d, sizeof d - 1, p, sizeof p);
    struct err e;
    err_clear(&e);
    struct source *s = source_open(p, &e);
    assert_non_null(s);
    assert_string_equal(source_name(s), p);
    assert_int_equal(source_line(s), 0);
    assert_int_equal(source_offset(s), 0);
    const char *line;
    size_t len;
    bool tl;
    for (uint64_t i = 1; i <= 4; i++) {
        assert_int_equal(source_next(s, &line, &len, &tl, &e), 1);
        assert_int_equal(source_line(s), i);
    }
    assert_int_equal(source_next(s, &line, &len, &tl, &e), 0);
    assert_int_equal(source_line(s), 4);
    /* the whole file consumed */
    assert_int_equal(source_offset(s), sizeof d - 1);
    source_close(s);
}

static void test_source__stdin(void **state)
{
    struct fx *f = *state;
    static const char d[] = "from\r\nstdin\n";
    char p[320];
    write_plain(f, d, sizeof d - 1, p, sizeof p);
    int saved = dup(STDIN_FILENO);
    assert_true(saved >= 0);
    int fd = open(p, O_RDONLY);
    assert_true(fd >= 0);
    assert_true(dup2(fd, STDIN_FILENO) >= 0);
    close(fd);
    struct err e;
    err_clear(&e);
    struct source *s = source_open("-", &e);
    assert_non_null(s);
    assert_string_equal(source_name(s), "<stdin>");
    const char *line;
    size_t len;
    bool tl;
    assert_int_equal(source_next(s, &line, &len, &tl, &e), 1);
    assert_int_equal(len, 4);
    assert_memory_equal(line, "from", 4);
    assert_int_equal(source_next(s, &line, &len, &tl, &e), 1);
    assert_int_equal(len, 5);
    assert_memory_equal(line, "stdin", 5);
    assert_int_equal(source_next(s, &line, &len, &tl, &e), 0);
    source_close(s);
    assert_true(dup2(saved, STDIN_FILENO) >= 0);
    close(saved);
}

/* ------------------------------------------------------------ error paths */

static void test_source__open_missing(void **state)
{
    struct fx *f = *state;
    char p[320];
    snprintf(p, sizeof p, "%s/no-such-file.jsonl", f->dir);
    struct err e;
    err_clear(&e);
    assert_null(source_open(p, &e));
    assert_int_equal(e.code, AB_EINPUT);
    assert_non_null(strstr(e.msg, p));
}

/* Runs a source to its end; returns the last source_next result. */
static int drain(struct source *s, struct err *e, uint64_t *lines)
{
    const char *line;
    size_t len;
    bool tl;
    int rc;
    *lines = 0;
    while ((rc = source_next(s, &line, &len, &tl, e)) == 1)
        (*lines)++;
    return rc;
}

/* A directory cannot be read as lines: an error naming it, at open or at the first read. */
static void test_source__directory(void **state)
{
    struct fx *f = *state;
    struct err e;
    err_clear(&e);
    struct source *s = source_open(f->dir, &e);
    if (s) {
        uint64_t n;
        assert_int_equal(drain(s, &e, &n), -1);
        source_close(s);
    }
    assert_int_equal(e.code, AB_EINPUT);
    assert_non_null(strstr(e.msg, f->dir));
}

/* Builds about 200 KiB of event-like lines. */
static void event_lines(struct byte_buf *b)
{
    for (int i = 0; i < 3000; i++) {
        char l[128];
        int n = snprintf(l, sizeof l,
                         "{\"kind\":\"outcome\",\"time\":%lld,\"unit\":\"u%07d\",\"metric\":\"m\",\"value\":%d.%03d}\n",
                         1793700000000LL + i * 7919LL, (i * 7907) % 1000003, i % 97, (i * 31) % 1000);
        buf_put(b, l, (size_t)n);
    }
}

/* Reads a whole file into b. */
static void slurp(const char *p, struct byte_buf *b)
{
    FILE *fp = fopen(p, "rb");
    assert_non_null(fp);
    char chunk[4096];
    size_t n;
    while ((n = fread(chunk, 1, sizeof chunk, fp)) > 0)
        buf_put(b, chunk, n);
    fclose(fp);
}

/*
 * A .gz file cut short (a copy interrupted, a disk full) is a read error, not
 * a shorter log: zlib's manual (gzread) says an incomplete gzip stream ends
 * the data and leaves Z_BUF_ERROR for gzerror() to report.
 */
static void test_source__truncated_gzip(void **state)
{
    struct fx *f = *state;
    struct byte_buf plain = {0}, gz = {0};
    event_lines(&plain);
    char p[320];
    write_gz(f, plain.p, plain.n, p, sizeof p);
    slurp(p, &gz);
    assert_true(gz.n > 1000);
    char cut[320];
    write_plain(f, gz.p, gz.n / 2, cut, sizeof cut);
    struct err e;
    err_clear(&e);
    struct source *s = source_open(cut, &e);
    assert_non_null(s);
    uint64_t n;
    int rc = drain(s, &e, &n);
    source_close(s);
    free(plain.p);
    free(gz.p);
    if (rc != -1)
        fail_msg("a gzip file cut to half its size read as %llu lines and a clean end", (unsigned long long)n);
    assert_int_equal(e.code, AB_EINPUT);
    assert_non_null(strstr(e.msg, cut));
}

/* A .gz file whose trailer CRC is wrong is a read error naming the file. */
static void test_source__corrupt_gzip(void **state)
{
    struct fx *f = *state;
    struct byte_buf plain = {0}, gz = {0};
    event_lines(&plain);
    char p[320];
    write_gz(f, plain.p, plain.n, p, sizeof p);
    slurp(p, &gz);
    gz.p[gz.n - 8] ^= 0x5a; /* the CRC-32 of RFC 1952's member trailer */
    char bad[320];
    write_plain(f, gz.p, gz.n, bad, sizeof bad);
    struct err e;
    err_clear(&e);
    struct source *s = source_open(bad, &e);
    assert_non_null(s);
    uint64_t n;
    int rc1 = drain(s, &e, &n);
    source_close(s);
    struct err e1 = e;

    /* damage inside the deflate data */
    err_clear(&e);
    gz.p[gz.n - 8] ^= 0x5a;
    for (size_t i = gz.n / 3; i < gz.n / 3 + 64; i++)
        gz.p[i] = (char)0xff;
    char bad2[320];
    write_plain(f, gz.p, gz.n, bad2, sizeof bad2);
    free(plain.p);
    free(gz.p);
    s = source_open(bad2, &e);
    assert_non_null(s);
    int rc2 = drain(s, &e, &n);
    source_close(s);

    assert_int_equal(rc1, -1);
    assert_int_equal(e1.code, AB_EINPUT);
    assert_non_null(strstr(e1.msg, bad));
    assert_int_equal(rc2, -1);
    assert_int_equal(e.code, AB_EINPUT);
    assert_non_null(strstr(e.msg, bad2));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_source__plain_lines, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__last_line_without_newline, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__crlf, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__empty_lines, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__gzip_members, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__exact_limit, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__exact_limit_crlf, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__too_long, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__straddles_buffer, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__many_lines, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__line_numbers_and_offset, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__stdin, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__open_missing, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__directory, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__truncated_gzip, setup, teardown),
        cmocka_unit_test_setup_teardown(test_source__corrupt_gzip, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
