/*
 * event_ref.h — the reference event decoder, on Jansson (src/event_jansson.c).
 *
 * Same contract as decoder_decode() in event.h, written for clarity, not
 * speed. The decoder of event.h (src/event_simdjson.cc) is checked against it
 * line by line (tests/test_decoder_diff.c) and asks it for the reason of a
 * line it finds malformed, so the two always agree. An event's strings point
 * into the reference decoder's own buffer, valid until its next decode.
 */
#ifndef ABTALLY_EVENT_REF_H
#define ABTALLY_EVENT_REF_H

#include "event.h"

struct decoder_ref;

/* Returns a new reference decoder, or NULL when out of memory. */
struct decoder_ref *decoder_jansson_new(void);
/* Frees it; NULL does nothing. */
void decoder_jansson_free(struct decoder_ref *d);
/* Decodes line[0..len) (no trailing newline) into *ev: REJ_NONE or a reason. */
enum reject decoder_jansson_decode(struct decoder_ref *d, const char *line, size_t len, struct event *ev);

/* What both decoders check before parsing: a line over EVENT_MAX_LINE is
 * REJ_TOO_LONG, one of blanks (space, tab, CR) only is REJ_EMPTY; otherwise
 * REJ_NONE with *start at its first other byte. */
enum reject event_line_start(const char *line, size_t len, size_t *start);

/* Lines the fast decoder (event.h) handed to the reference decoder so far:
 * the ones it found malformed or could not take whole. For tests and the
 * benchmark (a well-formed event line should never be among them). */
uint64_t decoder_slow_lines(const struct decoder *d);

#endif
