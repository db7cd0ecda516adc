/*
 * fuzz_config.c — libFuzzer harness: the experiment config loader.
 *
 * The input is the config text given to config_parse (config.h). A config
 * that loads is compiled into a ledger layout and released; a refused one
 * must come with a message. Nothing may crash, leak or read out of bounds.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "config.h"
#include "err.h"
#include "ledger.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    /* an exact-size copy: ASan catches any read past the text */
    char *text = malloc(size ? size : 1);
    if (!text)
        return 0;
    memcpy(text, data, size);
    struct config c;
    struct err e;
    err_clear(&e);
    memset(&c, 0, sizeof c);
    int rc = config_parse(text, size, "fuzz.json", &c, &e);
    if (rc) {
        if (!e.msg[0] || rc != e.code) {
            fprintf(stderr, "fuzz_config: refused without a message\n");
            abort();
        }
    } else {
        if (c.n_arms < 2 || c.n_arms > CONFIG_MAX_ARMS || c.control < 0 || c.control >= c.n_arms ||
            c.n_metrics > CONFIG_MAX_METRICS) {
            fprintf(stderr, "fuzz_config: accepted a config that breaks the limits\n");
            abort();
        }
        struct layout lay;
        if (layout_init(&lay, &c, 3600LL * 1000000, 86400LL * 1000000, &e) == AB_OK)
            layout_release(&lay);
    }
    config_release(&c);
    free(text);
    return 0;
}
