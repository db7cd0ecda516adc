/*
 * render_text.c — the terminal readout (see render.h).
 *
 * Layout: a title line; the verdict in capitals with what it means; the
 * reasons, failures first; units per arm with the SRM p-values; a table of
 * estimates with aligned columns. Colour (verdict and failed checks) only
 * when asked, i.e. on a terminal without NO_COLOR.
 */
#include "render.h"

#include <math.h>
#include <string.h>

#define C_RED "\033[31;1m"
#define C_YEL "\033[33;1m"
#define C_GRN "\033[32;1m"
#define C_DIM "\033[2m"
#define C_OFF "\033[0m"

static const char *paint(bool colour, const char *c)
{
    return colour ? c : "";
}

/* Formats a number for a table cell: "-" when null. */
static void num(char *buf, size_t n, const json_t *v, const char *fmt)
{
    if (!v || !json_is_number(v))
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, fmt, json_number_value(v));
}

static void pval(char *buf, size_t n, const json_t *v)
{
    if (!v || !json_is_number(v)) {
        snprintf(buf, n, "-");
        return;
    }
    double p = json_number_value(v);
    if (p < 1e-4)
        snprintf(buf, n, "<0.0001");
    else
        snprintf(buf, n, "%.4f", p);
}

static void interval(char *buf, size_t n, const json_t *a, const char *fmt)
{
    char lo[32], hi[32];
    num(lo, sizeof lo, json_array_get(a, 0), fmt);
    num(hi, sizeof hi, json_array_get(a, 1), fmt);
    snprintf(buf, n, "[%s, %s]", lo, hi);
}

