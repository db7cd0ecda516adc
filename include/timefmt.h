/*
 * timefmt.h — event times and durations.
 *
 * Times are int64 microseconds since the Unix epoch, UTC. Inputs are RFC 3339
 * date-times ("2026-11-03T10:15:02.123Z", "1996-12-19T16:39:57-08:00"; a
 * lowercase 't'/'z' or a space for the 'T' are accepted as RFC 3339 §5.6
 * allows; a leap second :60 is read as the next second; fraction digits past
 * the sixth are dropped) or integer epoch milliseconds. Pure functions.
 */
#ifndef ABTALLY_TIMEFMT_H
#define ABTALLY_TIMEFMT_H

#include <stddef.h>
#include <stdint.h>

#define US_PER_SEC INT64_C(1000000)
#define US_PER_HOUR (INT64_C(3600) * US_PER_SEC)
#define US_PER_DAY (INT64_C(24) * US_PER_HOUR)

/* Earliest and latest accepted times: years 1900..9999 (anything else is bad_time). */
#define TIME_MIN_US (INT64_C(-2208988800) * US_PER_SEC)
#define TIME_MAX_US (INT64_C(253402300800) * US_PER_SEC - 1) /* 9999-12-31T23:59:59.999999Z */

/* Parses an RFC 3339 date-time of n bytes into *us. Returns 0, or -1 when malformed. */
int time_parse_rfc3339(const char *s, size_t n, int64_t *us);

/* The same, remembering the day of the last date read in *c (zeroed before
 * first use; NULL: no cache): the hot path of the event decoder. */
struct time_day_cache {
    char date[10]; /* "YYYY-MM-DD" of a valid date, or zeros */
    int64_t day;   /* its days since 1970-01-01 */
};
int time_parse_rfc3339_cached(const char *s, size_t n, int64_t *us, struct time_day_cache *c);

/* The same without the fast path for the common forms (for tests: they must
 * agree on every input). */
int time_parse_rfc3339_general(const char *s, size_t n, int64_t *us);

/* Converts epoch milliseconds (as a double holding an integer) into *us.
 * Returns 0, or -1 when not an integer or out of range. */
int time_from_epoch_ms(double ms, int64_t *us);

/* Writes us as "YYYY-MM-DDTHH:MM:SS[.ffffff]Z" (fraction only when non-zero,
 * trimmed of trailing zeros) into buf (at least 32 bytes). */
void time_format(int64_t us, char *buf, size_t n);

/* Parses a duration "250ms", "90s", "30m", "1h", "7d", "1.5h" (a bare number means
 * hours) into *us (> 0). Returns 0, or -1 when malformed or not positive. */
int duration_parse(const char *s, int64_t *us);

/* Floor division of a time by a positive step (towards −∞). */
int64_t time_floor(int64_t us, int64_t step);

/* Seconds on the monotonic clock (for elapsed times, never for event times). */
double time_mono_s(void);

#endif
