/*
 * states.h — loading a set of snapshots for a readout (check --state, merge).
 */
#ifndef ABTALLY_STATES_H
#define ABTALLY_STATES_H

#include "err.h"
#include "ledger.h"

struct state_set {
    struct ledger **ledgers;
    int n;
};

/* Loads every snapshot named by args (files, or directories whose *.abstate
 * files are all taken). At least one snapshot is required. */
int state_set_load(struct state_set *s, const struct layout *lay, char *const *args, int n_args,
                   struct err *e);
void state_set_release(struct state_set *s);

#endif
