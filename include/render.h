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

#endif
