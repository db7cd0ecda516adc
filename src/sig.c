/*
 * sig.c — the stop flag and its SIGINT/SIGTERM handlers (see sig.h).
 *
 * Must never do anything in the handler but store the signal number: only
 * async-signal-safe work is allowed there. stop_signal is the only global of
 * the program.
 */
#include "sig.h"

#include <errno.h>
#include <signal.h>
#include <string.h>

/* 0 while running; the number of the signal that asked to stop afterwards. */
static volatile sig_atomic_t stop_signal;

static void on_stop_signal(int sig)
{
    stop_signal = sig;
}

static int install(int flags, struct err *e)
{
    static const int sigs[] = {SIGINT, SIGTERM};
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_stop_signal;
    sigemptyset(&sa.sa_mask);
    sa.sa_flags = flags | SA_RESETHAND;
    stop_signal = 0;
    for (size_t i = 0; i < sizeof sigs / sizeof sigs[0]; i++)
        if (sigaction(sigs[i], &sa, NULL) != 0)
            return err_set(e, AB_EINPUT, "signal handler for signal %d: %s", sigs[i], strerror(errno));
    return AB_OK;
}

int sig_install(struct err *e)
{
    return install(SA_RESTART, e);
}

int sig_install_interrupting(struct err *e)
{
    return install(0, e);
}

bool sig_stop_requested(void)
{
    return stop_signal != 0;
}

int sig_stop_signal(void)
{
    return stop_signal;
}

void sig_request_stop(int sig)
{
    stop_signal = sig > 0 ? sig : SIGTERM;
}

void sig_reset(void)
{
    stop_signal = 0;
}
