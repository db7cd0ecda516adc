/*
 * render.h — readouts for people, drawn from output records (the JSON of
 * DESIGN.md "Output"), so every view shows exactly the numbers of the record.
 */
#ifndef ABTALLY_RENDER_H
#define ABTALLY_RENDER_H

#include <jansson.h>
#include <stdbool.h>
#include <stdio.h>

/* The terminal readout of a final record: verdict first, then the reasons,
 * units and SRM, then the estimates table. colour: ANSI colours. */
int render_text(FILE *f, const json_t *rec, bool colour);

/* The HTML readout: one self-contained page (inline CSS and SVG, no script,
 * nothing fetched) with the verdict and its reasons, a plain sentence per
 * metric and arm, the path of each effect over time with its interval and
 * sequential bound, units per arm per day with the daily SRM p, the
 * integrity checklist and every estimate. series: the earlier records (an
 * array, may be empty or NULL; records at or after final_rec's time are
 * left out); final_rec: the record read out (NULL: the last of series).
 * Borrows both. Every string from the data is escaped. Returns 0, or -1
 * when out of memory or the write failed. */
int render_html(FILE *f, const json_t *series, const json_t *final_rec);

#endif
