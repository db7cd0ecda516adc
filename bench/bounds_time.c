/*
 * bounds_time.c — how long the efficacy bounds of a 50-look design take
 * (seq_bounds, seq.h), for `make bench`: O'Brien-Fleming-type spending,
 * alpha 0.05, two sides, 50 equally spaced looks, the default grid, as
 * `abtally plan --looks 50 --spending obf` computes them.
 *
 * usage: bounds_time [LOOKS [REPEATS]]   (defaults 50 and 21)
 * prints: looks median_ms min_ms max_ms last_z
 */
#include <stdio.h>
#include <stdlib.h>

#include "err.h"
#include "seq.h"
#include "timefmt.h"

static int cmp(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int main(int argc, char **argv)
{
    int k = argc > 1 ? atoi(argv[1]) : 50;
    int reps = argc > 2 ? atoi(argv[2]) : 21;
    if (k < 1 || k > SEQ_MAX_LOOKS || reps < 1 || reps > 1000) {
        fprintf(stderr, "usage: bounds_time [LOOKS [REPEATS]]\n");
        return 2;
    }
    struct seq_design d = {.shape = SEQ_OBF, .gamma = -4, .alpha = 0.05, .sides = 2, .r = 0};
    double *t = malloc((size_t)k * sizeof *t);
    struct seq_look *out = malloc((size_t)k * sizeof *out);
    double *ms = malloc((size_t)reps * sizeof *ms);
    if (!t || !out || !ms)
        return 1;
    seq_equal_fractions(k, t);
    struct err e;
    err_clear(&e);
    for (int i = 0; i < reps; i++) {
        double t0 = time_mono_s();
        if (seq_bounds(&d, k, t, out, &e)) {
            fprintf(stderr, "bounds_time: %s\n", e.msg);
            return 1;
        }
        ms[i] = 1e3 * (time_mono_s() - t0);
    }
    qsort(ms, (size_t)reps, sizeof *ms, cmp);
    printf("%d %.3f %.3f %.3f %.6f\n", k, ms[reps / 2], ms[0], ms[reps - 1], out[k - 1].z);
    free(t);
    free(out);
    free(ms);
    return 0;
}