int render_text(FILE *f, const json_t *rec, bool colour)
{
    const json_t *integ = json_object_get(rec, "integrity");
    const char *verdict = json_string_value(json_object_get(integ, "verdict"));
    if (!verdict)
        verdict = "sound";
    fprintf(f, "abtally check · %s · data up to %s\n\n",
            json_string_value(json_object_get(rec, "exp")),
            json_string_value(json_object_get(rec, "time")));
    const char *col = !strcmp(verdict, "failed") ? C_RED : !strcmp(verdict, "doubtful") ? C_YEL : C_GRN;
    const char *meaning = !strcmp(verdict, "failed")
                              ? "randomization or data integrity failed: do not trust the estimates"
                          : !strcmp(verdict, "doubtful")
                              ? "warnings below: read the estimates with care"
                              : "no integrity check raised a concern";
    char up[16];
    size_t i;
    for (i = 0; verdict[i] && i < sizeof up - 1; i++)
        up[i] = (char)(verdict[i] >= 'a' && verdict[i] <= 'z' ? verdict[i] - 32 : verdict[i]);
    up[i] = '\0';
    fprintf(f, "Verdict   %s%s%s  %s\n", paint(colour, col), up, paint(colour, C_OFF), meaning);

    const json_t *reasons = json_object_get(integ, "reasons");
    if (json_array_size(reasons)) {
        fprintf(f, "\nReasons\n");
        for (int pass = 0; pass < 2; pass++) {
            size_t k;
            const json_t *r;
            json_array_foreach(reasons, k, r)
            {
                bool fail = !strcmp(json_string_value(json_object_get(r, "severity")), "fail");
                if (fail != (pass == 0))
                    continue;
                fprintf(f, "  %s%-4s%s %-18s %s\n", paint(colour, fail ? C_RED : C_YEL),
                        fail ? "FAIL" : "warn", paint(colour, C_OFF),
                        json_string_value(json_object_get(r, "check")),
                        json_string_value(json_object_get(r, "detail")));
            }
        }
    }

    fprintf(f, "\nUnits    ");
    const char *arm;
    const json_t *v;
    json_object_foreach((json_t *)json_object_get(rec, "units"), arm, v)
        fprintf(f, "  %s %lld", arm, (long long)json_integer_value(v));
    const json_t *srm = json_object_get(rec, "srm");
    char p1[32], p2[32];
    pval(p1, sizeof p1, json_object_get(srm, "p"));
    pval(p2, sizeof p2, json_object_get(srm, "p_seq"));
    fprintf(f, "\nSRM       chi-square p %s · always-valid p %s%s\n", p1, p2,
            json_is_true(json_object_get(srm, "alarm")) ? "  (mismatch)" : "");
    fprintf(f, "Lines     %lld read, %lld accepted\n",
            (long long)json_integer_value(json_object_get(integ, "lines_read")),
            (long long)json_integer_value(json_object_get(integ, "accepted")));

    const json_t *rows = json_object_get(rec, "metrics");
    if (!json_array_size(rows))
        return ferror(f) ? -1 : 0;
    fprintf(f, "\nEstimates (arm vs control; intervals at the config's alpha)\n");
    fprintf(f, "  %-18s %-12s %9s %12s %12s %12s %26s %9s %9s %9s\n", "metric", "arm", "n", "mean",
            "control", "diff", "interval", "lift", "p", "p adj");
    size_t k;
    const json_t *r;
    json_array_foreach(rows, k, r)
    {
        char mean[32], ctl[32], diff[32], ci[80], lift[32], p[32], pa[32];
        num(mean, sizeof mean, json_object_get(r, "mean"), "%.5g");
        num(ctl, sizeof ctl, json_object_get(r, "control_mean"), "%.5g");
        num(diff, sizeof diff, json_object_get(r, "diff"), "%+.4g");
        interval(ci, sizeof ci, json_object_get(r, "ci"), "%.4g");
        const json_t *l = json_object_get(r, "lift");
        if (json_is_number(l))
            snprintf(lift, sizeof lift, "%+.2f%%", 100 * json_number_value(l));
        else
            snprintf(lift, sizeof lift, "-");
        const char *role = json_string_value(json_object_get(r, "role"));
        bool guard = role && !strcmp(role, "guardrail");
        pval(p, sizeof p, json_object_get(r, guard ? "p_harm" : "p"));
        pval(pa, sizeof pa, json_object_get(r, "p_adjusted"));
        char name[40];
        snprintf(name, sizeof name, "%s%s", json_string_value(json_object_get(r, "metric")),
                 guard ? " (g)" : "");
        bool harm = json_is_true(json_object_get(r, "harm"));
        fprintf(f, "  %-18s %-12s %9lld %12s %12s %12s %26s %9s %9s %s%9s%s\n", name,
                json_string_value(json_object_get(r, "arm")),
                (long long)json_integer_value(json_object_get(r, "n")), mean, ctl, diff, ci, lift, p,
                paint(colour && harm, C_RED), pa, paint(colour && harm, C_OFF));
    }
    fprintf(f, "%s  (g) guardrail: p is one-sided for harm; p adj is Holm across primary metrics "
               "(guardrails: across guardrails)%s\n",
            paint(colour, C_DIM), paint(colour, C_OFF));
    /* the sequential test, when the config asks for one */
    bool head = false;
    json_array_foreach(rows, k, r)
    {
        const char *v = json_string_value(json_object_get(r, "verdict"));
        if (!v)
            continue;
        if (!head) {
            fprintf(f, "\nSequential test\n");
            head = true;
        }
        char what[160];
        const json_t *b = json_object_get(r, "bound"), *cs = json_object_get(r, "cs");
        const json_t *ca = json_object_get(r, "ci_always");
        if (json_is_number(b)) {
            char z[32], bd[32], info[32];
            num(z, sizeof z, json_object_get(r, "z"), "%+.3f");
            num(bd, sizeof bd, b, "%.3f");
            num(info, sizeof info, json_object_get(r, "info"), "%.2f");
            snprintf(what, sizeof what, "z %s against bound %s at information fraction %s", z, bd, info);
        } else if (json_is_array(cs) || json_is_array(ca)) {
            char iv[80], pa[32];
            interval(iv, sizeof iv, json_is_array(cs) ? cs : ca, "%.4g");
            pval(pa, sizeof pa, json_object_get(r, "p_always"));
            snprintf(what, sizeof what, "always-valid interval %s, always-valid p %s", iv, pa);
        } else {
            snprintf(what, sizeof what, "no look yet");
        }
        bool crossed = !strncmp(v, "crossed", 7);
        fprintf(f, "  %-18s %-12s %s%-14s%s %s\n", json_string_value(json_object_get(r, "metric")),
                json_string_value(json_object_get(r, "arm")), paint(colour && crossed, C_GRN), v,
                paint(colour && crossed, C_OFF), what);
    }
    return ferror(f) ? -1 : 0;
}
