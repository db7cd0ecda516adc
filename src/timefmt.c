/*
 * timefmt.c — RFC 3339 parsing and formatting (see timefmt.h).
 *
 * Calendar arithmetic uses the days-from-civil algorithm for the proleptic
 * Gregorian calendar (H. Hinnant, "chrono-compatible low-level date
 * algorithms"), which is exact for every year we accept.
 */
#include "timefmt.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static int64_t days_from_civil(int64_t y, unsigned m, unsigned d)
{
    y -= m <= 2;
    int64_t era = (y >= 0 ? y : y - 399) / 400;
    unsigned yoe = (unsigned)(y - era * 400);
    unsigned doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
    unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    return era * 146097 + (int64_t)doe - 719468;
}

static void civil_from_days(int64_t z, int64_t *y, unsigned *m, unsigned *d)
{
    z += 719468;
    int64_t era = (z >= 0 ? z : z - 146096) / 146097;
    unsigned doe = (unsigned)(z - era * 146097);
    unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
    unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    unsigned mp = (5 * doy + 2) / 153;
    *d = doy - (153 * mp + 2) / 5 + 1;
    *m = mp < 10 ? mp + 3 : mp - 9;
    *y = (int64_t)yoe + era * 400 + (*m <= 2);
}

static int is_leap(int64_t y)
{
    return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
}

