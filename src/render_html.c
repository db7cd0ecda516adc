/*
 * render_html.c — the HTML readout (see render.h): one self-contained page
 * drawn from the final record and the records before it.
 *
 * Layout, top to bottom: a title block; the verdict with what it means and
 * the reasons (failures first); one plain sentence per metric and arm; the
 * path of each effect over time (primaries first) with its interval band,
 * the zero line and the sequential bound or always-valid band; units per arm
 * per day with each day's SRM p; the integrity checklist and the counters;
 * the table of every estimate. Every chart is an inline SVG with a title, a
 * description and a table of its numbers beside it.
 *
 * Must never: emit a script, refer to anything outside the file, or put a
 * string from the data into the page unescaped (esc() does all of them).
 * Missing or null numbers are drawn as gaps and printed as a dash.
 */
#include "render.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "timefmt.h"

#define DASH "\xe2\x80\x93"   /* en dash: a missing number */
#define MINUS "\xe2\x88\x92"  /* the minus sign */
#define NNBSP "\xe2\x80\xaf"  /* narrow no-break space: thousands */
#define MAX_ARMS 64

/* ------------------------------------------------------------------ */
/* reading the record                                                  */

static double num(const json_t *v)
{
    return json_is_number(v) ? json_number_value(v) : NAN;
}

static double get(const json_t *o, const char *k)
{
    return num(json_object_get(o, k));
}

static const char *str(const json_t *o, const char *k)
{
    return json_string_value(json_object_get(o, k));
}

static double pair_at(const json_t *o, const char *k, size_t i)
{
    return num(json_array_get(json_object_get(o, k), i));
}

static bool eq(const char *a, const char *b)
{
    return a && b && !strcmp(a, b);
}

/* The row of metric m and arm a in a record, or NULL. */
static const json_t *find_row(const json_t *rec, const char *m, const char *a)
{
    size_t i;
    const json_t *r;
    json_array_foreach(json_object_get(rec, "metrics"), i, r)
        if (eq(str(r, "metric"), m) && eq(str(r, "arm"), a))
            return r;
    return NULL;
}

/* ------------------------------------------------------------------ */
/* writing                                                             */

/* Writes s escaped for HTML text and attribute values; C0 controls other
 * than tab and newline become U+FFFD. */
static void esc(FILE *f, const char *s)
{
    if (!s)
        return;
    for (; *s; s++) {
        unsigned char c = (unsigned char)*s;
        switch (c) {
        case '&': fputs("&amp;", f); break;
        case '<': fputs("&lt;", f); break;
        case '>': fputs("&gt;", f); break;
        case '"': fputs("&quot;", f); break;
        case '\'': fputs("&#39;", f); break;
        default:
            if ((c < 0x20 && c != '\t' && c != '\n') || c == 0x7f)
                fputs("\xef\xbf\xbd", f);
            else
                fputc(c, f);
        }
    }
}

/* A growing text buffer (sentences and chart labels are built in plain
 * text, then escaped as a whole). */
struct sb {
    char *s;
    size_t n, cap;
};

