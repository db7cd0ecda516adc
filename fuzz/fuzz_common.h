/*
 * fuzz_common.h — shared pieces of the libFuzzer harnesses (fuzz/fuzz_*.c): the
 * fixed experiment config the decoder, ledger and snapshot harnesses run
 * against, and the layout built from it (the growable byte buffer they
 * ledger_save into is tests/bytebuf.h, shared with the cmocka suites).
 *
 * The config exercises every metric type, a cap, an attribution window, the
 * covariate and the hash re-check of assignments, so that fuzzed events reach
 * every join rule. fixtures/fuzz/ seeds are made against this same text
 * (tests/fuzz-seeds.sh writes it out with --print-config).
 */
#ifndef ABTALLY_FUZZ_COMMON_H
#define ABTALLY_FUZZ_COMMON_H

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "config.h"
#include "err.h"
#include "ledger.h"
#include "../tests/bytebuf.h"

static const char FUZZ_CONFIG[] =
    "{\"experiment\": \"lamp-shop-banner\",\n"
    " \"arms\": [{\"name\": \"holdout\", \"weight\": 2, \"buckets\": [0, 500]},\n"
    "          {\"name\": \"warm\", \"weight\": 1, \"buckets\": [500, 750]},\n"
    "          {\"name\": \"cool\", \"weight\": 1, \"buckets\": [750, 1000]}],\n"
    " \"control\": \"holdout\",\n"
    " \"window\": {\"start\": \"2026-11-02T00:00:00Z\", \"end\": \"2026-11-20T00:00:00Z\"},\n"
    " \"metrics\": [\n"
    "  {\"name\": \"basket\", \"type\": \"mean\", \"event\": \"basket\", \"attribution_hours\": 72, \"cap\": 500},\n"
    "  {\"name\": \"bought\", \"type\": \"binary\", \"event\": \"basket\"},\n"
    "  {\"name\": \"per_visit\", \"type\": \"ratio\", \"numerator\": \"basket\", \"denominator\": \"visit\"},\n"
    "  {\"name\": \"errors\", \"type\": \"mean\", \"event\": \"page_error\", \"role\": \"guardrail\", \"better\": \"lower\"}],\n"
    " \"covariate\": {\"pre_days\": 3},\n"
    " \"hash\": {\"function\": \"md5\", \"salt\": \"lamp\", \"buckets\": 1000, \"format\": \"{salt}:{unit}\"}}\n";

/* The config and layout every harness shares, built on first use (never freed:
 * they are reachable through these statics, so no leak is reported). */
static struct config fuzz_cfg;
static struct layout fuzz_lay;

static inline const struct layout *fuzz_layout(void)
{
    static int ready;
    if (!ready) {
        struct err e;
        err_clear(&e);
        if (config_parse(FUZZ_CONFIG, sizeof FUZZ_CONFIG - 1, "fuzz", &fuzz_cfg, &e) ||
            layout_init(&fuzz_lay, &fuzz_cfg, 3600LL * 1000000, 86400LL * 1000000, &e)) {
            fprintf(stderr, "fuzz: the fixed config does not load: %s\n", e.msg);
            abort();
        }
        ready = 1;
    }
    return &fuzz_lay;
}

#endif
