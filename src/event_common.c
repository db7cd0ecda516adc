/*
 * event_common.c — the parts of event.h shared by every decoder: the names of
 * the rejection reasons (part of the output contract), str_eq and the checks
 * every decoder makes before it parses (event_line_start). No JSON parsing
 * happens here.
 */
#include <string.h>

#include "event.h"
#include "event_ref.h"

static const char *const reject_names[REJ_COUNT] = {
    [REJ_NONE] = "none",
    [REJ_NOT_JSON] = "not_json",
    [REJ_MISSING_FIELD] = "missing_field",
    [REJ_BAD_TYPE] = "bad_type",
    [REJ_UNKNOWN_KIND] = "unknown_kind",
    [REJ_BAD_TIME] = "bad_time",
    [REJ_NOT_FINITE] = "not_finite",
    [REJ_TOO_LONG] = "too_long",
    [REJ_UNKNOWN_ARM] = "unknown_arm",
    [REJ_EMPTY] = "empty_line",
};

const char *reject_name(enum reject r)
{
    return r >= 0 && r < REJ_COUNT ? reject_names[r] : "unknown";
}

bool str_eq(struct str s, const char *z)
{
    size_t n = strlen(z);
    return s.p && s.n == n && memcmp(s.p, z, n) == 0;
}


enum reject event_line_start(const char *line, size_t len, size_t *start)
{
    if (len > EVENT_MAX_LINE)
        return REJ_TOO_LONG;
    size_t i = 0;
    while (i < len && (line[i] == ' ' || line[i] == '\t' || line[i] == '\r'))
        i++;
    *start = i;
    return i == len ? REJ_EMPTY : REJ_NONE;
}