static void sb_add(struct sb *b, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

static void sb_add(struct sb *b, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int k = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (k < 0)
        return;
    if (b->n + (size_t)k + 1 > b->cap) {
        size_t cap = (b->cap ? b->cap * 2 : 256) + (size_t)k;
        char *s = realloc(b->s, cap);
        if (!s)
            return;
        b->s = s;
        b->cap = cap;
    }
    va_start(ap, fmt);
    vsnprintf(b->s + b->n, b->cap - b->n, fmt, ap);
    va_end(ap);
    b->n += (size_t)k;
}

static const char *sb_str(const struct sb *b)
{
    return b->s ? b->s : "";
}

/* Copies t into out with every '-' as a true minus sign. */
static void minus_copy(char *out, size_t n, const char *t)
{
    size_t k = 0;
    for (; *t && k + 4 < n; t++) {
        if (*t == '-') {
            memcpy(out + k, MINUS, 3);
            k += 3;
        } else
            out[k++] = *t;
    }
    out[k] = '\0';
}

/* A number with `sig` significant digits; a dash when not finite. */
static void fnum(char *out, size_t n, double x, int sig, bool sign)
{
    if (!isfinite(x)) {
        snprintf(out, n, DASH);
        return;
    }
    char t[64];
    if (x == 0)
        snprintf(t, sizeof t, "0");
    else
        snprintf(t, sizeof t, sign ? "%+.*g" : "%.*g", sig, x);
    minus_copy(out, n, t);
}

/* A share as a percentage, e.g. "+3.8%"; a dash when not finite. */
static void fpct(char *out, size_t n, double x, bool sign)
{
    if (!isfinite(x)) {
        snprintf(out, n, DASH);
        return;
    }
    double v = 100 * x;
    char t[64];
    int d = fabs(v) >= 0.095 || v == 0 ? 1 : 2;
    snprintf(t, sizeof t, sign ? "%+.*f%%" : "%.*f%%", d, v);
    minus_copy(out, n, t);
}

/* A p-value for people. */
static void fp(char *out, size_t n, double p)
{
    if (!isfinite(p))
        snprintf(out, n, DASH);
    else if (p >= 0.9995)
        snprintf(out, n, "1");
    else if (p >= 0.01)
        snprintf(out, n, "%.2f", p);
    else if (p >= 0.001)
        snprintf(out, n, "%.3f", p);
    else if (p >= 0.0001)
        snprintf(out, n, "%.4f", p);
    else
        snprintf(out, n, "< 0.0001");
}

/* "= 0.42" or "< 0.0001": a p-value after "p ". */
static void fpe(char *out, size_t n, double p)
{
    char t[24];
    fp(t, sizeof t, p);
    snprintf(out, n, "%s%s", t[0] == '<' ? "" : "= ", t);
}

/* A p-value in a few characters, for the strip under the daily bars. */
static void fp_short(char *out, size_t n, double p)
{
    if (!isfinite(p))
        snprintf(out, n, DASH);
    else if (p >= 0.995)
        snprintf(out, n, "1");
    else if (p >= 0.01)
        snprintf(out, n, ".%02d", (int)lround(p * 100));
    else if (p >= 0.001)
        snprintf(out, n, ".%03d", (int)lround(p * 1000));
    else
        snprintf(out, n, "<.001");
}

/* Makes a formatted number safe to print into HTML as it is: '<' → "&lt;". */
static void lt_fix(char *s, size_t n)
{
    char t[64];
    size_t k = 0;
    for (const char *p = s; *p && k + 5 < sizeof t; p++) {
        if (*p == '<') {
            memcpy(t + k, "&lt;", 4);
            k += 4;
        } else
            t[k++] = *p;
    }
    if (!n)
        return;
    size_t m = k < n ? k : n - 1;
    memcpy(s, t, m);
    s[m] = '\0';
}

/* A count with thin spaces between thousands; a dash when not finite. */
static void fcountd(char *out, size_t n, double x)
{
    if (!isfinite(x) || fabs(x) > 9e15) {
        fnum(out, n, x, 6, false);
        return;
    }
    long long k = (long long)llround(x);
    char t[32];
    snprintf(t, sizeof t, "%lld", k < 0 ? -k : k);
    size_t len = strlen(t), o = 0;
    if (k < 0 && o + 4 < n) {
        memcpy(out, MINUS, 3);
        o = 3;
    }
    for (size_t i = 0; i < len && o + 5 < n; i++) {
        if (i && (len - i) % 3 == 0) {
            memcpy(out + o, NNBSP, 3);
            o += 3;
        }
        out[o++] = t[i];
    }
    out[o] = '\0';
}

/* The same for a JSON value; a dash when it is not a number. */
static void fcount(char *out, size_t n, const json_t *v)
{
    fcountd(out, n, num(v));
}

/* ------------------------------------------------------------------ */
/* time                                                                */

static const char *const month_names[] = {"Jan", "Feb", "Mar", "Apr", "May", "Jun",
                                          "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"};

/* Days since 1970-01-01 to a civil date (proleptic Gregorian). */
static void civil(int64_t days, int *y, int *m, int *d)
{
    int64_t z = days + 719468;
    int64_t era = (z >= 0 ? z : z - 146096) / 146097;
    int64_t doe = z - era * 146097;
    int64_t yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
    int64_t doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    int64_t mp = (5 * doy + 2) / 153;
    *d = (int)(doy - (153 * mp + 2) / 5 + 1);
    *m = (int)(mp < 10 ? mp + 3 : mp - 9);
    *y = (int)(yoe + era * 400 + (*m <= 2));
}

static int64_t floor_div(int64_t a, int64_t b)
{
    int64_t q = a / b;
    return (a % b != 0 && (a < 0) != (b < 0)) ? q - 1 : q;
}

/* "3 Nov" (with_year: "3 Nov 2026"). */
static void fday(char *out, size_t n, double sec, bool with_year)
{
    int y, m, d;
    civil(floor_div((int64_t)floor(sec), 86400), &y, &m, &d);
    if (with_year)
        snprintf(out, n, "%d %s %d", d, month_names[m - 1], y);
    else
        snprintf(out, n, "%d %s", d, month_names[m - 1]);
}

/* "15 Nov 2026, 23:59 UTC". */
static void fwhen(char *out, size_t n, double sec)
{
    char d[32];
    fday(d, sizeof d, sec, true);
    int64_t s = (int64_t)floor(sec);
    int64_t r = s - floor_div(s, 86400) * 86400;
    snprintf(out, n, "%s, %02d:%02d UTC", d, (int)(r / 3600), (int)(r % 3600 / 60));
}

/* "2026-11-03": the UTC date of a time in seconds. */
static void fiso(char *out, size_t n, double sec)
{
    int y, m, d;
    civil(floor_div((int64_t)floor(sec), 86400), &y, &m, &d);
    snprintf(out, n, "%04d-%02d-%02d", y, m, d);
}

/* A record's time in seconds since the epoch; NaN when absent or malformed. */
static double rec_time(const json_t *rec)
{
    const json_t *t = json_object_get(rec, "time");
    int64_t us;
    if (json_is_string(t) && !time_parse_rfc3339(json_string_value(t), json_string_length(t), &us))
        return (double)us / 1e6;
    if (json_is_number(t) && !time_from_epoch_ms(json_number_value(t), &us))
        return (double)us / 1e6;
    return NAN;
}

/* ------------------------------------------------------------------ */
/* the page                                                            */

struct page {
    FILE *f;
    const json_t *rec;      /* the final record */
    const json_t **path;    /* records in time order, the final record last */
    double *t;              /* their times (seconds; NaN unknown) */
    double *x;              /* chart abscissa: t, or the index when times are unknown */
    size_t n;
    bool x_is_time;
    const char *verdict;    /* sound, doubtful or failed */
    const char *control;    /* the control arm's name (or NULL) */
    const char *arms[MAX_ARMS]; /* arm names, in the order of rec.units */
    int n_arms;
    double q;               /* z quantile of the intervals (NaN unknown) */
    double level;           /* their coverage, e.g. 0.95 (NaN unknown) */
    int id;                 /* for element ids */
};

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

/* The intervals' quantile: the record does not carry alpha, so it is read
 * back from rows of z tests, where half-width = q·se with se = |diff/z|, or
 * se = |diff| / Φ⁻¹(1 − p/2) (not for binary metrics, whose p is pooled).
 * The median over every row of every record, snapped to a usual level. */
static void derive_level(struct page *P)
{
    size_t cap = 0, k = 0;
    for (size_t i = 0; i < P->n; i++)
        cap += 2 * json_array_size(json_object_get(P->path[i], "metrics"));
    double *c = calloc(cap ? cap : 1, sizeof *c);
    P->q = P->level = NAN;
    if (!c)
        return;
    for (size_t i = 0; i < P->n; i++) {
        size_t j;
        const json_t *r;
        json_array_foreach(json_object_get(P->path[i], "metrics"), j, r)
        {
            if (!eq(str(r, "test"), "z"))
                continue;
            double d = get(r, "diff"), lo = pair_at(r, "ci", 0), hi = pair_at(r, "ci", 1);
            double h = (hi - lo) / 2, z = get(r, "z"), p = get(r, "p");
            if (!isfinite(d) || !isfinite(h) || !(h > 0) || d == 0)
                continue;
            if (isfinite(z) && fabs(z) > 0.1 && k < cap)
                c[k++] = h * fabs(z) / fabs(d);
            if (!eq(str(r, "type"), "binary") && p > 1e-12 && p < 0.9 && k < cap)
                c[k++] = h * gsl_cdf_ugaussian_Qinv(p / 2) / fabs(d);
        }
    }
    if (k) {
        qsort(c, k, sizeof *c, cmp_double);
        double q = k % 2 ? c[k / 2] : (c[k / 2 - 1] + c[k / 2]) / 2;
        static const double usual[] = {0.8, 0.9, 0.95, 0.975, 0.98, 0.99, 0.995, 0.999};
        if (isfinite(q) && q > 0) {
            P->q = q;
            P->level = 1 - 2 * gsl_cdf_ugaussian_Q(q);
            for (size_t u = 0; u < sizeof usual / sizeof *usual; u++) {
                double qu = gsl_cdf_ugaussian_Qinv((1 - usual[u]) / 2);
                if (fabs(q - qu) < 0.01 * qu) {
                    P->q = qu;
                    P->level = usual[u];
                }
            }
        }
    }
    free(c);
}

/* "95% interval" or "interval". */
static void level_words(const struct page *P, char *out, size_t n)
{
    if (!isfinite(P->level))
        snprintf(out, n, "interval");
    else if (fabs(P->level * 100 - round(P->level * 100)) < 1e-6)
        snprintf(out, n, "%.0f%% interval", P->level * 100);
    else
        snprintf(out, n, "%.1f%% interval", P->level * 100);
}

/* The standard error of a row: the interval's half-width over the
 * quantile, else |diff / z|. NaN when neither is known. */
static double row_se(const struct page *P, const json_t *r)
{
    double lo = pair_at(r, "ci", 0), hi = pair_at(r, "ci", 1);
    if (isfinite(P->q) && isfinite(lo) && isfinite(hi) && eq(str(r, "test"), "z"))
        return (hi - lo) / (2 * P->q);
    double d = get(r, "diff"), z = get(r, "z");
    if (isfinite(d) && isfinite(z) && z != 0)
        return fabs(d / z);
    return NAN;
}

/* The sequential method of a row: 0 none, 1 spending, 2 mixture, 3 sequence. */
static int seq_kind(const json_t *r)
{
    if (json_object_get(r, "bound"))
        return 1;
    if (json_object_get(r, "ci_always"))
        return 2;
    if (json_object_get(r, "cs"))
        return 3;
    return 0;
}

static const char *seq_label(const char *v)
{
    if (!v)
        return DASH;
    if (!strcmp(v, "crossed-upper"))
        return "crossed the upper bound";
    if (!strcmp(v, "crossed-lower"))
        return "crossed the lower bound";
    if (!strcmp(v, "running"))
        return "not crossed";
    if (!strcmp(v, "burn-in"))
        return "burn-in";
    if (!strcmp(v, "futile"))
        return "stopped: futile";
    return v;
}

/* Does reason `check` name metric m (details start "metric: ")? */
static const json_t *reason_for(const struct page *P, const char *check, const char *m)
{
    size_t i;
    const json_t *r;
    size_t ml = m ? strlen(m) : 0;
    json_array_foreach(json_object_get(json_object_get(P->rec, "integrity"), "reasons"), i, r)
    {
        const char *d = str(r, "detail");
        if (eq(str(r, "check"), check) && d && m && !strncmp(d, m, ml) && d[ml] == ':')
            return r;
    }
    return NULL;
}

/* ------------------------------------------------------------------ */
/* style                                                               */

static const char css[] =
    ":root{--ink:#1d2833;--muted:#5c6873;--rule:#ddd7cb;--paper:#f8f6f1;--card:#fffefb;"
    "--sound:#2e6a4e;--doubt:#8f5f00;--fail:#a3302d;--na:#7b8590;"
    "--eff:#27406e;--band:#c9d4e9;--av:#ead9b8;--bound:#a0522d;}\n"
    "*{box-sizing:border-box}\n"
    "html{-webkit-text-size-adjust:100%;text-size-adjust:100%}\n"
    "body{margin:0;background:var(--paper);color:var(--ink);"
    "font:16px/1.55 system-ui,-apple-system,'Segoe UI',Roboto,'Noto Sans','Liberation Sans',sans-serif}\n"
    "main{max-width:58rem;margin:0 auto;padding:1.25rem 1rem 3rem}\n"
    "h1,h2,h3{font-family:Charter,'Bitstream Charter','Sitka Text',Cambria,'Liberation Serif',Georgia,serif;"
    "font-weight:600;line-height:1.2;margin:0}\n"
    "h1{font-size:clamp(1.5rem,4.5vw,2.2rem);overflow-wrap:anywhere}\n"
    "h2{font-size:1.35rem;margin-bottom:.6rem}\n"
    "h2 .no{display:inline-block;min-width:1.6em;color:var(--muted);font-weight:400}\n"
    "h3{font-size:1.05rem;overflow-wrap:anywhere}\n"
    "h3 .role{font-family:system-ui,-apple-system,'Segoe UI',Roboto,'Noto Sans','Liberation Sans',sans-serif}\n"
    "p{margin:.4rem 0}\n"
    ".kicker{text-transform:uppercase;letter-spacing:.14em;font-size:.75rem;color:var(--muted);margin:0 0 .3rem}\n"
    ".meta{color:var(--muted);margin:.35rem 0 0}\n"
    "header.top{padding:.5rem 0 1rem;border-bottom:2px solid var(--ink);margin-bottom:1rem}\n"
    "nav.toc{font-size:.9rem;margin:.7rem 0 0;display:flex;flex-wrap:wrap;gap:.3rem 1rem}\n"
    "nav.toc a{color:var(--eff);text-decoration:none;border-bottom:1px solid var(--band)}\n"
    "section{background:var(--card);border:1px solid var(--rule);border-radius:.4rem;"
    "padding:1rem 1.1rem;margin:0 0 1.1rem}\n"
    ".verdict{border-left:.55rem solid var(--vc)}\n"
    ".v-sound{--vc:var(--sound);background:#f1f6f2}\n"
    ".v-doubtful{--vc:var(--doubt);background:#fbf5e8}\n"
    ".v-failed{--vc:var(--fail);background:#f9eeec}\n"
    ".vhead{display:flex;align-items:center;gap:.8rem}\n"
    ".vhead svg{width:2.6rem;height:2.6rem;flex:none}\n"
    ".vword{font-size:1.9rem;color:var(--vc);text-transform:capitalize}\n"
    ".vmean{font-size:1.05rem;margin:.6rem 0 .2rem}\n"
    "ul.reasons{list-style:none;padding:0;margin:.6rem 0 0}\n"
    "ul.reasons li{padding:.35rem 0 .35rem .2rem;border-top:1px solid var(--rule);overflow-wrap:anywhere}\n"
    ".tag{display:inline-block;min-width:3.4em;font-size:.72rem;font-weight:700;letter-spacing:.08em;"
    "text-transform:uppercase;text-align:center;border:1.5px solid currentColor;border-radius:.25rem;"
    "padding:0 .3em;margin-right:.5em;vertical-align:.1em}\n"
    ".s-fail{color:var(--fail)}.s-warn{color:var(--doubt)}.s-pass{color:var(--sound)}.s-na{color:var(--na)}\n"
    ".ck{font-family:ui-monospace,'DejaVu Sans Mono',monospace;font-size:.85em;color:var(--muted)}\n"
    ".say{margin:.2rem 0 .9rem;padding-left:.8rem;border-left:3px solid var(--rule);overflow-wrap:anywhere}\n"
    ".say.r-primary{border-left-color:var(--eff)}\n"
    ".say.r-guardrail{border-left-color:var(--bound)}\n"
    ".say .caution{display:block;color:var(--fail);margin-top:.15rem}\n"
    ".role{font-size:.8rem;color:var(--muted);font-weight:400}\n"
    "figure{margin:1.2rem 0 1.6rem;padding:0}\n"
    "figure+figure{border-top:1px solid var(--rule);padding-top:1.1rem}\n"
    "figcaption p{color:var(--muted);font-size:.9rem}\n"
    "svg.chart{display:block;width:100%;max-width:46rem;height:auto;margin:.5rem 0 .2rem;overflow:visible}\n"
    "svg.chart text{font-size:11px;fill:#4a5560;font-family:inherit}\n"
    "svg.chart .grid{stroke:#e7e2d8;stroke-width:1}\n"
    "svg.chart .axis{stroke:#8a939b;stroke-width:1}\n"
    "svg.chart .zero{stroke:#39434d;stroke-width:1.3}\n"
    "svg.chart .band{fill:var(--band);stroke:none}\n"
    "svg.chart .av{fill:var(--av);stroke:none}\n"
    "svg.chart .avline{fill:none;stroke:#a8823a;stroke-width:1.4;stroke-dasharray:3 3}\n"
    "svg.chart .bound{fill:none;stroke:var(--bound);stroke-width:1.6;stroke-dasharray:6 4}\n"
    "svg.chart .line{fill:none;stroke:var(--eff);stroke-width:2.2;stroke-linejoin:round}\n"
    "svg.chart .pt{fill:var(--eff);stroke:#fff;stroke-width:1}\n"
    "svg.chart .pt.last{fill:#fff;stroke:var(--eff);stroke-width:2.4}\n"
    "svg.chart .bar{stroke:none}\n"
    "svg.chart .empty{font-size:16px;fill:var(--muted)}\n"
    "svg.chart text.flag{fill:var(--fail);font-weight:700}\n"
    "svg.chart .flagmark{fill:var(--fail)}\n"
    "svg.chart .okmark{fill:#b9c0c6}\n"
    "svg.chart text.strip{font-size:11px}\n"
    "svg.chart text.cap{font-size:11px;fill:var(--muted)}\n"
    ".a0{fill:#27406e}.a1{fill:#c2703a}.a2{fill:#4f8a76}.a3{fill:#86507e}.a4{fill:#7a7f2e}.a5{fill:#3f7db3}\n"
    ".legend{display:flex;flex-wrap:wrap;gap:.2rem 1.1rem;font-size:.85rem;color:var(--muted);margin:.2rem 0 .4rem;"
    "padding:0;list-style:none}\n"
    ".sw{display:inline-block;width:1.5em;height:0;vertical-align:middle;margin-right:.35em}\n"
    ".sw.line{border-top:3px solid var(--eff)}\n"
    ".sw.band{width:0;height:.8em;border-left:1.5em solid var(--band)}\n"
    ".sw.av{width:0;height:.8em;border-left:1.5em solid var(--av)}\n"
    ".sw.bound{border-top:2px dashed var(--bound)}\n"
    ".sw.zero{border-top:1.5px solid #39434d}\n"
    ".sw.c0{width:0;height:.8em;border-left:1.5em solid #27406e}.sw.c1{width:0;height:.8em;border-left:1.5em solid #c2703a}"
    ".sw.c2{width:0;height:.8em;border-left:1.5em solid #4f8a76}.sw.c3{width:0;height:.8em;border-left:1.5em solid #86507e}"
    ".sw.c4{width:0;height:.8em;border-left:1.5em solid #7a7f2e}.sw.c5{width:0;height:.8em;border-left:1.5em solid #3f7db3}\n"
    ".sw.tot{width:0;height:.8em;border-left:1.5em solid #8b95a0}\n"
    "svg.chart .tot{fill:#8b95a0}\n"
    ".toggle{position:absolute;opacity:0;width:1px;height:1px}\n"
    ".toggle+label{display:inline-block;cursor:pointer;font-size:.88rem;color:var(--eff);"
    "border-bottom:1px dotted var(--eff);margin:.2rem 0}\n"
    ".toggle+label::before{content:'\\25B8  '}\n"
    ".toggle:checked+label::before{content:'\\25BE  '}\n"
    ".toggle:focus-visible+label{outline:2px solid var(--eff);outline-offset:2px}\n"
    ".more{display:none}\n"
    ".toggle:checked+label+.more{display:block}\n"
    ".scroll{overflow-x:auto;-webkit-overflow-scrolling:touch}\n"
    "table{border-collapse:collapse;font-size:.85rem;font-variant-numeric:tabular-nums;margin:.5rem 0;width:100%}\n"
    "caption{text-align:left;color:var(--muted);font-size:.85rem;padding-bottom:.3rem}\n"
    "th,td{padding:.25rem .5rem;border-bottom:1px solid var(--rule);text-align:right;vertical-align:top}\n"
    "th{font-weight:600;border-bottom:1.5px solid #9aa3aa;white-space:nowrap}\n"
    "th:first-child,td:first-child,td.l,th.l{text-align:left}\n"
    "td.l{overflow-wrap:anywhere}\n"
    ".sub{display:block;font-size:.8em;color:var(--muted);white-space:nowrap;font-weight:400}\n"
    "table.est{font-size:.8rem}\n"
    "table.est th,table.est td{padding:.3rem .35rem;white-space:nowrap}\n"
    "table.est th.l,table.est td.l{text-align:left}\n"
    "table.est td.l:first-child{white-space:normal;overflow-wrap:anywhere;min-width:7.5rem}\n"
    "td.w{white-space:nowrap}\n"
    ".checks td{text-align:left}\n"
    ".checks td.st{white-space:nowrap;width:1%}\n"
    "dl.counts{display:grid;grid-template-columns:repeat(auto-fill,minmax(11rem,1fr));gap:.1rem 1rem;margin:.8rem 0 0}\n"
    "dl.counts div{border-top:1px solid var(--rule);padding:.3rem 0}\n"
    "dl.counts dt{font-size:.8rem;color:var(--muted)}\n"
    "dl.counts dd{margin:0;font-size:1.1rem;font-variant-numeric:tabular-nums}\n"
    ".overall{font-variant-numeric:tabular-nums}\n"
    ".note{font-size:.85rem;color:var(--muted)}\n"
    "footer{font-size:.85rem;color:var(--muted);padding:0 .2rem}\n"
    "footer dt{font-weight:600;color:var(--ink)}\n"
    "footer dd{margin:0 0 .5rem}\n"
    "@media (max-width:40rem){\n"
    " main{padding:.8rem .6rem 2rem}\n"
    " section{padding:.8rem .7rem}\n"
    " .vword{font-size:1.5rem}\n"
    " svg.chart text{font-size:20px}\n"
    " svg.chart text.strip{font-size:18px}\n"
    " svg.chart text.cap{font-size:17px}\n"
    " svg.chart text.s1{transform:translateY(20px)}\n"
    " svg.chart .odd{display:none}\n"
    " svg.chart .line{stroke-width:3.6}\n"
    " svg.chart .bound{stroke-width:2.6}\n"
    " svg.chart .zero{stroke-width:2}\n"
    " svg.chart .pt{r:4}\n"
    " svg.chart .pt.last{r:6.5}\n"
    " svg.chart .dense{display:none}\n"
    "}\n"
    "@media print{\n"
    " body{background:none;font-size:11pt}\n"
    " main{max-width:none;padding:0}\n"
    " section{border:none;border-radius:0;padding:0;margin:0 0 1rem;background:none;break-before:page}\n"
    " section.verdict,section#summary{break-before:auto}\n"
    " section.verdict{border-left:.4rem solid var(--vc);padding-left:.8rem}\n"
    " nav.toc{display:none}\n"
    " figure{break-inside:avoid}\n"
    " .toggle,.toggle+label{display:none}\n"
    " .more{display:block}\n"
    " .scroll{overflow:visible}\n"
    " table{font-size:8.5pt}\n"
    " footer{break-inside:avoid}\n"
    "}\n";

/* ------------------------------------------------------------------ */
/* chart helpers                                                       */

#define CW 600.0
#define CH 340.0

struct frame {
    double x0, x1, y0, y1;   /* data ranges */
    double l, r, t, b;       /* plot area in viewBox units */
};

static double fx(const struct frame *F, double x)
{
    return F->x1 > F->x0 ? F->l + (x - F->x0) / (F->x1 - F->x0) * (F->r - F->l) : (F->l + F->r) / 2;
}

static double fy(const struct frame *F, double y)
{
    double m = (F->y1 - F->y0) * 0.04;
    if (y < F->y0 - m)
        y = F->y0 - m;
    if (y > F->y1 + m)
        y = F->y1 + m;
    return F->b - (y - F->y0) / (F->y1 - F->y0) * (F->b - F->t);
}

/* A step of 1, 2 or 5 times a power of ten near span/target. */
static double nice_step(double span, int target)
{
    double raw = span / target;
    double p = pow(10, floor(log10(raw)));
    double m = raw / p;
    return (m < 1.5 ? 1 : m < 3.5 ? 2 : m < 7.5 ? 5 : 10) * p;
}

/* Widens [lo, hi] to whole steps; returns the step. */
static double nice_range(double *lo, double *hi, int target)
{
    if (!(*hi > *lo)) {
        double a = fabs(*lo) > 0 ? fabs(*lo) * 0.5 : 1;
        *lo -= a;
        *hi += a;
    }
    double s = nice_step(*hi - *lo, target);
    *lo = floor(*lo / s + 1e-9) * s;
    *hi = ceil(*hi / s - 1e-9) * s;
    return s;
}

/* A tick label for value v on a scale of step s. */
static void tick_label(char *out, size_t n, double v, double s)
{
    char t[48];
    if (fabs(v) < s * 1e-6)
        v = 0;
    if (s >= 1e6 || s < 1e-4) {
        snprintf(t, sizeof t, "%.3g", v);
    } else {
        int d = s >= 1 ? 0 : (int)ceil(-log10(s) - 1e-9);
        snprintf(t, sizeof t, "%.*f", d, v);
    }
    minus_copy(out, n, t);
}

/* Horizontal grid lines and y labels. */
static void y_axis(FILE *f, const struct frame *F, double step, bool count)
{
    int k = 0, nt = (int)floor((F->y1 - F->y0) / step + 1e-6) + 1;
    /* on a phone every other label is hidden: keep the one at zero */
    int keep = F->y0 < 0 && F->y1 > 0 ? (int)lround(-F->y0 / step) % 2 : 0;
    for (double v = F->y0; v <= F->y1 + step * 1e-6; v = F->y0 + step * ++k) {
        double y = fy(F, v);
        char lab[48];
        if (count)
            fcountd(lab, sizeof lab, v);
        else
            tick_label(lab, sizeof lab, v, step);
        fprintf(f, "<line class=\"grid\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />", F->l, y, F->r, y);
        fprintf(f, "<text class=\"%s\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\" dominant-baseline=\"middle\">"
                   "%s</text>\n",
                nt > 5 && k % 2 != keep ? "odd" : "ev", F->l - 8, y, lab);
        if (k > 40)
            break;
    }
}

/* Time ticks at UTC midnights (or hours), or record numbers. */
static void x_axis(FILE *f, const struct frame *F, bool is_time)
{
    fprintf(f, "<line class=\"axis\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />\n", F->l, F->b, F->r, F->b);
    double span = F->x1 - F->x0;
    if (!is_time) {
        double s = nice_step(span > 0 ? span : 1, 6);
        if (s < 1)
            s = 1;
        int k = 0;
        for (double v = ceil(F->x0 / s) * s; v <= F->x1 + 1e-9; v += s, k++)
            fprintf(f, "<text class=\"%s\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\" dominant-baseline=\"hanging\">%.0f</text>",
                    k % 2 ? "odd" : "ev", fx(F, v), F->b + 9, v + 1);
        fputc('\n', f);
        return;
    }
    static const double day_steps[] = {1, 2, 3, 7, 14, 28, 56, 91, 182, 364};
    static const double hour_steps[] = {1, 2, 3, 6, 12};
    if (span < 2 * 86400) {
        double s = 12 * 3600;
        for (size_t i = 0; i < sizeof hour_steps / sizeof *hour_steps; i++)
            if (span / (hour_steps[i] * 3600) <= 7) {
                s = hour_steps[i] * 3600;
                break;
            }
        int k = 0;
        for (double v = ceil(F->x0 / s) * s; v <= F->x1 + 1e-6 && k < 40; v += s, k++) {
            int64_t sec = (int64_t)v;
            int64_t r = sec - floor_div(sec, 86400) * 86400;
            char lab[32];
            if (r == 0)
                fday(lab, sizeof lab, v, false);
            else
                snprintf(lab, sizeof lab, "%02d:00", (int)(r / 3600));
            fprintf(f, "<line class=\"axis\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />", fx(F, v), F->b,
                    fx(F, v), F->b + 5);
            fprintf(f, "<text class=\"%s\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\" dominant-baseline=\"hanging\">%s</text>",
                    k % 2 ? "odd" : "ev", fx(F, v), F->b + 9, lab);
        }
        fputc('\n', f);
        return;
    }
    double s = 364;
    for (size_t i = 0; i < sizeof day_steps / sizeof *day_steps; i++)
        if (span / (day_steps[i] * 86400) <= 7) {
            s = day_steps[i];
            break;
        }
    double first = ceil(F->x0 / 86400 - 1e-9);
    int k = 0;
    for (double d = first; d * 86400 <= F->x1 + 1e-6 && k < 40; d += s, k++) {
        double v = d * 86400;
        char lab[32];
        fday(lab, sizeof lab, v, false);
        fprintf(f, "<line class=\"axis\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />", fx(F, v), F->b,
                fx(F, v), F->b + 5);
        fprintf(f, "<text class=\"%s\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\" dominant-baseline=\"hanging\">%s</text>",
                k % 2 ? "odd" : "ev", fx(F, v), F->b + 9, lab);
    }
    fputc('\n', f);
}

/* Opens an inline SVG chart with its title and description (plain text,
 * escaped here). */
static void svg_open(struct page *P, int id, const char *cls, const char *title, const char *desc)
{
    FILE *f = P->f;
    fprintf(f, "<svg class=\"chart %s\" viewBox=\"0 0 %.0f %.0f\" role=\"img\" aria-labelledby=\"t%d d%d\" "
               "aria-label=\"",
            cls, CW, CH, id, id);
    esc(f, title);
    fprintf(f, "\" preserveAspectRatio=\"xMidYMid meet\">\n<title id=\"t%d\">", id);
    esc(f, title);
    fprintf(f, "</title>\n<desc id=\"d%d\">", id);
    esc(f, desc);
    fputs("</desc>\n", f);
}

/* The "show the numbers" switch; the caller closes the div. */
static void numbers_open(struct page *P, int id, const char *what)
{
    fprintf(P->f,
            "<input type=\"checkbox\" class=\"toggle\" id=\"n%d\" /><label for=\"n%d\">%s</label>\n"
            "<div class=\"more scroll\">\n",
            id, id, what);
}

/* ------------------------------------------------------------------ */
/* the effect of one metric and arm over time                          */

struct epoint {
    double x, d, lo, hi;   /* effect and interval */
    double slo, shi;       /* sequential: −bound·se, +bound·se or the always-valid interval */
    bool has_s;
    const json_t *row;
};

/* A path through (x, y) pairs, broken where a value is missing; a point
 * with no neighbour is drawn as a short level stroke. */
static void path_line(FILE *f, const struct frame *F, const struct epoint *p, size_t n, int which,
                      const char *cls)
{
    bool any = false;
    size_t run = 0;
    for (size_t i = 0; i <= n; i++) {
        double y = NAN;
        if (i < n) {
            y = which == 0 ? p[i].d : which == 1 ? p[i].slo : p[i].shi;
            if (which && !p[i].has_s)
                y = NAN;
        }
        if (!isfinite(y)) {
            if (run == 1)
                fputs("m-14 0 h28 ", f);
            run = 0;
            continue;
        }
        if (!any)
            fprintf(f, "<path class=\"%s\" d=\"", cls);
        fprintf(f, "%s%.1f %.1f ", run ? "L" : "M", fx(F, p[i].x), fy(F, y));
        any = true;
        run++;
    }
    if (any)
        fputs("\" />\n", f);
}

/* Bands between lo and hi (which 0: the interval, 1: the sequential band),
 * one polygon per run of points where both are present; a single point is
 * drawn as a narrow bar. Infinite ends of an always-valid band reach the
 * edge of the plot. */
static void path_band(FILE *f, const struct frame *F, const struct epoint *p, size_t n, int which,
                      const char *cls)
{
    size_t i = 0;
    while (i < n) {
        size_t j = i;
        for (;;) {
            double lo = which ? p[j].slo : p[j].lo, hi = which ? p[j].shi : p[j].hi;
            bool ok = which ? p[j].has_s && !isnan(lo) && !isnan(hi) : isfinite(lo) && isfinite(hi);
            if (!ok || j >= n)
                break;
            if (++j >= n)
                break;
        }
        if (j == i) {
            i++;
            continue;
        }
        if (j - i == 1) {
            double lo = which ? p[i].slo : p[i].lo, hi = which ? p[i].shi : p[i].hi;
            double x = fx(F, p[i].x);
            fprintf(f, "<rect class=\"%s\" x=\"%.1f\" y=\"%.1f\" width=\"12\" height=\"%.1f\" />\n", cls, x - 6,
                    fy(F, hi), fy(F, lo) - fy(F, hi));
        } else {
            fprintf(f, "<path class=\"%s\" d=\"", cls);
            for (size_t k = i; k < j; k++)
                fprintf(f, "%s%.1f %.1f ", k == i ? "M" : "L", fx(F, p[k].x), fy(F, which ? p[k].shi : p[k].hi));
            for (size_t k = j; k-- > i;)
                fprintf(f, "L%.1f %.1f ", fx(F, p[k].x), fy(F, which ? p[k].slo : p[k].lo));
            fputs("Z\" />\n", f);
        }
        i = j;
    }
}

/* Describes the latest estimate in plain text (for the chart's desc). */
static void latest_words(const struct page *P, struct sb *b, const json_t *r)
{
    char d[48], lo[48], hi[48], lw[32];
    level_words(P, lw, sizeof lw);
    fnum(d, sizeof d, get(r, "diff"), 4, true);
    fnum(lo, sizeof lo, pair_at(r, "ci", 0), 4, true);
    fnum(hi, sizeof hi, pair_at(r, "ci", 1), 4, true);
    if (isfinite(get(r, "diff")))
        sb_add(b, "Latest difference %s (%s %s to %s).", d, lw, lo, hi);
    else
        sb_add(b, "No estimate yet.");
}

static void effect_chart(struct page *P, const json_t *final_row)
{
    FILE *f = P->f;
    const char *m = str(final_row, "metric"), *a = str(final_row, "arm");
    struct epoint *p = calloc(P->n ? P->n : 1, sizeof *p);
    if (!p)
        return;
    int kind = seq_kind(final_row);
    size_t n = 0;
    for (size_t i = 0; i < P->n; i++) {
        const json_t *r = find_row(P->path[i], m, a);
        struct epoint *e = &p[n];
        e->x = P->x[i];
        e->row = r;
        e->d = get(r, "diff");
        e->lo = pair_at(r, "ci", 0);
        e->hi = pair_at(r, "ci", 1);
        e->slo = e->shi = NAN;
        int k = seq_kind(r);
        if (k == 1) {
            double bd = get(r, "bound"), se = row_se(P, r);
            if (isfinite(bd) && isfinite(se)) {
                e->slo = -bd * se;
                e->shi = bd * se;
                e->has_s = true;
            }
        } else if (k >= 2) {
            const char *key = k == 2 ? "ci_always" : "cs";
            e->slo = pair_at(r, key, 0);
            e->shi = pair_at(r, key, 1);
            if (isfinite(e->slo) || isfinite(e->shi)) {
                e->has_s = true;
                if (!isfinite(e->slo))
                    e->slo = -INFINITY;
                if (!isfinite(e->shi))
                    e->shi = INFINITY;
            }
        }
        if (r)
            n++;
    }
    bool drawn = false;
    for (size_t i = 0; i < n; i++)
        drawn = drawn || p[i].has_s;
    /* ranges: the effect, its interval and zero; the sequential lines may
     * widen that by at most 40% of it, and are clipped beyond */
    double lo = 0, hi = 0, slo = INFINITY, shi = -INFINITY;
    bool any = false;
    double x0 = INFINITY, x1 = -INFINITY;
    for (size_t i = 0; i < n; i++) {
        double v[3] = {p[i].d, p[i].lo, p[i].hi};
        for (int k = 0; k < 3; k++)
            if (isfinite(v[k])) {
                lo = fmin(lo, v[k]);
                hi = fmax(hi, v[k]);
                any = true;
            }
        if (p[i].has_s) {
            if (isfinite(p[i].slo))
                slo = fmin(slo, p[i].slo), shi = fmax(shi, p[i].slo);
            if (isfinite(p[i].shi))
                slo = fmin(slo, p[i].shi), shi = fmax(shi, p[i].shi);
        }
        x0 = fmin(x0, p[i].x);
        x1 = fmax(x1, p[i].x);
    }
    double span = hi - lo;
    if (span > 0) {
        if (slo < lo)
            lo = fmax(slo, lo - 0.4 * span);
        if (shi > hi)
            hi = fmin(shi, hi + 0.4 * span);
    }
    struct frame F = {0, 1, lo, hi, 72, CW - 16, 14, CH - 46};
    double step = nice_range(&F.y0, &F.y1, 5);
    if (!isfinite(x0)) {
        x0 = 0;
        x1 = 1;
    } else if (x1 <= x0) {
        double pad = P->x_is_time ? 43200 : 0.5;
        x0 -= pad;
        x1 += pad;
    }
    F.x0 = x0;
    F.x1 = x1;

    int id = ++P->id;
    char lw[32];
    level_words(P, lw, sizeof lw);
    struct sb title = {0}, desc = {0};
    sb_add(&title, "%s: difference %s minus %s over time", m ? m : "?", a ? a : "?",
           P->control ? P->control : "control");
    sb_add(&desc, "The cumulative difference in %s between %s and %s at each readout (%zu point%s), with its %s "
                  "as a shaded band",
           m ? m : "?", a ? a : "?", P->control ? P->control : "control", n, n == 1 ? "" : "s", lw);
    if (kind == 1 && drawn)
        sb_add(&desc, ", the sequential bound as dashed lines");
    else if (kind >= 2 && drawn)
        sb_add(&desc, ", the always-valid interval as a second band");
    sb_add(&desc, " and the zero line. ");
    latest_words(P, &desc, final_row);

    fprintf(f, "<figure class=\"effect\" data-metric=\"");
    esc(f, m);
    fprintf(f, "\" data-arm=\"");
    esc(f, a);
    fprintf(f, "\">\n<figcaption><h3>");
    esc(f, m);
    fprintf(f, " <span class=\"role\">");
    esc(f, a);
    fputs(" vs ", f);
    esc(f, P->control ? P->control : "control");
    const char *role = str(final_row, "role");
    if (role && strcmp(role, "primary")) {
        fputs(" · ", f);
        esc(f, role);
    }
    fputs("</span></h3>\n<p>", f);
    {
        struct sb sub = {0};
        const char *type = str(final_row, "type");
        sb_add(&sub, "Difference in %s (%s%s), cumulative from the start of the test.",
               eq(type, "binary") ? "the share of units (0 to 1)" : eq(type, "ratio") ? "the ratio" : "the mean per unit",
               a ? a : "?", " minus control");
        esc(f, sb_str(&sub));
        free(sub.s);
    }
    fputs("</p></figcaption>\n", f);
    svg_open(P, id, "effect", sb_str(&title), sb_str(&desc));
    fprintf(f, "<defs><clipPath id=\"c%d\"><rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" />"
               "</clipPath></defs>\n",
            id, F.l, F.t, F.r - F.l, F.b - F.t);
    y_axis(f, &F, step, false);
    x_axis(f, &F, P->x_is_time);
    if (!any) {
        fprintf(f, "<text class=\"empty\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">No estimate yet</text>\n",
                (F.l + F.r) / 2, (F.t + F.b) / 2);
    } else {
        fprintf(f, "<g clip-path=\"url(#c%d)\">\n", id);
        if (kind >= 2)
            path_band(f, &F, p, n, 1, "av");
        path_band(f, &F, p, n, 0, "band");
        if (kind >= 2) {
            path_line(f, &F, p, n, 1, "avline");
            path_line(f, &F, p, n, 2, "avline");
        }
        if (kind == 1) {
            path_line(f, &F, p, n, 1, "bound");
            path_line(f, &F, p, n, 2, "bound");
        }
        fprintf(f, "<line class=\"zero\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />\n", F.l, fy(&F, 0),
                F.r, fy(&F, 0));
        path_line(f, &F, p, n, 0, "line");
        fputs("</g>\n", f);
        size_t last = n;
        for (size_t i = 0; i < n; i++)
            if (isfinite(p[i].d))
                last = i;
        for (size_t i = 0; i < n; i++) {
            if (!isfinite(p[i].d) || (n > 60 && i != last))
                continue; /* many readouts: the line alone, and its end */
            char d[48], l[48], h[48], when[40];
            fnum(d, sizeof d, p[i].d, 4, true);
            fnum(l, sizeof l, p[i].lo, 4, true);
            fnum(h, sizeof h, p[i].hi, 4, true);
            if (P->x_is_time)
                fwhen(when, sizeof when, p[i].x);
            else
                snprintf(when, sizeof when, "readout %zu", i + 1);
            fprintf(f, "<circle class=\"pt%s\" cx=\"%.1f\" cy=\"%.1f\" r=\"%s\"><title>%s: %s (%s to %s)</title></circle>\n",
                    i == last ? " last" : "", fx(&F, p[i].x), fy(&F, p[i].d), i == last ? "4.5" : "2.6", when, d, l, h);
        }
    }
    fprintf(f, "<line class=\"axis\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />\n", F.l, F.t, F.l, F.b);
    fputs("</svg>\n", f);

    fputs("<ul class=\"legend\"><li><span class=\"sw line\"></span>difference</li>", f);
    fprintf(f, "<li><span class=\"sw band\"></span>%s</li>", lw);
    if (kind == 1 && drawn)
        fputs("<li><span class=\"sw bound\"></span>sequential bound (effect scale)</li>", f);
    else if (kind == 2 && drawn)
        fputs("<li><span class=\"sw av\"></span>always-valid interval</li>", f);
    else if (kind == 3 && drawn)
        fputs("<li><span class=\"sw av\"></span>confidence sequence</li>", f);
    else if (kind)
        fputs("<li>no sequential bound in these records</li>", f);
    fputs("<li><span class=\"sw zero\"></span>no difference</li></ul>\n", f);

    numbers_open(P, id, "Numbers behind the chart");
    fputs("<table><caption>", f);
    esc(f, sb_str(&title));
    fprintf(f, "</caption>\n<thead><tr><th>%s</th><th>units (arm)</th><th>difference</th><th>interval</th>"
               "<th>lift</th>",
            P->x_is_time ? "time" : "readout");
    if (kind == 1)
        fputs("<th>z</th><th>bound</th><th>bound (effect scale)</th>", f);
    else if (kind >= 2)
        fputs("<th>always-valid p</th><th>always-valid interval</th>", f);
    fputs("<th>sequential</th></tr></thead>\n<tbody>\n", f);
    for (size_t i = 0; i < n; i++) {
        const json_t *r = p[i].row;
        char when[40], c[48], d[48], l[48], h[48], lift[48];
        if (P->x_is_time)
            fwhen(when, sizeof when, p[i].x);
        else
            snprintf(when, sizeof when, "%zu", i + 1);
        fcount(c, sizeof c, json_object_get(r, "n"));
        fnum(d, sizeof d, p[i].d, 4, true);
        fnum(l, sizeof l, p[i].lo, 4, true);
        fnum(h, sizeof h, p[i].hi, 4, true);
        fpct(lift, sizeof lift, get(r, "lift"), true);
        fprintf(f, "<tr><td class=\"w\">%s</td><td>%s</td><td>%s</td><td class=\"w\">%s to %s</td><td>%s</td>", when,
                c, d, l, h, lift);
        if (kind == 1) {
            char z[48], bd[48], sl[48], sh[48];
            fnum(z, sizeof z, get(r, "z"), 3, true);
            fnum(bd, sizeof bd, get(r, "bound"), 3, false);
            fnum(sl, sizeof sl, p[i].has_s ? p[i].slo : NAN, 4, true);
            fnum(sh, sizeof sh, p[i].has_s ? p[i].shi : NAN, 4, true);
            fprintf(f, "<td>%s</td><td>%s</td><td class=\"w\">%s / %s</td>", z, bd, sl, sh);
        } else if (kind >= 2) {
            char pa[48], sl[48], sh[48];
            fp(pa, sizeof pa, get(r, "p_always"));
            lt_fix(pa, sizeof pa);
            fnum(sl, sizeof sl, p[i].has_s ? p[i].slo : NAN, 4, true);
            fnum(sh, sizeof sh, p[i].has_s ? p[i].shi : NAN, 4, true);
            fprintf(f, "<td>%s</td><td class=\"w\">%s to %s</td>", pa, sl, sh);
        }
        fputs("<td class=\"w\">", f);
        esc(f, seq_label(str(r, "verdict")));
        fputs("</td></tr>\n", f);
    }
    fputs("</tbody></table>\n</div>\n</figure>\n", f);
    free(title.s);
    free(desc.s);
    free(p);
}

/* ------------------------------------------------------------------ */
/* units per arm per day                                               */

/* Per-arm units of day entry `day`, from its own per-arm object when the
 * record has one. Returns true when filled. */
static bool day_arms_own(const struct page *P, const json_t *day, double *out)
{
    const json_t *o = json_object_get(day, "by_arm");
    if (!json_is_object(o))
        o = json_object_get(day, "arms");
    if (!json_is_object(o))
        return false;
    for (int a = 0; a < P->n_arms; a++)
        out[a] = get(o, P->arms[a]);
    return true;
}

/* New units per arm per UTC day from the readouts: for the last readout of
 * each day (its time less a microsecond falls on that day), its units less
 * those of the last readout of the day before. Fills date[i], cnt[i][a] and
 * usable[i] for the path; a day counts only when the day before has a
 * readout too, or, for the first readout's day, when it is the first
 * exposure day. Returns false when the readouts have no times. */
static bool derived_daily(const struct page *P, const json_t *by_day, char (*date)[16],
                          double (*cnt)[MAX_ARMS], bool *usable)
{
    if (!P->x_is_time || !P->n)
        return false;
    const char *d0 = str(json_array_get(by_day, 0), "day");
    int64_t prev_day = 0;
    size_t prev = SIZE_MAX;
    for (size_t i = 0; i < P->n; i++) {
        usable[i] = false;
        double t = P->t[i] - 1e-6;
        fiso(date[i], sizeof date[i], t);
        int64_t day = floor_div((int64_t)floor(t), 86400);
        double tn = i + 1 < P->n ? P->t[i + 1] - 1e-6 : NAN;
        if (i + 1 < P->n && floor_div((int64_t)floor(tn), 86400) == day)
            continue; /* not the last readout of its day */
        const json_t *u = json_object_get(P->path[i], "units");
        const json_t *up = prev == SIZE_MAX ? NULL : json_object_get(P->path[prev], "units");
        bool ok = prev == SIZE_MAX ? d0 && !strcmp(d0, date[i]) : day == prev_day + 1;
        for (int a = 0; a < P->n_arms; a++) {
            double now = get(u, P->arms[a]);
            double before = up ? get(up, P->arms[a]) : 0;
            cnt[i][a] = now - before;
            if (cnt[i][a] < 0)
                cnt[i][a] = 0;
            ok = ok && isfinite(cnt[i][a]);
        }
        usable[i] = ok;
        prev = i;
        prev_day = day;
    }
    return true;
}

/* Is day `name` flagged by an srm_day reason? */
static bool day_flagged(const struct page *P, const char *name)
{
    size_t i;
    const json_t *r;
    json_array_foreach(json_object_get(json_object_get(P->rec, "integrity"), "reasons"), i, r)
        if (eq(str(r, "check"), "srm_day") && name && str(r, "detail") && strstr(str(r, "detail"), name))
            return true;
    return false;
}

static void units_section(struct page *P, int no)
{
    FILE *f = P->f;
    const json_t *srm = json_object_get(P->rec, "srm");
    const json_t *units = json_object_get(P->rec, "units");
    const json_t *by_day = json_object_get(srm, "by_day");
    size_t nd = json_array_size(by_day);
    fprintf(f, "<section id=\"units\" aria-labelledby=\"h-units\">\n<h2 id=\"h-units\"><span class=\"no\">%d</span>"
               "Units and sample ratio</h2>\n",
            no);

    /* the overall split */
    double total = 0;
    for (int a = 0; a < P->n_arms; a++)
        if (isfinite(get(units, P->arms[a])))
            total += get(units, P->arms[a]);
    fputs("<p class=\"overall\">", f);
    if (!P->n_arms)
        fputs("No units in the record.", f);
    for (int a = 0; a < P->n_arms; a++) {
        char c[48], s[48];
        fcount(c, sizeof c, json_object_get(units, P->arms[a]));
        fpct(s, sizeof s, total > 0 ? get(units, P->arms[a]) / total : NAN, false);
        fprintf(f, "%s<strong>", a ? " · " : "");
        esc(f, P->arms[a]);
        fprintf(f, "</strong> %s units (%s)", c, s);
    }
    fputs("</p>\n<p>", f);
    char p1[32], p2[32];
    fpe(p1, sizeof p1, get(srm, "p"));
    fpe(p2, sizeof p2, get(srm, "p_seq"));
    lt_fix(p1, sizeof p1);
    lt_fix(p2, sizeof p2);
    fprintf(f, "Sample-ratio test over all units: chi-square p %s, always-valid p %s. ", p1, p2);
    if (json_is_true(json_object_get(srm, "alarm")))
        fputs("<strong class=\"s-fail\">The split does not match the configured weights.</strong>", f);
    else if (json_is_false(json_object_get(srm, "alarm")))
        fputs("No mismatch alarm: the split is in line with the configured weights.", f);
    fputs("</p>\n", f);

    /* per-day bars */
    double (*cnt)[MAX_ARMS] = calloc(nd ? nd : 1, sizeof *cnt);
    double (*dcnt)[MAX_ARMS] = calloc(P->n ? P->n : 1, sizeof *dcnt);
    char (*ddate)[16] = calloc(P->n ? P->n : 1, sizeof *ddate);
    bool *dok = calloc(P->n ? P->n : 1, sizeof *dok);
    if (!cnt || !dcnt || !ddate || !dok) {
        free(cnt);
        free(dcnt);
        free(ddate);
        free(dok);
        fputs("</section>\n", f);
        return;
    }
    bool per_arm = nd > 0 && P->n_arms > 0, derived = false;
    for (size_t i = 0; i < nd && per_arm; i++)
        per_arm = day_arms_own(P, json_array_get(by_day, i), cnt[i]);
    if (!per_arm && nd && P->n_arms && derived_daily(P, by_day, ddate, dcnt, dok)) {
        per_arm = true;
        for (size_t i = 0; i < nd && per_arm; i++) {
            const char *name = str(json_array_get(by_day, i), "day");
            bool found = false;
            for (size_t k = 0; k < P->n && name; k++)
                if (dok[k] && !strcmp(ddate[k], name)) {
                    memcpy(cnt[i], dcnt[k], sizeof cnt[i]);
                    found = true;
                }
            per_arm = found;
        }
        derived = per_arm;
    }
    if (!nd) {
        fputs("<p class=\"note\">The record has no units per exposure day.</p>\n</section>\n", f);
        free(cnt);
        free(dcnt);
        free(ddate);
        free(dok);
        return;
    }
    double ymax = 0;
    for (size_t i = 0; i < nd; i++) {
        const json_t *d = json_array_get(by_day, i);
        if (per_arm) {
            for (int a = 0; a < P->n_arms; a++)
                if (isfinite(cnt[i][a]))
                    ymax = fmax(ymax, cnt[i][a]);
        } else if (isfinite(get(d, "units")))
            ymax = fmax(ymax, get(d, "units"));
    }
    struct frame F = {0, (double)nd, 0, ymax > 0 ? ymax : 1, 72, CW - 16, 26, CH - (nd <= 21 ? 86 : 56)};
    double step = nice_range(&F.y0, &F.y1, 4);
    if (F.y0 < 0)
        F.y0 = 0;
    int id = ++P->id;
    struct sb title = {0}, desc = {0};
    const char *first = str(json_array_get(by_day, 0), "day"), *lastd = str(json_array_get(by_day, nd - 1), "day");
    sb_add(&title, "Units first exposed per day%s", per_arm ? ", per arm" : "");
    sb_add(&desc, "%s units first exposed on each of %zu days, from %s to %s, with the Holm-adjusted "
                  "sample-ratio p of each day below the bars.",
           per_arm ? "Bars per arm:" : "Bars of all", nd, first ? first : "?", lastd ? lastd : "?");
    int nflag = 0;
    for (size_t i = 0; i < nd; i++)
        if (day_flagged(P, str(json_array_get(by_day, i), "day")))
            nflag++;
    if (nflag)
        sb_add(&desc, " %d day%s flagged as a mismatch.", nflag, nflag == 1 ? " is" : "s are");
    else
        sb_add(&desc, " No day is flagged.");

    fprintf(f, "<figure class=\"units\">\n<figcaption><h3>Units first exposed per day</h3>\n<p>");
    if (per_arm)
        fputs("Bars: units per arm", f);
    else
        fputs("Bars: all units (the record has no per-arm split by day)", f);
    if (nd <= 21)
        fputs(". Below the bars: the day's sample-ratio p, Holm-adjusted across days; days marked in red "
              "are flagged by the integrity checks.</p></figcaption>\n",
              f);
    else
        fputs(". Below the bars, one dot per day: red when the day's sample-ratio p (Holm-adjusted across days) "
              "is flagged by the integrity checks; the p-values are in the table.</p></figcaption>\n",
              f);
    svg_open(P, id, "days", sb_str(&title), sb_str(&desc));
    y_axis(f, &F, step, true);
    fprintf(f, "<line class=\"axis\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />\n", F.l, F.b, F.r, F.b);
    double slot = (F.r - F.l) / (double)nd;
    int label_every = nd <= 8 ? 1 : nd <= 16 ? 2 : (int)ceil((double)nd / 7);
    for (size_t i = 0; i < nd; i++) {
        const json_t *d = json_array_get(by_day, i);
        const char *name = str(d, "day");
        double x = F.l + slot * (double)i;
        double inner = slot * 0.78, gx = x + slot * 0.11;
        char tip[160];
        if (per_arm) {
            double bw = inner / P->n_arms;
            for (int a = 0; a < P->n_arms; a++) {
                double v = cnt[i][a];
                if (!isfinite(v))
                    continue;
                fprintf(f, "<rect class=\"bar a%d\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\"><title>", a % 6,
                        gx + bw * a, fy(&F, v), bw > 1.5 ? bw - 0.6 : bw, F.b - fy(&F, v));
                esc(f, name);
                fputs(" · ", f);
                esc(f, P->arms[a]);
                snprintf(tip, sizeof tip, ": %.0f units", v);
                esc(f, tip);
                fputs("</title></rect>", f);
            }
        } else {
            double v = get(d, "units");
            if (isfinite(v)) {
                fprintf(f, "<rect class=\"bar tot\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\"><title>", gx,
                        fy(&F, v), inner, F.b - fy(&F, v));
                esc(f, name);
                snprintf(tip, sizeof tip, ": %.0f units", v);
                esc(f, tip);
                fputs("</title></rect>", f);
            }
        }
        double cx = x + slot / 2, top = F.b;
        if (per_arm) {
            for (int a = 0; a < P->n_arms; a++)
                if (isfinite(cnt[i][a]))
                    top = fmin(top, fy(&F, cnt[i][a]));
        } else if (isfinite(get(d, "units")))
            top = fy(&F, get(d, "units"));
        if (name && (i % (size_t)label_every == 0)) {
            int y, mo, dd;
            char lab[24];
            if (sscanf(name, "%d-%d-%d", &y, &mo, &dd) == 3 && mo >= 1 && mo <= 12)
                snprintf(lab, sizeof lab, "%d %s", dd, month_names[mo - 1]);
            else
                snprintf(lab, sizeof lab, "%.12s", name);
            fprintf(f, "<text class=\"%s\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\" dominant-baseline=\"hanging\">",
                    (i / (size_t)label_every) % 2 ? "odd" : "ev", cx, F.b + 7);
            esc(f, lab);
            fputs("</text>", f);
        }
        bool flag = day_flagged(P, name);
        if (nd <= 21) {
            char ps[16];
            fp_short(ps, sizeof ps, get(d, "p_adjusted"));
            lt_fix(ps, sizeof ps);
            fprintf(f, "<text class=\"strip%s%s\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">%s</text>",
                    flag ? " flag" : "", i % 2 ? " s1" : "", cx, F.b + 48, ps);
        }
        else {
            char ps[24];
            fp(ps, sizeof ps, get(d, "p_adjusted"));
            lt_fix(ps, sizeof ps);
            fprintf(f, "<circle class=\"%s\" cx=\"%.1f\" cy=\"%.1f\" r=\"3.5\"><title>", flag ? "flagmark" : "okmark",
                    cx, F.b + 44);
            esc(f, name);
            fprintf(f, ": SRM p (Holm) %s</title></circle>", ps);
        }
        if (flag)
            fprintf(f, "<path class=\"flagmark\" d=\"M%.1f %.1f h12 l-6 9 z\"><title>flagged: the split of this day does "
                       "not match the weights</title></path>",
                    cx - 6, top - 14);
        fputc('\n', f);
    }
    fprintf(f, "<text class=\"cap\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\"%s>SRM p</text>\n", F.l - 8,
            F.b + (nd <= 21 ? 48 : 44), nd <= 21 ? "" : " dominant-baseline=\"middle\"");
    fprintf(f, "<line class=\"axis\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" />\n", F.l, F.t, F.l, F.b);
    fputs("</svg>\n<ul class=\"legend\">", f);
    if (per_arm)
        for (int a = 0; a < P->n_arms; a++) {
            fprintf(f, "<li><span class=\"sw c%d\"></span>", a % 6);
            esc(f, P->arms[a]);
            fputs("</li>", f);
        }
    else
        fputs("<li><span class=\"sw tot\"></span>all arms</li>", f);
    fputs("</ul>\n", f);
    if (derived)
        fputs("<p class=\"note\">Per-arm bars count the units added between consecutive daily readouts (a unit later "
              "found in two arms leaves the count); the day totals and p-values are by first-exposure day.</p>\n",
              f);

    numbers_open(P, id, "Numbers behind the chart");
    fputs("<table><caption>Units first exposed per day and the sample-ratio test of each day</caption>\n"
          "<thead><tr><th>day</th>",
          f);
    if (per_arm)
        for (int a = 0; a < P->n_arms; a++) {
            fputs("<th>", f);
            esc(f, P->arms[a]);
            fputs("</th>", f);
        }
    fputs("<th>all units</th><th>SRM p</th><th>Holm-adjusted p</th><th class=\"l\">check</th></tr></thead>\n<tbody>\n", f);
    for (size_t i = 0; i < nd; i++) {
        const json_t *d = json_array_get(by_day, i);
        fputs("<tr><td class=\"w\">", f);
        esc(f, str(d, "day"));
        fputs("</td>", f);
        if (per_arm)
            for (int a = 0; a < P->n_arms; a++) {
                char c[48];
                fcountd(c, sizeof c, cnt[i][a]);
                fprintf(f, "<td>%s</td>", c);
            }
        char c[48], pa[32], pb[32];
        fcount(c, sizeof c, json_object_get(d, "units"));
        fp(pa, sizeof pa, get(d, "p"));
        fp(pb, sizeof pb, get(d, "p_adjusted"));
        lt_fix(pa, sizeof pa);
        lt_fix(pb, sizeof pb);
        bool flag = day_flagged(P, str(d, "day"));
        fprintf(f, "<td>%s</td><td>%s</td><td>%s</td><td class=\"l %s\">%s</td></tr>\n", c, pa, pb,
                flag ? "s-fail" : "s-pass", flag ? "flagged" : "ok");
    }
    fputs("</tbody></table>\n</div>\n</figure>\n", f);

    /* segments */
    const json_t *segs = json_object_get(srm, "by_segment");
    if (json_array_size(segs)) {
        fputs("<h3>Sample ratio per segment</h3>\n<div class=\"scroll\"><table><caption>Units per segment "
              "(assignment attributes) and the sample-ratio test of each, Holm-adjusted across segments</caption>\n"
              "<thead><tr><th>segment</th><th>units</th><th>SRM p</th><th>Holm-adjusted p</th></tr></thead>\n<tbody>\n",
              f);
        size_t i;
        const json_t *s;
        json_array_foreach(segs, i, s)
        {
            char c[48], pa[32], pb[32];
            fcount(c, sizeof c, json_object_get(s, "units"));
            fp(pa, sizeof pa, get(s, "p"));
            fp(pb, sizeof pb, get(s, "p_adjusted"));
            lt_fix(pa, sizeof pa);
            lt_fix(pb, sizeof pb);
            fputs("<tr><td class=\"l\">", f);
            esc(f, str(s, "segment"));
            fprintf(f, "</td><td>%s</td><td>%s</td><td>%s</td></tr>\n", c, pa, pb);
        }
        fputs("</tbody></table></div>\n", f);
    }
    fputs("</section>\n", f);
    free(title.s);
    free(desc.s);
    free(cnt);
    free(dcnt);
    free(ddate);
    free(dok);
}

/* ------------------------------------------------------------------ */
/* integrity                                                           */

struct check_def {
    const char *check;
    const char *title;
};

static const struct check_def check_defs[] = {
    {"srm", "Units per arm match the weights"},
    {"srm_day", "Each exposure day matches the weights"},
    {"srm_segment", "Each segment matches the weights"},
    {"multi_arm", "Every unit is in one arm only"},
    {"multi_arm_by_arm", "Units in two arms are spread evenly"},
    {"outside_window", "Assignments fall inside the window"},
    {"duplicates", "Few repeated events"},
    {"duplicates_by_arm", "Repeated events are spread evenly"},
    {"rejected", "Few rejected lines"},
    {"late", "Few late assignments"},
    {"balance", "Arms alike before the test (covariate balance)"},
    {"denominator", "Ratio denominators alike across arms"},
    {"hash", "Assignments agree with the assignment hash"},
};

static double integ_count(const json_t *integ, const char *k)
{
    return get(integ, k);
}

/* The text of a check that raised nothing. Returns false when the check
 * does not apply to this record (not drawn as passed). */
static bool pass_text(const struct page *P, const char *check, struct sb *b)
{
    const json_t *integ = json_object_get(P->rec, "integrity");
    const json_t *srm = json_object_get(P->rec, "srm");
    char x[48], y[48];
    if (!strcmp(check, "srm")) {
        fpe(x, sizeof x, get(srm, "p"));
        fpe(y, sizeof y, get(srm, "p_seq"));
        sb_add(b, "chi-square p %s, always-valid p %s", x, y);
    } else if (!strcmp(check, "srm_day")) {
        size_t nd = json_array_size(json_object_get(srm, "by_day"));
        if (!nd)
            return false;
        double lo = INFINITY;
        for (size_t i = 0; i < nd; i++)
            lo = fmin(lo, get(json_array_get(json_object_get(srm, "by_day"), i), "p_adjusted"));
        fpe(x, sizeof x, lo);
        sb_add(b, "%zu day%s; lowest Holm-adjusted p %s", nd, nd == 1 ? "" : "s", x);
    } else if (!strcmp(check, "srm_segment")) {
        size_t ns = json_array_size(json_object_get(srm, "by_segment"));
        if (!ns) {
            sb_add(b, "no segments: the assignments carry no attributes");
            return false;
        }
        double lo = INFINITY;
        for (size_t i = 0; i < ns; i++)
            lo = fmin(lo, get(json_array_get(json_object_get(srm, "by_segment"), i), "p_adjusted"));
        fpe(x, sizeof x, lo);
        sb_add(b, "%zu segment%s; lowest Holm-adjusted p %s", ns, ns == 1 ? "" : "s", x);
    } else if (!strcmp(check, "multi_arm")) {
        fcount(x, sizeof x, json_object_get(integ, "multi_arm_units"));
        sb_add(b, "%s units assigned to more than one arm", x);
    } else if (!strcmp(check, "multi_arm_by_arm")) {
        if (!(integ_count(integ, "multi_arm_units") > 0)) {
            sb_add(b, "no units in two arms to compare");
            return false;
        }
        sb_add(b, "in proportion to the units of each arm");
    } else if (!strcmp(check, "outside_window")) {
        fcount(x, sizeof x, json_object_get(integ, "outside_window"));
        sb_add(b, "%s assignments outside the window", x);
    } else if (!strcmp(check, "duplicates")) {
        fcount(x, sizeof x, json_object_get(integ, "duplicates"));
        sb_add(b, "%s lines repeat an event id", x);
    } else if (!strcmp(check, "duplicates_by_arm")) {
        if (!(integ_count(integ, "duplicates") > 0)) {
            sb_add(b, "no repeated events to compare");
            return false;
        }
        sb_add(b, "in proportion to the units of each arm");
    } else if (!strcmp(check, "rejected")) {
        double rej = 0;
        const char *k;
        const json_t *v;
        json_object_foreach((json_t *)json_object_get(integ, "rejected"), k, v)
            if (json_is_number(v))
                rej += json_number_value(v);
        fcountd(x, sizeof x, rej);
        fcount(y, sizeof y, json_object_get(integ, "lines_read"));
        sb_add(b, "%s of %s lines rejected", x, y);
    } else if (!strcmp(check, "late")) {
        fcount(x, sizeof x, json_object_get(integ, "late_assignments"));
        sb_add(b, "%s assignments later than the lateness bound", x);
    } else if (!strcmp(check, "balance")) {
        const json_t *smd = json_object_get(integ, "balance_smd");
        if (!json_is_object(smd)) {
            sb_add(b, "no pre-period covariate configured");
            return false;
        }
        double worst = NAN;
        const char *k;
        const json_t *v;
        json_object_foreach((json_t *)smd, k, v)
            if (json_is_number(v) && (!isfinite(worst) || fabs(json_number_value(v)) > fabs(worst)))
                worst = json_number_value(v);
        fnum(x, sizeof x, isfinite(worst) ? fabs(worst) : NAN, 2, false);
        sb_add(b, "largest standardized difference before exposure: %s", x);
    } else if (!strcmp(check, "denominator")) {
        size_t i;
        const json_t *r;
        bool ratio = false;
        json_array_foreach(json_object_get(P->rec, "metrics"), i, r)
            ratio = ratio || eq(str(r, "type"), "ratio");
        if (!ratio)
            return false;
        sb_add(b, "the denominators of ratio metrics do not differ between arms");
    } else if (!strcmp(check, "hash")) {
        if (!json_object_get(integ, "hash_checked"))
            return false;
        fcount(x, sizeof x, json_object_get(integ, "hash_checked"));
        sb_add(b, "%s assignments checked, none differ", x);
    } else
        return false;
    return true;
}

/* The worst severity among the reasons of `check`: 0 none, 1 warn, 2 fail. */
static int check_state(const struct page *P, const char *check)
{
    int s = 0;
    size_t i;
    const json_t *r;
    json_array_foreach(json_object_get(json_object_get(P->rec, "integrity"), "reasons"), i, r)
        if (eq(str(r, "check"), check)) {
            int v = eq(str(r, "severity"), "fail") ? 2 : 1;
            s = v > s ? v : s;
        }
    return s;
}

static void check_row(struct page *P, const char *check, const char *title)
{
    FILE *f = P->f;
    int s = check_state(P, check);
    struct sb b = {0};
    bool applies = pass_text(P, check, &b);
    if (!s && !applies && !strcmp(check, "hash")) {
        free(b.s);
        return; /* not configured */
    }
    static const char *const tags[] = {"pass", "warn", "fail"};
    const char *tag = s ? tags[s] : applies ? "pass" : "n/a";
    const char *cls = s == 2 ? "s-fail" : s == 1 ? "s-warn" : applies ? "s-pass" : "s-na";
    const char *glyph = s == 2 ? "\xe2\x9c\x95" : s == 1 ? "!" : applies ? "\xe2\x9c\x93" : DASH;
    fprintf(f, "<tr class=\"%s\"><td class=\"st\"><span class=\"tag %s\">%s %s</span></td><td><strong>", tag, cls, glyph,
            tag);
    esc(f, title);
    fputs("</strong> <span class=\"ck\">", f);
    esc(f, check);
    fputs("</span><br />", f);
    if (s) {
        size_t i;
        const json_t *r;
        bool first = true;
        json_array_foreach(json_object_get(json_object_get(P->rec, "integrity"), "reasons"), i, r)
            if (eq(str(r, "check"), check)) {
                if (!first)
                    fputs("<br />", f);
                esc(f, str(r, "detail"));
                first = false;
            }
    } else {
        esc(f, sb_str(&b));
        if (!applies && !b.n)
            fputs("does not apply to this experiment", f);
    }
    fputs("</td></tr>\n", f);
    free(b.s);
}

static void counter(FILE *f, const char *label, const json_t *v)
{
    if (!v)
        return;
    char c[48];
    fcount(c, sizeof c, v);
    fprintf(f, "<div><dt>%s</dt><dd>%s</dd></div>\n", label, c);
}

static void integrity_section(struct page *P, int no)
{
    FILE *f = P->f;
    const json_t *integ = json_object_get(P->rec, "integrity");
    fprintf(f, "<section id=\"integrity\" aria-labelledby=\"h-integrity\">\n<h2 id=\"h-integrity\"><span "
               "class=\"no\">%d</span>Integrity checks</h2>\n",
            no);
    fputs("<p>Each check asks whether randomization and the event data behaved as they should. Passed checks "
          "show the numbers they looked at.</p>\n",
          f);
    fputs("<div class=\"scroll\"><table class=\"checks\"><caption>The integrity checklist</caption>\n"
          "<thead><tr><th>state</th><th class=\"l\">check</th></tr></thead>\n<tbody>\n",
          f);
    /* failures first, then warnings, then the rest in their usual order */
    for (int want = 2; want >= 0; want--)
        for (size_t i = 0; i < sizeof check_defs / sizeof *check_defs; i++)
            if (check_state(P, check_defs[i].check) == want)
                check_row(P, check_defs[i].check, check_defs[i].title);
    /* checks this page does not know by name */
    size_t i;
    const json_t *r;
    json_array_foreach(json_object_get(integ, "reasons"), i, r)
    {
        const char *c = str(r, "check");
        bool known = false, seen = false;
        for (size_t k = 0; k < sizeof check_defs / sizeof *check_defs; k++)
            known = known || eq(c, check_defs[k].check);
        for (size_t k = 0; k < i; k++)
            seen = seen || eq(c, str(json_array_get(json_object_get(integ, "reasons"), k), "check"));
        if (!known && !seen)
            check_row(P, c ? c : "?", c ? c : "other check");
    }
    fputs("</tbody></table></div>\n", f);

    fputs("<h3>Counters</h3>\n<dl class=\"counts\">\n", f);
    counter(f, "lines read", json_object_get(integ, "lines_read"));
    counter(f, "accepted", json_object_get(integ, "accepted"));
    double rej = 0;
    bool has_rej = json_is_object(json_object_get(integ, "rejected"));
    const char *k;
    const json_t *v;
    json_object_foreach((json_t *)json_object_get(integ, "rejected"), k, v)
        if (json_is_number(v))
            rej += json_number_value(v);
    if (has_rej) {
        char c[48];
        fcountd(c, sizeof c, rej);
        fprintf(f, "<div><dt>rejected</dt><dd>%s</dd></div>\n", c);
    }
    counter(f, "units in two arms", json_object_get(integ, "multi_arm_units"));
    counter(f, "orphan outcomes", json_object_get(integ, "orphan_outcomes"));
    counter(f, "duplicates", json_object_get(integ, "duplicates"));
    counter(f, "outside the window", json_object_get(integ, "outside_window"));
    counter(f, "late assignments", json_object_get(integ, "late_assignments"));
    counter(f, "other experiments", json_object_get(integ, "other_experiment"));
    counter(f, "ignored outcomes", json_object_get(integ, "ignored_outcomes"));
    counter(f, "other shard", json_object_get(integ, "other_shard"));
    counter(f, "hash checked", json_object_get(integ, "hash_checked"));
    counter(f, "hash mismatches", json_object_get(integ, "hash_mismatch"));
    fputs("</dl>\n", f);
    if (rej > 0) {
        fputs("<p class=\"note\">Rejected lines by reason: ", f);
        bool first = true;
        json_object_foreach((json_t *)json_object_get(integ, "rejected"), k, v)
        {
            if (!(json_is_number(v) && json_number_value(v) > 0))
                continue;
            char c[48];
            fcount(c, sizeof c, v);
            fputs(first ? "" : " · ", f);
            esc(f, k);
            fprintf(f, " %s", c);
            first = false;
        }
        fputs(".</p>\n", f);
    }
    fputs("</section>\n", f);
}

/* ------------------------------------------------------------------ */
/* sentences                                                           */

static bool better_lower(const json_t *r)
{
    return eq(str(r, "better"), "lower");
}

/* One plain paragraph about metric row r of the final record. */
static void sentence(struct page *P, const json_t *r)
{
    FILE *f = P->f;
    const char *m = str(r, "metric"), *a = str(r, "arm"), *role = str(r, "role"), *type = str(r, "type");
    const char *ctl = P->control ? P->control : "control";
    double d = get(r, "diff"), lift = get(r, "lift");
    double lo = pair_at(r, "ci", 0), hi = pair_at(r, "ci", 1);
    double llo = pair_at(r, "lift_ci", 0), lhi = pair_at(r, "lift_ci", 1);
    char lw[32];
    level_words(P, lw, sizeof lw);
    struct sb b = {0}, c = {0};
    bool est = isfinite(d);

    fprintf(f, "<p class=\"say r-");
    esc(f, role ? role : "other");
    fputs("\"><strong>", f);
    esc(f, m);
    fputs("</strong>", f);
    if (role && strcmp(role, "primary")) {
        fputs(" <span class=\"role\">(", f);
        esc(f, role);
        fputs(")</span>", f);
    }
    fputs(": ", f);

    if (!est) {
        sb_add(&b, "no estimate for %s against %s yet (too few units, or no variation in the values).", a ? a : "?",
               ctl);
    } else {
        char x[48], y[48], z[48];
        if (isfinite(lift)) {
            fpct(x, sizeof x, fabs(lift), false);
            if (lift == 0)
                sb_add(&b, "%s is the same as %s", a ? a : "?", ctl);
            else
                sb_add(&b, "%s is %s %s than %s", a ? a : "?", x, lift > 0 ? "higher" : "lower", ctl);
        } else {
            fnum(x, sizeof x, fabs(d), 4, false);
            sb_add(&b, "%s is %s %s than %s", a ? a : "?", x, d > 0 ? "higher" : d < 0 ? "lower" : "different", ctl);
        }
        double mt = get(r, "mean"), mc = get(r, "control_mean");
        const char *sep = " (";
        if (isfinite(mt) && isfinite(mc)) {
            if (eq(type, "binary")) {
                fpct(y, sizeof y, mt, false);
                fpct(z, sizeof z, mc, false);
                sb_add(&b, " (%s of units against %s", y, z);
            } else {
                fnum(y, sizeof y, mt, 4, false);
                fnum(z, sizeof z, mc, 4, false);
                sb_add(&b, " (%s against %s%s", y, z, eq(type, "ratio") ? "" : " per unit");
            }
            sep = "; ";
        }
        if (isfinite(lift) && isfinite(llo) && isfinite(lhi)) {
            fpct(y, sizeof y, llo, true);
            fpct(z, sizeof z, lhi, true);
            sb_add(&b, "%s%s %s to %s)", sep, lw, y, z);
        } else if (isfinite(lo) && isfinite(hi)) {
            fnum(y, sizeof y, lo, 4, true);
            fnum(z, sizeof z, hi, 4, true);
            sb_add(&b, "%s%s of the difference %s to %s)", sep, lw, y, z);
        } else
            sb_add(&b, "%sno interval)", sep);
        sb_add(&b, ". ");

        /* what the sequential test, or else the p-value, says */
        const char *v = str(r, "verdict");
        int kind = seq_kind(r);
        double info = get(r, "info");
        bool crossed = eq(v, "crossed-upper") || eq(v, "crossed-lower");
        if (kind && crossed) {
            bool up = eq(v, "crossed-upper");
            if (kind == 1)
                sb_add(&b, "The sequential test has crossed its %s bound, so a difference this large is unlikely "
                           "to be chance.",
                       up ? "upper" : "lower");
            else
                sb_add(&b, "The always-valid %s lies entirely %s zero, so the difference is unlikely to be chance.",
                       kind == 3 ? "confidence sequence" : "interval", up ? "above" : "below");
            bool early = kind != 1 || !(info >= 1);
            if (early)
                sb_add(&c, "it crossed before the planned end, and an estimate at an early crossing tends to overstate "
                           "the true effect");
        } else if (kind && eq(v, "burn-in")) {
            sb_add(&b, "The sequential test is still in its burn-in: too few units in an arm to judge yet.");
        } else if (kind && eq(v, "futile")) {
            sb_add(&b, "The sequential test stopped for futility: the effect it was planned to find is unlikely.");
        } else if (kind == 1) {
            char z[48], bd[48], fr[48];
            double zz = get(r, "z"), bb = get(r, "bound");
            fnum(z, sizeof z, zz, 3, false);
            fnum(bd, sizeof bd, bb, 3, false);
            if (info >= 0.01)
                snprintf(fr, sizeof fr, "%.0f%%", 100 * fmin(info, 1));
            else
                fpct(fr, sizeof fr, info, false);
            struct sb why = {0};
            if (isfinite(zz) && isfinite(bb))
                sb_add(&why, "z = %s, bound %s", z, bd);
            if (isfinite(info) && info < 1)
                sb_add(&why, "%sat %s of the planned units", why.n ? ", " : "", fr);
            if (info >= 1)
                sb_add(&b, "The planned number of units is reached and the sequential test did not cross its bound%s%s%s: "
                           "no difference has been shown.",
                       why.n ? " (" : "", sb_str(&why), why.n ? ")" : "");
            else
                sb_add(&b, "The sequential test has not crossed its bound%s%s%s, so this difference cannot yet be told "
                           "apart from chance.",
                       why.n ? " (" : "", sb_str(&why), why.n ? ")" : "");
            free(why.s);
        } else if (kind >= 2) {
            char pa[32];
            fpe(pa, sizeof pa, get(r, "p_always"));
            sb_add(&b, "The always-valid %s still includes zero (always-valid p %s), so this difference cannot "
                       "yet be told apart from chance.",
                   kind == 3 ? "confidence sequence" : "interval", pa);
        } else {
            char p1[32], p2[32];
            bool guard = eq(role, "guardrail");
            double p = get(r, guard ? "p_harm" : "p"), pa = get(r, "p_adjusted");
            fpe(p1, sizeof p1, p);
            fp(p2, sizeof p2, pa);
            double use = isfinite(pa) ? pa : p;
            double alpha = isfinite(P->level) ? 1 - P->level : 0.05;
            if (use < alpha)
                sb_add(&b, "With p %s (adjusted for the other comparisons: %s) a difference this large is unlikely "
                           "to be chance, if this is the planned end of the test.",
                       p1, p2);
            else
                sb_add(&b, "With p %s (adjusted for the other comparisons: %s) the difference is within what chance "
                           "alone produces.",
                       p1, p2);
            sb_add(&c, "without a sequential method, these p-values hold only at the planned end of the test");
        }

        /* guardrails and the direction of "better" */
        if (json_is_true(json_object_get(r, "harm"))) {
            char ph[32];
            fpe(ph, sizeof ph, get(r, "p_harm"));
            sb_add(&c, "%sthis %s has moved in the harmful direction (one-sided p %s)", c.n ? "; " : "",
                   eq(role, "guardrail") ? "guardrail" : "metric", ph);
        } else if (json_object_get(r, "better") && d != 0 && ((d > 0) == better_lower(r)))
            sb_add(&c, "%sit leans the worse way (%s is better), though not clearly", c.n ? "; " : "",
                   better_lower(r) ? "lower" : "higher");
        else if (crossed && json_object_get(r, "better") && (eq(v, "crossed-upper") == better_lower(r)))
            sb_add(&c, "%sthat is the worse direction for this metric", c.n ? "; " : "");
        if (eq(str(r, "test"), "welch_t"))
            sb_add(&c, "%sfew units: the interval relies on a small-sample approximation", c.n ? "; " : "");
        if (reason_for(P, "denominator", m))
            sb_add(&c, "%sits denominator differs between arms, so the ratios may not be comparable",
                   c.n ? "; " : "");
        if (reason_for(P, "balance", m))
            sb_add(&c, "%sthe arms already differed before the test on this metric", c.n ? "; " : "");
    }
    if (eq(P->verdict, "failed"))
        sb_add(&c, "%sthe integrity checks failed, so this estimate cannot be trusted", c.n ? "; " : "");
    else if (eq(P->verdict, "doubtful"))
        sb_add(&c, "%sintegrity warnings are open (see above), so read it with care", c.n ? "; " : "");
    esc(f, sb_str(&b));
    if (c.n) {
        fputs("<span class=\"caution\">Caution: ", f);
        esc(f, sb_str(&c));
        fputs(".</span>", f);
    }
    fputs("</p>\n", f);
    free(b.s);
    free(c.s);
}

/* ------------------------------------------------------------------ */
/* the estimates table                                                 */

static void estimates_section(struct page *P, const json_t **rows, size_t nr, int no)
{
    FILE *f = P->f;
    char lw[32];
    level_words(P, lw, sizeof lw);
    fprintf(f, "<section id=\"estimates\" aria-labelledby=\"h-estimates\">\n<h2 id=\"h-estimates\"><span "
               "class=\"no\">%d</span>All estimates</h2>\n",
            no);
    if (!nr) {
        fputs("<p>The record has no metrics.</p>\n</section>\n", f);
        return;
    }
    fputs("<p class=\"note\">Each metric and arm against ", f);
    esc(f, P->control ? P->control : "control");
    fprintf(f, ". Under each number, in small type, its %s. p adj. is Holm-adjusted across the primary metrics "
               "(guardrails: across guardrails, with p one-sided for harm; secondaries: false discovery rate). "
               "CUPED subtracts what the pre-period predicts, which narrows the interval.</p>\n",
            lw);
    fputs("<div class=\"scroll\"><table class=\"est\"><caption>Every estimate of the final record</caption>\n"
          "<thead><tr><th>metric</th><th class=\"l\">arm</th><th>units<span class=\"sub\">control</span></th>"
          "<th>mean<span class=\"sub\">control</span></th>"
          "<th>difference</th><th>lift</th><th>CUPED difference</th><th>p<span class=\"sub\">p adj.</span></th>"
          "<th class=\"l\">sequential</th></tr></thead>\n<tbody>\n",
          f);
    for (size_t i = 0; i < nr; i++) {
        const json_t *r = rows[i];
        char n[48], cn[48], mt[48], mc[48], d[48], lo[48], hi[48], l[48], llo[48], lhi[48], cd[48], clo[48],
            chi[48], p[32], pa[32];
        fcount(n, sizeof n, json_object_get(r, "n"));
        fcount(cn, sizeof cn, json_object_get(r, "control_n"));
        fnum(mt, sizeof mt, get(r, "mean"), 5, false);
        fnum(mc, sizeof mc, get(r, "control_mean"), 5, false);
        fnum(d, sizeof d, get(r, "diff"), 4, true);
        fnum(lo, sizeof lo, pair_at(r, "ci", 0), 4, true);
        fnum(hi, sizeof hi, pair_at(r, "ci", 1), 4, true);
        fpct(l, sizeof l, get(r, "lift"), true);
        fpct(llo, sizeof llo, pair_at(r, "lift_ci", 0), true);
        fpct(lhi, sizeof lhi, pair_at(r, "lift_ci", 1), true);
        fnum(cd, sizeof cd, get(r, "cuped_diff"), 4, true);
        fnum(clo, sizeof clo, pair_at(r, "cuped_ci", 0), 4, true);
        fnum(chi, sizeof chi, pair_at(r, "cuped_ci", 1), 4, true);
        bool guard = eq(str(r, "role"), "guardrail");
        fp(p, sizeof p, get(r, guard ? "p_harm" : "p"));
        fp(pa, sizeof pa, get(r, "p_adjusted"));
        lt_fix(p, sizeof p);
        lt_fix(pa, sizeof pa);
        fputs("<tr><td class=\"l\">", f);
        esc(f, str(r, "metric"));
        if (str(r, "role") && strcmp(str(r, "role"), "primary")) {
            fputs("<span class=\"sub\">", f);
            esc(f, str(r, "role"));
            fputs("</span>", f);
        }
        fputs("</td><td class=\"l\">", f);
        esc(f, str(r, "arm"));
        fprintf(f, "</td><td>%s<span class=\"sub\">%s</span></td><td>%s<span class=\"sub\">%s</span></td>"
                   "<td>%s<span class=\"sub\">%s to %s</span></td><td>%s<span class=\"sub\">%s to %s</span></td>"
                   "<td>%s<span class=\"sub\">%s to %s</span></td>",
                n, cn, mt, mc, d, lo, hi, l, llo, lhi, cd, clo, chi);
        fprintf(f, "<td>%s<span class=\"sub%s\">%s</span></td><td class=\"l\">", p,
                json_is_true(json_object_get(r, "harm")) ? " s-fail" : "", pa);
        esc(f, seq_label(str(r, "verdict")));
        fputs("</td></tr>\n", f);
    }
    fputs("</tbody></table></div>\n", f);

    /* the looks of a spending test */
    const json_t *looks = json_object_get(P->rec, "looks");
    if (json_array_size(looks)) {
        int id = ++P->id;
        fputs("<h3>Looks of the sequential test</h3>\n<p class=\"note\">Each look spends part of the error budget; "
              "its bound is the |z| an effect must reach at that look.</p>\n",
              f);
        numbers_open(P, id, "The looks so far");
        fputs("<table><caption>Looks of the sequential test</caption>\n<thead><tr><th>time</th><th>share of planned "
              "units</th><th>bound (z)</th><th>error spent so far</th></tr></thead>\n<tbody>\n",
              f);
        size_t i;
        const json_t *l;
        json_array_foreach(looks, i, l)
        {
            char w[48], fr[48], z[48], al[48];
            double t = rec_time(l);
            if (isfinite(t))
                fwhen(w, sizeof w, t);
            else
                snprintf(w, sizeof w, DASH);
            fpct(fr, sizeof fr, get(l, "fraction"), false);
            fnum(z, sizeof z, get(l, "z"), 4, false);
            fnum(al, sizeof al, get(l, "alpha_cumulative"), 3, false);
            fprintf(f, "<tr><td class=\"w\">%s</td><td>%s</td><td>%s</td><td>%s</td></tr>\n", w, fr, z, al);
        }
        fputs("</tbody></table>\n</div>\n", f);
    }
    fputs("</section>\n", f);
}

/* ------------------------------------------------------------------ */
/* the verdict                                                         */

static void verdict_icon(FILE *f, const char *v)
{
    fputs("<svg viewBox=\"0 0 40 40\" aria-hidden=\"true\" focusable=\"false\">", f);
    if (eq(v, "failed"))
        fputs("<rect x=\"3\" y=\"3\" width=\"34\" height=\"34\" rx=\"4\" fill=\"#a3302d\" />"
              "<path d=\"M13 13 L27 27 M27 13 L13 27\" stroke=\"#fff\" stroke-width=\"4\" stroke-linecap=\"round\" />",
              f);
    else if (eq(v, "doubtful"))
        fputs("<path d=\"M20 2 L38 36 H2 Z\" fill=\"#8f5f00\" />"
              "<path d=\"M20 14 V25\" stroke=\"#fff\" stroke-width=\"4\" stroke-linecap=\"round\" />"
              "<circle cx=\"20\" cy=\"31\" r=\"2.4\" fill=\"#fff\" />",
              f);
    else
        fputs("<circle cx=\"20\" cy=\"20\" r=\"18\" fill=\"#2e6a4e\" />"
              "<path d=\"M11 21 L17.5 27 L29 14\" fill=\"none\" stroke=\"#fff\" stroke-width=\"4\" "
              "stroke-linecap=\"round\" stroke-linejoin=\"round\" />",
              f);
    fputs("</svg>", f);
}

static void verdict_section(struct page *P, int no)
{
    FILE *f = P->f;
    const char *v = P->verdict ? P->verdict : "sound";
    const char *meaning =
        eq(v, "failed")
            ? "A check failed: randomization or the event data are broken, so the estimates below cannot be "
              "trusted. Find and fix the cause before drawing any conclusion."
        : eq(v, "doubtful")
            ? "Some checks raised warnings. The estimates may still be right, but read them with the warnings in "
              "mind and look into their causes."
            : "No integrity check raised a concern: randomization and the event data look as they should, so the "
              "estimates below can be read at face value.";
    fprintf(f, "<section id=\"verdict\" class=\"verdict v-%s\" aria-labelledby=\"h-verdict\">\n", v);
    fprintf(f, "<p class=\"kicker\"><span class=\"no\">%d</span> · Integrity verdict</p>\n<div class=\"vhead\">", no);
    verdict_icon(f, v);
    fprintf(f, "<h2 id=\"h-verdict\" class=\"vword\">%s</h2></div>\n<p class=\"vmean\">%s</p>\n", v, meaning);
    const json_t *reasons = json_object_get(json_object_get(P->rec, "integrity"), "reasons");
    if (json_array_size(reasons)) {
        fputs("<ul class=\"reasons\">\n", f);
        for (int pass = 0; pass < 2; pass++) {
            size_t i;
            const json_t *r;
            json_array_foreach(reasons, i, r)
            {
                bool fail = eq(str(r, "severity"), "fail");
                if (fail != (pass == 0))
                    continue;
                fprintf(f, "<li><span class=\"tag %s\">%s</span>", fail ? "s-fail" : "s-warn", fail ? "fail" : "warn");
                esc(f, str(r, "detail"));
                fputs(" <span class=\"ck\">", f);
                esc(f, str(r, "check"));
                fputs("</span></li>\n", f);
            }
        }
        fputs("</ul>\n", f);
    } else
        fputs("<p class=\"note\">No reasons to report.</p>\n", f);
    fputs("</section>\n", f);
}

/* ------------------------------------------------------------------ */

static int role_rank(const json_t *r)
{
    const char *role = str(r, "role");
    return eq(role, "primary") || !role ? 0 : eq(role, "guardrail") ? 1 : eq(role, "secondary") ? 2 : 3;
}

int render_html(FILE *f, const json_t *series, const json_t *final_rec)
{
    struct page P;
    memset(&P, 0, sizeof P);
    P.f = f;
    size_t ns = json_array_size(series);
    if (!final_rec && ns)
        final_rec = json_array_get(series, ns - 1);
    P.rec = final_rec;
    P.path = calloc(ns + 1, sizeof *P.path);
    P.t = calloc(ns + 1, sizeof *P.t);
    P.x = calloc(ns + 1, sizeof *P.x);
    size_t nr_all = json_array_size(json_object_get(final_rec, "metrics"));
    const json_t **rows = calloc(nr_all ? nr_all : 1, sizeof *rows);
    if (!P.path || !P.t || !P.x || !rows) {
        free(P.path);
        free(P.t);
        free(P.x);
        free(rows);
        return -1;
    }

    /* the path: earlier records before the final one, in time order, one
     * per moment */
    double tf = rec_time(final_rec);
    for (size_t i = 0; i < ns; i++) {
        const json_t *r = json_array_get(series, i);
        if (!json_is_object(r) || r == final_rec)
            continue;
        double t = rec_time(r);
        if (isfinite(tf) && isfinite(t) && t >= tf)
            continue;
        size_t k = P.n;
        while (k > 0 && isfinite(t) && isfinite(P.t[k - 1]) && P.t[k - 1] > t)
            k--;
        if (k > 0 && isfinite(t) && P.t[k - 1] == t) {
            P.path[k - 1] = r; /* the same moment twice: the later record stands */
            continue;
        }
        memmove(P.path + k + 1, P.path + k, (P.n - k) * sizeof *P.path);
        memmove(P.t + k + 1, P.t + k, (P.n - k) * sizeof *P.t);
        P.path[k] = r;
        P.t[k] = t;
        P.n++;
    }
    if (final_rec) {
        P.path[P.n] = final_rec;
        P.t[P.n++] = tf;
    }
    P.x_is_time = P.n > 0;
    for (size_t i = 0; i < P.n; i++)
        P.x_is_time = P.x_is_time && isfinite(P.t[i]);
    for (size_t i = 0; i < P.n; i++)
        P.x[i] = P.x_is_time ? P.t[i] : (double)i;

    /* arms, the control arm, the verdict */
    const char *k;
    const json_t *v;
    json_object_foreach((json_t *)json_object_get(final_rec, "units"), k, v)
        if (P.n_arms < MAX_ARMS)
            P.arms[P.n_arms++] = k;
    size_t i;
    const json_t *r;
    for (int a = 0; a < P.n_arms && !P.control; a++) {
        bool is_treated = false;
        json_array_foreach(json_object_get(final_rec, "metrics"), i, r)
            is_treated = is_treated || eq(str(r, "arm"), P.arms[a]);
        if (!is_treated)
            P.control = P.arms[a];
    }
    const char *verdict = str(json_object_get(final_rec, "integrity"), "verdict");
    P.verdict = eq(verdict, "failed") ? "failed" : eq(verdict, "doubtful") ? "doubtful" : "sound";
    derive_level(&P);

    /* rows: primaries first, then guardrails, secondaries, the rest */
    size_t nr = 0;
    for (int rank = 0; rank < 4; rank++)
        json_array_foreach(json_object_get(final_rec, "metrics"), i, r)
            if (json_is_object(r) && role_rank(r) == rank && nr < nr_all)
                rows[nr++] = r;

    const char *exp = str(final_rec, "exp");
    fputs("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\" />\n"
          "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\" />\n"
          "<meta name=\"generator\" content=\"abtally\" />\n<title>",
          f);
    esc(f, exp ? exp : "experiment");
    fputs(" · abtally readout</title>\n<style>\n", f);
    fputs(css, f);
    fputs("</style>\n</head>\n<body>\n<main>\n<header class=\"top\">\n<p class=\"kicker\">abtally · "
          "experiment readout</p>\n<h1>",
          f);
    esc(f, exp ? exp : "(unnamed experiment)");
    fputs("</h1>\n<p class=\"meta\">", f);
    if (isfinite(tf)) {
        char w[48];
        fwhen(w, sizeof w, tf);
        fprintf(f, "Data up to %s", w);
    } else if (final_rec)
        fputs("Data time unknown", f);
    else
        fputs("No record to show", f);
    if (json_is_true(json_object_get(final_rec, "final")))
        fputs(" · final summary", f);
    fprintf(f, " · %zu readout%s in the path", P.n, P.n == 1 ? "" : "s");
    if (P.control) {
        fputs(" · control arm: ", f);
        esc(f, P.control);
    }
    fputs("</p>\n<nav class=\"toc\" aria-label=\"Sections\"><a href=\"#verdict\">Verdict</a>"
          "<a href=\"#summary\">In plain words</a><a href=\"#effects\">Effects over time</a>"
          "<a href=\"#units\">Units</a><a href=\"#integrity\">Integrity</a><a href=\"#estimates\">All estimates</a>"
          "</nav>\n</header>\n",
          f);

    verdict_section(&P, 1);

    fputs("<section id=\"summary\" aria-labelledby=\"h-summary\">\n<h2 id=\"h-summary\"><span class=\"no\">2</span>"
          "In plain words</h2>\n",
          f);
    if (!nr)
        fputs("<p>The record has no estimates yet.</p>\n", f);
    for (size_t j = 0; j < nr; j++)
        sentence(&P, rows[j]);
    fputs("</section>\n", f);

    fputs("<section id=\"effects\" aria-labelledby=\"h-effects\">\n<h2 id=\"h-effects\"><span class=\"no\">3</span>"
          "Effects over time</h2>\n<p>Each chart follows the difference between an arm and the control as the data "
          "came in. The shaded band is the interval around it; while the band covers the zero line the data are "
          "consistent with no effect. ",
          f);
    fputs("A sequential test may stop early only when the difference passes its bound (dashed) or its always-valid "
          "band leaves zero; reading the ordinary band day after day would overstate certainty.</p>\n",
          f);
    if (!nr)
        fputs("<p>No metric to chart.</p>\n", f);
    for (size_t j = 0; j < nr; j++)
        effect_chart(&P, rows[j]);
    fputs("</section>\n", f);

    units_section(&P, 4);
    integrity_section(&P, 5);
    estimates_section(&P, rows, nr, 6);

    fputs("<footer>\n<dl>\n<dt>Interval</dt><dd>The range of effects the data are consistent with at the "
          "configured error rate, read once, at the planned end.</dd>\n"
          "<dt>Sequential bound</dt><dd>A spending test compares z (difference over its standard error) with the "
          "bound of the latest look; drawn here on the effect scale as bound times the standard error.</dd>\n"
          "<dt>Always-valid interval</dt><dd>An interval that may be read at every look without inflating false "
          "positives; it is wider than the ordinary one.</dd>\n"
          "<dt>Sample-ratio mismatch</dt><dd>Units not split as the weights say: a sign that assignment or logging "
          "lost units in one arm, which biases every estimate.</dd>\n</dl>\n"
          "<p>Made by abtally from the final record",
          f);
    if (exp) {
        fputs(" of ", f);
        esc(f, exp);
    }
    fputs(". Results are evidence, not decisions.</p>\n</footer>\n</main>\n</body>\n</html>\n", f);

    free(P.path);
    free(P.t);
    free(P.x);
    free(rows);
    return ferror(f) ? -1 : 0;
}