static unsigned days_in_month(int64_t y, unsigned m)
{
    static const unsigned dm[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
    return m == 2 && is_leap(y) ? 29 : dm[m - 1];
}

/* Reads exactly k digits at s[*i]; returns -1 if any is not a digit. */
static int digits(const char *s, size_t n, size_t *i, int k)
{
    int v = 0;
    for (int j = 0; j < k; j++) {
        if (*i >= n || s[*i] < '0' || s[*i] > '9')
            return -1;
        v = v * 10 + (s[*i] - '0');
        (*i)++;
    }
    return v;
}

static int expect(const char *s, size_t n, size_t *i, char c)
{
    if (*i >= n || s[*i] != c)
        return -1;
    (*i)++;
    return 0;
}

/* Two digits at p, or -1. */
static int two_digits(const char *p)
{
    unsigned a = (unsigned)(unsigned char)p[0] - '0', b = (unsigned)(unsigned char)p[1] - '0';
    return a > 9 || b > 9 ? -1 : (int)(a * 10 + b);
}

/* The forms nearly every event carries, "YYYY-MM-DDTHH:MM:SSZ" and
 * "YYYY-MM-DDTHH:MM:SS.fffZ", read without the general parser's byte-by-byte
 * steps (which took about 5% of a replay); the day of the date part comes
 * from the cache when its 10 bytes are the cached ones (a log's consecutive
 * lines nearly always share the date). Returns 0 with *us set, or 1 when s is
 * not such a time, valid: then the general parser decides, so the results
 * never differ (tests/test_event.c compares them). */
static int parse_common(const char *s, size_t n, int64_t *us, struct time_day_cache *c)
{
    if ((n != 20 && n != 24) || s[4] != '-' || s[7] != '-' || s[10] != 'T' || s[13] != ':' ||
        s[16] != ':' || s[n - 1] != 'Z')
        return 1;
    int ms = 0;
    if (n == 24) {
        int f = two_digits(s + 20);
        unsigned f3 = (unsigned)(unsigned char)s[22] - '0';
        if (s[19] != '.' || f < 0 || f3 > 9)
            return 1;
        ms = f * 10 + (int)f3;
    }
    int h = two_digits(s + 11), mi = two_digits(s + 14), se = two_digits(s + 17);
    if ((h | mi | se) < 0 || h > 23 || mi > 59 || se > 60)
        return 1;
    int64_t day;
    if (c && !memcmp(s, c->date, sizeof c->date)) {
        day = c->day;
    } else {
        int y1 = two_digits(s), y2 = two_digits(s + 2), mo = two_digits(s + 5), d = two_digits(s + 8);
        if ((y1 | y2 | mo | d) < 0)
            return 1;
        int y = y1 * 100 + y2;
        if (mo < 1 || mo > 12 || d < 1 || (unsigned)d > days_in_month(y, (unsigned)mo))
            return 1;
        day = days_from_civil(y, (unsigned)mo, (unsigned)d);
        if (c) {
            memcpy(c->date, s, sizeof c->date);
            c->day = day;
        }
    }
    int64_t secs = day * 86400 + (int64_t)h * 3600 + (int64_t)mi * 60 + se;
    int64_t t = secs * US_PER_SEC + (int64_t)ms * 1000;
    if (t < TIME_MIN_US || t > TIME_MAX_US)
        return 1;
    *us = t;
    return 0;
}

int time_parse_rfc3339(const char *s, size_t n, int64_t *us)
{
    return time_parse_rfc3339_cached(s, n, us, NULL);
}

int time_parse_rfc3339_cached(const char *s, size_t n, int64_t *us, struct time_day_cache *c)
{
    if (!parse_common(s, n, us, c))
        return 0;
    return time_parse_rfc3339_general(s, n, us);
}

int time_parse_rfc3339_general(const char *s, size_t n, int64_t *us)
{
    size_t i = 0;
    int y = digits(s, n, &i, 4);
    if (y < 0 || expect(s, n, &i, '-'))
        return -1;
    int mo = digits(s, n, &i, 2);
    if (mo < 1 || mo > 12 || expect(s, n, &i, '-'))
        return -1;
    int d = digits(s, n, &i, 2);
    if (d < 1 || (unsigned)d > days_in_month(y, (unsigned)mo))
        return -1;
    if (i >= n || (s[i] != 'T' && s[i] != 't' && s[i] != ' '))
        return -1;
    i++;
    int h = digits(s, n, &i, 2);
    if (h < 0 || h > 23 || expect(s, n, &i, ':'))
        return -1;
    int mi = digits(s, n, &i, 2);
    if (mi < 0 || mi > 59 || expect(s, n, &i, ':'))
        return -1;
    int se = digits(s, n, &i, 2);
    if (se < 0 || se > 60)
        return -1;
    int64_t frac = 0;
    if (i < n && s[i] == '.') {
        i++;
        int nd = 0;
        while (i < n && s[i] >= '0' && s[i] <= '9') {
            if (nd < 6)
                frac = frac * 10 + (s[i] - '0');
            nd++;
            i++;
        }
        if (nd == 0)
            return -1;
        for (; nd < 6; nd++)
            frac *= 10;
    }
    int64_t off = 0;
    if (i < n && (s[i] == 'Z' || s[i] == 'z')) {
        i++;
    } else if (i < n && (s[i] == '+' || s[i] == '-')) {
        int sign = s[i] == '-' ? -1 : 1;
        i++;
        int oh = digits(s, n, &i, 2);
        if (oh < 0 || oh > 23 || expect(s, n, &i, ':'))
            return -1;
        int om = digits(s, n, &i, 2);
        if (om < 0 || om > 59)
            return -1;
        off = sign * ((int64_t)oh * 3600 + om * 60);
    } else {
        return -1;
    }
    if (i != n)
        return -1;
    int64_t secs = days_from_civil(y, (unsigned)mo, (unsigned)d) * 86400 + (int64_t)h * 3600 +
                   (int64_t)mi * 60 + se - off;
    int64_t t = secs * US_PER_SEC + frac;
    if (t < TIME_MIN_US || t > TIME_MAX_US)
        return -1;
    *us = t;
    return 0;
}

int time_from_epoch_ms(double ms, int64_t *us)
{
    if (!isfinite(ms) || ms != floor(ms))
        return -1;
    if (ms < (double)(TIME_MIN_US / 1000) || ms > (double)(TIME_MAX_US / 1000))
        return -1;
    *us = (int64_t)ms * 1000;
    return 0;
}

int64_t time_floor(int64_t us, int64_t step)
{
    int64_t q = us / step;
    if (us % step != 0 && us < 0)
        q--;
    return q * step;
}

double time_mono_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

void time_format(int64_t us, char *buf, size_t n)
{
    int64_t secs = time_floor(us, US_PER_SEC) / US_PER_SEC;
    int64_t frac = us - secs * US_PER_SEC;
    int64_t days = time_floor(secs, 86400) / 86400;
    int64_t sod = secs - days * 86400;
    int64_t y;
    unsigned m, d;
    civil_from_days(days, &y, &m, &d);
    int len = snprintf(buf, n, "%04lld-%02u-%02uT%02d:%02d:%02d", (long long)y, m, d,
                       (int)(sod / 3600), (int)(sod / 60 % 60), (int)(sod % 60));
    if (frac && len > 0 && (size_t)len < n) {
        char f[24];
        snprintf(f, sizeof f, "%06lld", (long long)frac);
        int k = 6;
        while (k > 1 && f[k - 1] == '0')
            k--;
        f[k] = '\0';
        len += snprintf(buf + len, n - (size_t)len, ".%s", f);
    }
    if (len > 0 && (size_t)len < n)
        snprintf(buf + len, n - (size_t)len, "Z");
}

int duration_parse(const char *s, int64_t *us)
{
    if (!s || !*s)
        return -1;
    char *end;
    double v = strtod(s, &end);
    if (end == s || !isfinite(v) || v <= 0)
        return -1;
    double unit;
    if (!strcmp(end, "ms"))
        unit = 1e3;
    else if (!strcmp(end, "s"))
        unit = 1e6;
    else if (!strcmp(end, "m") || !strcmp(end, "min"))
        unit = 60e6;
    else if (!strcmp(end, "h") || !*end)
        unit = 3600e6;
    else if (!strcmp(end, "d"))
        unit = 86400e6;
    else if (!strcmp(end, "w"))
        unit = 7 * 86400e6;
    else
        return -1;
    double r = v * unit;
    if (r < 1 || r > 1e17)
        return -1;
    *us = (int64_t)llround(r);
    return 0;
}
