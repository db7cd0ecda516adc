/*
 * sig.h — the stop flag: SIGINT and SIGTERM ask a long-running command
 * (broker, publish, watch) to stop at its next check.
 *
 * The flag is the one global of abtally (a static volatile sig_atomic_t in
 * sig.c). The handler only records the signal; every other action happens in
 * the command's own loop, which polls sig_stop_requested() between steps.
 * sig_install uses SA_RESTART (stdio and blocking reads are not interrupted by
 * the first signal); sig_install_interrupting does not, so that a read
 * blocked on an idle pipe returns EINTR and the command notices the stop at
 * once. Both use SA_RESETHAND: a second SIGINT/SIGTERM ends the process the
 * default way, so a stuck shutdown can still be broken.
 */
#ifndef ABTALLY_SIG_H
#define ABTALLY_SIG_H

#include <stdbool.h>

#include "err.h"

/* Installs the SIGINT and SIGTERM handlers and clears the flag.
 * Returns AB_OK, or AB_EINPUT with *e filled when sigaction fails. */
int sig_install(struct err *e);

/* The same without SA_RESTART: system calls blocked when the signal arrives
 * (e.g. read on stdin) fail with EINTR. For commands whose loop may block in
 * a read (publish from a pipe). */
int sig_install_interrupting(struct err *e);

/* True once SIGINT or SIGTERM arrived (or sig_request_stop was called). */
bool sig_stop_requested(void);

/* The number of the signal that asked to stop; 0 when none did. */
int sig_stop_signal(void);

/* Sets the flag as if signal `sig` (> 0) had arrived: for tests and for a
 * command that wants its loops to wind down the same way. */
void sig_request_stop(int sig);

/* Clears the flag (tests run several stops in one process). */
void sig_reset(void);

#endif
