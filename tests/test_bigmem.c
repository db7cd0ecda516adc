/*
 * test_bigmem.c — the ledger's large allocations (bigmem.h): zeroed blocks,
 * and regions that grow in place keeping their contents.
 *
 * The expected values are facts of the interface, not measurements: a block
 * reads as zero, a region keeps what was written and reads as zero beyond
 * its old length (common practice for growable tables; nothing to cite).
 */
#include <stdint.h>
#include <string.h>

#include "bigmem.h"
#include "helpers.h"

#define MiB ((size_t)1 << 20)

static void test_bigmem__blocks_are_zeroed(void **state)
{
    (void)state;
    size_t sizes[] = {1, 100, 256 * 1024, 4 * MiB + 3};
    for (size_t k = 0; k < sizeof sizes / sizeof sizes[0]; k++) {
        unsigned char *p = big_alloc(sizes[k], true);
        assert_non_null(p);
        assert_int_equal(p[0], 0);
        assert_int_equal(p[sizes[k] - 1], 0);
        assert_int_equal((uintptr_t)p % 64, 0); /* a cache line at least */
        memset(p, 0xab, sizes[k]);
        big_free(p, sizes[k]);
    }
}

/* Writes a pattern at every 4 KiB of [from, to) (sparse: little memory). */
static void mark(unsigned char *p, size_t from, size_t to)
{
    for (size_t o = from; o < to; o += 4096)
        p[o] = (unsigned char)(o / 4096 * 7 + 1);
}

static void check(const unsigned char *p, size_t from, size_t to)
{
    for (size_t o = from; o < to; o += 4096)
        assert_int_equal(p[o], (unsigned char)(o / 4096 * 7 + 1));
}

static void test_bigmem__region_grows_in_place_keeping_contents(void **state)
{
    (void)state;
    struct big_region g = {0};
    assert_int_equal(big_region_grow(&g, 3 * MiB, true), 0);
    assert_non_null(g.p);
    assert_true(g.used >= 3 * MiB);
    assert_int_equal((uintptr_t)g.p % (2 * MiB), 0); /* room for huge pages */
    assert_true(g.reserved >= 64 * g.used);
    char *first = g.p;
    mark((unsigned char *)g.p, 0, 3 * MiB);
    size_t old = 3 * MiB;
    for (size_t len = 8 * MiB; len <= 64 * MiB; len *= 2) {
        assert_int_equal(big_region_grow(&g, len, true), 0);
        assert_ptr_equal(g.p, first); /* within the reserve: not moved */
        check((unsigned char *)g.p, 0, old);
        for (size_t o = old; o < len; o += 4096)
            assert_int_equal(((unsigned char *)g.p)[o], 0); /* the new part reads as zero */
        assert_int_equal(((unsigned char *)g.p)[len - 1], 0);
        mark((unsigned char *)g.p, old, len);
        old = len;
    }
    /* asking for less, or the same, changes nothing */
    size_t used = g.used;
    assert_int_equal(big_region_grow(&g, MiB, true), 0);
    assert_int_equal(g.used, used);
    check((unsigned char *)g.p, 0, 64 * MiB);
    big_region_free(&g);
    assert_null(g.p);
    assert_int_equal(g.used, 0);
    big_region_free(&g); /* twice is harmless */
}

/* Past its reserve (256 MiB for a first length of 2 MiB) a region moves:
 * with `keep` its contents come along, without it the new one reads zero. */
static void test_bigmem__region_moves_past_its_reserve(void **state)
{
    (void)state;
    for (int keep = 0; keep < 2; keep++) {
        struct big_region g = {0};
        assert_int_equal(big_region_grow(&g, 2 * MiB, keep), 0);
        mark((unsigned char *)g.p, 0, 2 * MiB);
        char *first = g.p;
        size_t reserved = g.reserved;
        assert_int_equal(big_region_grow(&g, reserved + MiB, keep), 0);
        assert_ptr_not_equal(g.p, first);
        assert_true(g.used >= reserved + MiB);
        assert_true(g.reserved >= g.used);
        if (keep)
            check((unsigned char *)g.p, 0, 2 * MiB);
        else
            for (size_t o = 0; o < 2 * MiB; o += 4096)
                assert_int_equal(((unsigned char *)g.p)[o], 0);
        /* the rest reads as zero (untouched pages: nothing is allocated to read them) */
        for (size_t o = 2 * MiB; o < g.used; o += 1024 * 1024)
            assert_int_equal(((unsigned char *)g.p)[o], 0);
        assert_int_equal(((unsigned char *)g.p)[g.used - 1], 0);
        big_region_free(&g);
    }
}

/* A trimmed region (its reserve given back) moves at its next growth,
 * contents kept; huge_from survives a free (set once by the owner). */
static void test_bigmem__trimmed_region_moves_at_next_growth(void **state)
{
    (void)state;
    struct big_region g = {.huge_from = 4 * MiB};
    assert_int_equal(big_region_grow(&g, 2 * MiB, true), 0);
    mark((unsigned char *)g.p, 0, 2 * MiB);
    big_region_trim(&g);
    assert_int_equal(g.reserved, g.used);
    big_region_trim(&g); /* twice is harmless */
    char *first = g.p;
    assert_int_equal(big_region_grow(&g, 6 * MiB, true), 0);
    assert_ptr_not_equal(g.p, first);
    check((unsigned char *)g.p, 0, 2 * MiB);
    for (size_t o = 2 * MiB; o < 6 * MiB; o += 4096)
        assert_int_equal(((unsigned char *)g.p)[o], 0);
    assert_true(g.reserved >= 64 * g.used); /* a full reserve again */
    big_region_free(&g);
    assert_int_equal(g.huge_from, 4 * MiB);
}

/* A size whose reserve would overflow is refused, and the region stays as it was. */
static void test_bigmem__region_refuses_impossible_sizes(void **state)
{
    (void)state;
    struct big_region g = {0};
    assert_int_equal(big_region_grow(&g, SIZE_MAX - 5, true), -1);
    assert_null(g.p);
    assert_int_equal(big_region_grow(&g, 2 * MiB, true), 0);
    char *p = g.p;
    assert_int_equal(big_region_grow(&g, SIZE_MAX / 2, true), -1);
    assert_ptr_equal(g.p, p);
    assert_int_equal(g.used, 2 * MiB);
    big_region_free(&g);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_bigmem__blocks_are_zeroed),
        cmocka_unit_test(test_bigmem__region_grows_in_place_keeping_contents),
        cmocka_unit_test(test_bigmem__region_moves_past_its_reserve),
        cmocka_unit_test(test_bigmem__trimmed_region_moves_at_next_growth),
        cmocka_unit_test(test_bigmem__region_refuses_impossible_sizes),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
