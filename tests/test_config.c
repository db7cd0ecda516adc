/*
 * test_config.c — the experiment config (config.h, DESIGN.md "Experiment config").
 *
 * fixtures/config/full.json sets every section and is read back field by
 * field; the expected times come from Python's datetime (the call is given
 * beside each). Every error case checks that config_parse fails with
 * AB_EINPUT and that the message names the config and the full key path
 * (strstr), and where the case is about a value or a limit, that too.
 * Tables write JSON with ' for " (q() swaps them back). Every config,
 * parsed or not, is released, so AddressSanitizer sees any leak.
 */
#include <float.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "helpers.h"
#include "config.h"
#include "timefmt.h"

#define FULL_FIXTURE "fixtures/config/full.json"

/* A heap copy of s with every ' turned into ", NUL-terminated. */
static char *q(const char *s)
{
    size_t n = strlen(s);
    char *b = malloc(n + 1);
    assert_non_null(b);
    for (size_t i = 0; i <= n; i++)
        b[i] = s[i] == '\'' ? '"' : s[i];
    return b;
}

/* Parses a ' -quoted config; returns the status. */
static int parse(const char *text, struct config *c, struct err *e)
{
    char *b = q(text);
    err_clear(e);
    int rc = config_parse(b, strlen(b), "exp.json", c, e);
    free(b);
    return rc;
}

/* -------------------------------------------------------------- valid */

static void test_config__full_fixture(void **state)
{
    (void)state;
    struct config c;
    struct err e;
    err_clear(&e);
    int rc = config_load(FULL_FIXTURE, &c, &e);
    if (rc)
        fail_msg("%s (run the test from the repository root): %s", FULL_FIXTURE, e.msg);

    assert_string_equal(c.experiment, "lamp-shop-banner-2026-11");
    /* arms, with weights 2:1:1 normalized to sum 1 */
    assert_int_equal(c.n_arms, 3);
    assert_string_equal(c.arms[0].name, "holdout");
    assert_string_equal(c.arms[1].name, "warm-banner");
    assert_string_equal(c.arms[2].name, "cool-banner");
    assert_rel_close(c.arms[0].weight, 0.5, 4 * DBL_EPSILON);
    assert_rel_close(c.arms[1].weight, 0.25, 4 * DBL_EPSILON);
    assert_rel_close(c.arms[2].weight, 0.25, 4 * DBL_EPSILON);
    assert_int_equal(c.control, 0);
    assert_int_equal(config_arm_index(&c, "cool-banner", 11), 2);

    /* python3 -c "from datetime import *; print((datetime(2026,11,2,6,30,tzinfo=timezone(timedelta(hours=5,minutes=30)))-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(microseconds=1))"
       → 1793581200000000 */
    assert_int_equal(c.window_start, INT64_C(1793581200000000));
    /* the end is given in epoch ms, 1796083200000:
       python3 -c "from datetime import *; print((datetime(2026,12,1,tzinfo=timezone.utc)-datetime(1970,1,1,tzinfo=timezone.utc))//timedelta(milliseconds=1))" */
    assert_int_equal(c.window_end, INT64_C(1796083200000000));

    assert_int_equal(c.n_metrics, 4);
    const struct metric_cfg *m = c.metrics;
    assert_string_equal(m[0].name, "basket_value");
    assert_int_equal(m[0].type, MT_MEAN);
    assert_string_equal(m[0].event, "basket_value");
    assert_int_equal(m[0].role, ROLE_PRIMARY);
    assert_int_equal(m[0].better, 0);
    assert_true(m[0].has_window);
    /* python3 -c "from datetime import *; print(timedelta(hours=168)//timedelta(microseconds=1))" → 604800000000 */
    assert_int_equal(m[0].window_us, INT64_C(604800000000));
    assert_true(m[0].has_cap);
    assert_rel_close(m[0].cap, 500.0, 0);

    assert_string_equal(m[1].name, "bought");
    assert_int_equal(m[1].type, MT_BINARY);
    assert_string_equal(m[1].event, "basket_value");
    assert_int_equal(m[1].role, ROLE_PRIMARY);
    assert_false(m[1].has_window);
    assert_false(m[1].has_cap);

    assert_string_equal(m[2].name, "value_per_visit");
    assert_int_equal(m[2].type, MT_RATIO);
    assert_string_equal(m[2].numerator, "basket_value");
    assert_string_equal(m[2].denominator, "visit");
    assert_null(m[2].event);
    assert_int_equal(m[2].role, ROLE_SECONDARY);
    assert_int_equal(m[2].better, 1);

    assert_string_equal(m[3].name, "page_errors");
    assert_string_equal(m[3].event, "page_error");
    assert_int_equal(m[3].role, ROLE_GUARDRAIL);
    assert_int_equal(m[3].better, -1);
    assert_true(m[3].has_window);
    /* python3 -c "from datetime import *; print(timedelta(hours=1.5)//timedelta(microseconds=1))" → 5400000000 */
    assert_int_equal(m[3].window_us, INT64_C(5400000000));

    assert_true(c.has_covariate);
    /* python3 -c "from datetime import *; print(timedelta(days=14)//timedelta(microseconds=1))" → 1209600000000 */
    assert_int_equal(c.pre_us, INT64_C(1209600000000));
    assert_rel_close(c.alpha, 0.1, 0);
    assert_rel_close(c.srm_threshold, 0.0005, 0);
    assert_rel_close(c.srm_prior, 50, 0);

    assert_int_equal(c.seq.method, SEQ_SPENDING);
    assert_int_equal(c.seq.shape, SEQ_HSD);
    assert_rel_close(c.seq.gamma, -2, 0);
    assert_rel_close(c.seq.planned_units, 200000, 0);
    /* python3 -c "from datetime import *; print(timedelta(hours=12)//timedelta(microseconds=1))" → 43200000000 */
    assert_int_equal(c.seq.look_every_us, INT64_C(43200000000));
    assert_int_equal(c.seq.sides, 1);
    assert_int_equal(c.seq.burn_in_units, 250);

    assert_rel_close(c.integ.p_fail, 0.002, 0);
    assert_rel_close(c.integ.multi_arm_fail, 0.02, 0);
    assert_rel_close(c.integ.outside_window_warn, 0.003, 0);
    assert_rel_close(c.integ.duplicates_warn, 0.004, 0);
    assert_rel_close(c.integ.rejected_warn, 0.005, 0);
    assert_rel_close(c.integ.rejected_fail, 0.06, 0);
    assert_rel_close(c.integ.smd_warn, 0.15, 0);
    assert_rel_close(c.integ.late_warn, 0.007, 0);

    assert_true(c.hash.enabled);
    assert_int_equal(c.hash.function, 1); /* md5 (config.h: 0 sha256, 1 md5) */
    assert_string_equal(c.hash.salt, "lamp-2026");
    assert_string_equal(c.hash.format, "{salt}:{unit}");
    assert_int_equal(c.hash.buckets, 1000);
    static const uint64_t lo[] = {0, 500, 750}, hi[] = {500, 750, 1000};
    for (int i = 0; i < 3; i++) {
        assert_int_equal(c.hash.lo[i], lo[i]);
        assert_int_equal(c.hash.hi[i], hi[i]);
    }
    config_release(&c);
    /* released: zeroed, and a second release is harmless */
    assert_null(c.experiment);
    assert_int_equal(c.n_arms, 0);
    config_release(&c);
}

/* DESIGN.md's example config (with its own names) parses. */
static void test_config__design_example(void **state)
{
    (void)state;
    static const char text[] =
        "{'experiment':'checkout-2026-11',"
        " 'arms':[{'name':'control','weight':0.5},{'name':'treatment','weight':0.5}],"
        " 'control':'control',"
        " 'window':{'start':'2026-11-02T00:00:00Z','end':'2026-11-30T00:00:00Z'},"
        " 'metrics':["
        "  {'name':'order_value','type':'mean','event':'order_value','attribution_hours':168},"
        "  {'name':'converted','type':'binary','event':'order_value'},"
        "  {'name':'value_per_session','type':'ratio','numerator':'order_value','denominator':'sessions'},"
        "  {'name':'page_errors','type':'mean','event':'page_error','role':'guardrail','better':'lower'}],"
        " 'covariate':{'pre_days':14},"
        " 'alpha':0.05,"
        " 'srm':{'threshold':0.001},"
        " 'sequential':{'method':'spending','shape':'obf','planned_units':200000}}";
    struct config c;
    struct err e;
    int rc = parse(text, &c, &e);
    if (rc)
        fail_msg("%s", e.msg);
    assert_int_equal(c.n_arms, 2);
    assert_int_equal(c.n_metrics, 4);
    assert_int_equal(c.seq.method, SEQ_SPENDING);
    assert_int_equal(c.seq.shape, SEQ_OBF);
    /* python3 -c "from datetime import *; e=datetime(1970,1,1,tzinfo=timezone.utc); print((datetime(2026,11,2,tzinfo=timezone.utc)-e)//timedelta(microseconds=1), (datetime(2026,11,30,tzinfo=timezone.utc)-e)//timedelta(microseconds=1))"
       → 1793577600000000 1795996800000000 */
    assert_int_equal(c.window_start, INT64_C(1793577600000000));
    assert_int_equal(c.window_end, INT64_C(1795996800000000));
    config_release(&c);
}

/* The other sequential methods, and weights that need normalizing. */
static void test_config__other_methods(void **state)
{
    (void)state;
    static const struct {
        const char *text;
        enum seq_method method;
    } cases[] = {
        {"{'experiment':'e','arms':[{'name':'control','weight':3},{'name':'b','weight':1}],"
         "'sequential':{'method':'mixture','tau':0.25}}",
         SEQ_MIXTURE},
        {"{'experiment':'e','arms':[{'name':'control','weight':3},{'name':'b','weight':1}],"
         "'sequential':{'method':'sequence','rho':1000}}",
         SEQ_SEQUENCE},
        {"{'experiment':'e','arms':[{'name':'control','weight':3},{'name':'b','weight':1}],"
         "'sequential':{'method':'none'}}",
         SEQ_NONE},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        struct config c;
        struct err e;
        int rc = parse(cases[i].text, &c, &e);
        if (rc)
            fail_msg("%s: %s", cases[i].text, e.msg);
        assert_int_equal(c.seq.method, cases[i].method);
        assert_rel_close(c.arms[0].weight, 0.75, 4 * DBL_EPSILON);
        assert_rel_close(c.arms[1].weight, 0.25, 4 * DBL_EPSILON);
        assert_int_equal(c.control, 0); /* the arm named "control" */
        config_release(&c);
    }
}

/* Builds a config with k arms a0..a{k-1} (a0 is the control); caller frees. */
static char *config_with_arms(int k)
{
    size_t cap = 128 + (size_t)k * 40;
    char *b = malloc(cap);
    assert_non_null(b);
    int n = snprintf(b, cap, "{\"experiment\":\"many-arms\",\"control\":\"a0\",\"arms\":[");
    for (int i = 0; i < k; i++)
        n += snprintf(b + n, cap - (size_t)n, "%s{\"name\":\"a%d\",\"weight\":1}", i ? "," : "", i);
    snprintf(b + n, cap - (size_t)n, "]}");
    return b;
}

/* CONFIG_MAX_ARMS arms are fine; one more is an error that names the limit. */
static void test_config__arm_limit(void **state)
{
    (void)state;
    struct config c;
    struct err e;
    char *b = config_with_arms(CONFIG_MAX_ARMS);
    err_clear(&e);
    int rc = config_parse(b, strlen(b), "exp.json", &c, &e);
    free(b);
    if (rc)
        fail_msg("%d arms: %s", CONFIG_MAX_ARMS, e.msg);
    assert_int_equal(c.n_arms, CONFIG_MAX_ARMS);
    double sum = 0;
    for (int i = 0; i < c.n_arms; i++) {
        assert_rel_close(c.arms[i].weight, 1.0 / CONFIG_MAX_ARMS, 4 * DBL_EPSILON);
        sum += c.arms[i].weight;
    }
    assert_rel_close(sum, 1.0, 64 * DBL_EPSILON);
    config_release(&c);

    b = config_with_arms(CONFIG_MAX_ARMS + 1);
    err_clear(&e);
    rc = config_parse(b, strlen(b), "exp.json", &c, &e);
    free(b);
    config_release(&c);
    assert_int_equal(rc, AB_EINPUT);
    assert_int_equal(e.code, AB_EINPUT);
    if (!strstr(e.msg, "'arms'") || !strstr(e.msg, "64") || !strstr(e.msg, "exp.json"))
        fail_msg("65 arms: message does not name the key and the limit of 64: %s", e.msg);
}

static void test_config__arm_index(void **state)
{
    (void)state;
    struct config c;
    struct err e;
    assert_int_equal(parse("{'experiment':'e','arms':[{'name':'control'},{'name':'treatment'}]}", &c, &e), 0);
    assert_int_equal(config_arm_index(&c, "control", 7), 0);
    assert_int_equal(config_arm_index(&c, "treatment", 9), 1);
    assert_int_equal(config_arm_index(&c, "treatmentX", 9), 1); /* only n bytes count */
    assert_int_equal(config_arm_index(&c, "treat", 5), -1);
    assert_int_equal(config_arm_index(&c, "Control", 7), -1);
    assert_int_equal(config_arm_index(&c, "", 0), -1);
    config_release(&c);
}

/* -------------------------------------------------------------- errors */

struct bad_case {
    const char *name;
    const char *text; /* JSON with ' for " */
    const char *path; /* the key path the message must name */
    const char *what; /* another text the message must hold, or NULL */
};

#define BASE "'experiment':'e','arms':[{'name':'control','weight':1},{'name':'treatment','weight':1}]"

static const struct bad_case bad_cases[] = {
    /* unknown keys, named with their full path */
    {"unknown top-level key", "{" BASE ",'experimnt':'x'}", "'experimnt'", "unknown"},
    {"unknown nested metric key", "{" BASE ",'metrics':[{'name':'a','type':'mean'},{'name':'b','type':'mean','evnt':'b'}]}",
     "metrics[1].evnt", "unknown"},
    {"unknown arm key", "{'experiment':'e','arms':[{'name':'control','wieght':1},{'name':'t'}]}", "arms[0].wieght",
     "unknown"},
    {"unknown window key", "{" BASE ",'window':{'start':'2026-11-02T00:00:00Z','end':'2026-11-30T00:00:00Z','begin':1}}",
     "window.begin", "unknown"},
    {"unknown covariate key", "{" BASE ",'covariate':{'pre_days':7,'days':7}}", "covariate.days", "unknown"},
    {"unknown srm key", "{" BASE ",'srm':{'treshold':0.001}}", "srm.treshold", "unknown"},
    {"unknown sequential key", "{" BASE ",'sequential':{'method':'none','shap':'obf'}}", "sequential.shap", "unknown"},
    {"unknown integrity key", "{" BASE ",'integrity':{'pfail':0.01}}", "integrity.pfail", "unknown"},
    {"unknown hash key",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,5]},{'name':'t','buckets':[5,10]}],"
     "'hash':{'function':'md5','salt':'s','buckets':10,'salty':1}}",
     "hash.salty", "unknown"},
    /* experiment */
    {"missing experiment", "{'arms':[{'name':'control'},{'name':'t'}]}", "'experiment'", "required"},
    {"empty experiment", "{'experiment':'','arms':[{'name':'control'},{'name':'t'}]}", "'experiment'", NULL},
    {"experiment a number", "{'experiment':5,'arms':[{'name':'control'},{'name':'t'}]}", "'experiment'", NULL},
    /* arms */
    {"no arms", "{'experiment':'e'}", "'arms'", "required"},
    {"arms not a list", "{'experiment':'e','arms':{'name':'control'}}", "'arms'", NULL},
    {"one arm only", "{'experiment':'e','arms':[{'name':'control'}]}", "'arms'", "two"},
    {"no arm at all", "{'experiment':'e','arms':[]}", "'arms'", "two"},
    {"weight 0", "{'experiment':'e','arms':[{'name':'control','weight':1},{'name':'t','weight':0}]}", "arms[1].weight",
     NULL},
    {"negative weight", "{'experiment':'e','arms':[{'name':'control','weight':-0.5},{'name':'t','weight':1}]}",
     "arms[0].weight", NULL},
    {"weight a string", "{'experiment':'e','arms':[{'name':'control','weight':'half'},{'name':'t'}]}", "arms[0].weight",
     NULL},
    {"arm without a name", "{'experiment':'e','arms':[{'name':'control'},{'weight':1}]}", "arms[1].name", "required"},
    {"arm not an object", "{'experiment':'e','arms':[{'name':'control'},'t']}", "arms[1]", NULL},
    {"duplicate arm names", "{'experiment':'e','arms':[{'name':'control'},{'name':'t'},{'name':'t'}]}", "arms[2]", NULL},
    /* control */
    {"control naming no arm", "{" BASE ",'control':'contrl'}", "'control'", NULL},
    {"no control and no arm named control", "{'experiment':'e','arms':[{'name':'a'},{'name':'b'}]}", "'control'", NULL},
    /* window */
    {"window end before start", "{" BASE ",'window':{'start':'2026-11-30T00:00:00Z','end':'2026-11-02T00:00:00Z'}}",
     "window.end", NULL},
    {"window end equal to start", "{" BASE ",'window':{'start':'2026-11-02T00:00:00Z','end':'2026-11-02T00:00:00Z'}}",
     "window.end", NULL},
    {"window start November 31", "{" BASE ",'window':{'start':'2026-11-31T00:00:00Z','end':'2026-12-30T00:00:00Z'}}",
     "window.start", NULL},
    {"window end not a time", "{" BASE ",'window':{'start':'2026-11-02T00:00:00Z','end':'next tuesday'}}", "window.end",
     NULL},
    {"window start fractional ms", "{" BASE ",'window':{'start':1793577600000.5,'end':'2026-11-30T00:00:00Z'}}",
     "window.start", NULL},
    {"window without start", "{" BASE ",'window':{'end':'2026-11-30T00:00:00Z'}}", "window.start", "required"},
    {"window not an object", "{" BASE ",'window':'2026-11'}", "'window'", NULL},
    /* metrics */
    {"metrics not a list", "{" BASE ",'metrics':{'name':'a'}}", "'metrics'", NULL},
    {"metric not an object", "{" BASE ",'metrics':['revenue']}", "metrics[0]", NULL},
    {"bad metric type", "{" BASE ",'metrics':[{'name':'a','type':'average'}]}", "metrics[0].type", "average"},
    {"metric without type", "{" BASE ",'metrics':[{'name':'a','event':'a'}]}", "metrics[0].type", "required"},
    {"metric without name", "{" BASE ",'metrics':[{'type':'mean','event':'a'}]}", "metrics[0].name", "required"},
    {"duplicate metric names", "{" BASE ",'metrics':[{'name':'a','type':'mean'},{'name':'a','type':'binary'}]}",
     "metrics[1]", NULL},
    {"ratio without denominator", "{" BASE ",'metrics':[{'name':'r','type':'ratio','numerator':'spend'}]}",
     "metrics[0].denominator", "required"},
    {"ratio without numerator", "{" BASE ",'metrics':[{'name':'r','type':'ratio','denominator':'visit'}]}",
     "metrics[0].numerator", "required"},
    {"ratio with event",
     "{" BASE ",'metrics':[{'name':'r','type':'ratio','numerator':'s','denominator':'v','event':'s'}]}", "metrics[0]",
     "event"},
    {"mean with numerator", "{" BASE ",'metrics':[{'name':'m','type':'mean','numerator':'s'}]}", "metrics[0]",
     "numerator"},
    {"guardrail without better",
     "{" BASE ",'metrics':[{'name':'a','type':'mean'},{'name':'errs','type':'mean','role':'guardrail'}]}", "metrics[1]",
     "better"},
    {"better unknown", "{" BASE ",'metrics':[{'name':'a','type':'mean','better':'faster'}]}", "metrics[0].better",
     "faster"},
    {"role unknown", "{" BASE ",'metrics':[{'name':'a','type':'mean','role':'vanity'}]}", "metrics[0].role", "vanity"},
    {"attribution_hours 0", "{" BASE ",'metrics':[{'name':'a','type':'mean','attribution_hours':0}]}",
     "metrics[0].attribution_hours", NULL},
    {"attribution_hours negative", "{" BASE ",'metrics':[{'name':'a','type':'mean','attribution_hours':-24}]}",
     "metrics[0].attribution_hours", NULL},
    {"cap on a binary metric", "{" BASE ",'metrics':[{'name':'a','type':'binary','cap':3}]}", "metrics[0]", "cap"},
    {"cap a string", "{" BASE ",'metrics':[{'name':'a','type':'mean','cap':'3'}]}", "metrics[0].cap", NULL},
    /* covariate */
    {"pre_days 0", "{" BASE ",'covariate':{'pre_days':0}}", "covariate.pre_days", NULL},
    {"covariate without pre_days", "{" BASE ",'covariate':{}}", "covariate.pre_days", "required"},
    /* alpha and srm */
    {"alpha 0", "{" BASE ",'alpha':0}", "'alpha'", NULL},
    {"alpha negative", "{" BASE ",'alpha':-0.05}", "'alpha'", NULL},
    {"alpha 1.5", "{" BASE ",'alpha':1.5}", "'alpha'", NULL},
    {"alpha a string", "{" BASE ",'alpha':'0.05'}", "'alpha'", NULL},
    {"srm threshold 1", "{" BASE ",'srm':{'threshold':1}}", "srm.threshold", NULL},
    {"srm threshold 0", "{" BASE ",'srm':{'threshold':0}}", "srm.threshold", NULL},
    /* sequential */
    {"sequential.method unknown", "{" BASE ",'sequential':{'method':'bayesian'}}", "sequential.method", "bayesian"},
    {"sequential without method", "{" BASE ",'sequential':{'shape':'obf'}}", "sequential.method", "required"},
    {"sequential.shape unknown", "{" BASE ",'sequential':{'method':'spending','shape':'flat','planned_units':1000}}",
     "sequential.shape", "flat"},
    {"spending without planned_units", "{" BASE ",'sequential':{'method':'spending','shape':'obf'}}",
     "sequential.planned_units", "required"},
    {"planned_units 0", "{" BASE ",'sequential':{'method':'spending','planned_units':0}}", "sequential.planned_units",
     NULL},
    {"gamma without hsd", "{" BASE ",'sequential':{'method':'spending','shape':'obf','gamma':-4,'planned_units':1000}}",
     "sequential.gamma", NULL},
    {"sides 3", "{" BASE ",'sequential':{'method':'none','sides':3}}", "sequential.sides", NULL},
    {"sides 1.5", "{" BASE ",'sequential':{'method':'none','sides':1.5}}", "sequential.sides", NULL},
    {"look_every not a duration", "{" BASE ",'sequential':{'method':'spending','planned_units':1000,'look_every':'soon'}}",
     "sequential.look_every", NULL},
    {"look_every negative", "{" BASE ",'sequential':{'method':'spending','planned_units':1000,'look_every':-6}}",
     "sequential.look_every", NULL},
    {"futility is not a key", "{" BASE ",'sequential':{'method':'spending','planned_units':1000,'futility':true}}",
     "sequential.futility", NULL},
    {"mixture without tau or planned_units", "{" BASE ",'sequential':{'method':'mixture'}}", "sequential.planned_units",
     NULL},
    {"sequence without rho or planned_units", "{" BASE ",'sequential':{'method':'sequence'}}", "sequential.planned_units",
     NULL},
    {"sequential not an object", "{" BASE ",'sequential':'spending'}", "'sequential'", NULL},
    /* integrity */
    {"integrity p_fail negative", "{" BASE ",'integrity':{'p_fail':-0.01}}", "integrity.p_fail", NULL},
    /* hash and buckets */
    {"hash without buckets on arms",
     "{'experiment':'e','arms':[{'name':'control'},{'name':'t'}],'hash':{'function':'sha256','salt':'s','buckets':100}}",
     "arms[0].buckets", NULL},
    {"hash with buckets on one arm only",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,50]},{'name':'t'}],"
     "'hash':{'function':'sha256','salt':'s','buckets':100}}",
     "arms[1].buckets", NULL},
    {"overlapping bucket ranges",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,50]},{'name':'t','buckets':[49,100]}],"
     "'hash':{'function':'sha256','salt':'s','buckets':100}}",
     "arms[1].buckets", "overlap"},
    {"a range inside an earlier one",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,100]},{'name':'a','buckets':[100,200]},"
     "{'name':'b','buckets':[10,20]}],'hash':{'function':'sha256','salt':'s','buckets':200}}",
     "arms[2].buckets", "overlap"},
    {"bucket range past hash.buckets",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,50]},{'name':'t','buckets':[50,101]}],"
     "'hash':{'function':'sha256','salt':'s','buckets':100}}",
     "arms[1].buckets", NULL},
    {"empty bucket range",
     "{'experiment':'e','arms':[{'name':'control','buckets':[5,5]},{'name':'t','buckets':[5,10]}],"
     "'hash':{'function':'sha256','salt':'s','buckets':10}}",
     "arms[0].buckets", NULL},
    {"bucket range of one number",
     "{'experiment':'e','arms':[{'name':'control','buckets':[5]},{'name':'t','buckets':[5,10]}],"
     "'hash':{'function':'sha256','salt':'s','buckets':10}}",
     "arms[0].buckets", NULL},
    {"buckets on an arm without hash", "{'experiment':'e','arms':[{'name':'control'},{'name':'t','buckets':[5,10]}]}",
     "arms[1].buckets", "hash"},
    {"hash.function unknown",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,5]},{'name':'t','buckets':[5,10]}],"
     "'hash':{'function':'crc','salt':'s','buckets':10}}",
     "hash.function", "crc"},
    {"hash without salt",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,5]},{'name':'t','buckets':[5,10]}],"
     "'hash':{'function':'md5','buckets':10}}",
     "hash.salt", "required"},
    {"hash.buckets fractional",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,5]},{'name':'t','buckets':[5,10]}],"
     "'hash':{'function':'md5','salt':'s','buckets':10.5}}",
     "hash.buckets", NULL},
    {"hash.format without {unit}",
     "{'experiment':'e','arms':[{'name':'control','buckets':[0,5]},{'name':'t','buckets':[5,10]}],"
     "'hash':{'function':'md5','salt':'s','buckets':10,'format':'{salt}'}}",
     "hash.format", NULL},
};

static void test_config__errors_name_the_key(void **state)
{
    (void)state;
    int failures = 0;
    size_t n = sizeof bad_cases / sizeof bad_cases[0];
    for (size_t i = 0; i < n; i++) {
        const struct bad_case *b = &bad_cases[i];
        struct config c;
        struct err e;
        int rc = parse(b->text, &c, &e);
        config_release(&c);
        const char *why = NULL;
        if (getenv("ABTALLY_TEST_VERBOSE"))
            print_message("%-40s %s\n", b->name, e.msg);
        if (rc != AB_EINPUT || e.code != AB_EINPUT)
            why = "did not fail with AB_EINPUT";
        else if (!strstr(e.msg, b->path))
            why = "the message does not name the key path";
        else if (b->what && !strstr(e.msg, b->what))
            why = "the message does not say what is wrong";
        else if (!strstr(e.msg, "exp.json"))
            why = "the message does not name the config";
        if (why) {
            print_error("case '%s': %s (rc %d, want path %s%s%s)\n    message: %s\n", b->name, why, rc, b->path,
                        b->what ? ", text " : "", b->what ? b->what : "", e.msg);
            failures++;
        }
    }
    if (failures)
        fail_msg("%d of %zu error cases failed", failures, n);
}

/* Not JSON, not an object, a duplicate key: errors that name the config. */
static void test_config__not_a_config(void **state)
{
    (void)state;
    static const struct {
        const char *text;
        const char *what;
    } cases[] = {
        {"{'experiment':'e',", "exp.json"},
        {"[1,2]", "object"},
        {"{" BASE ",'alpha':0.1,'alpha':0.2}", "alpha"},
        {"", "exp.json"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        struct config c;
        struct err e;
        int rc = parse(cases[i].text, &c, &e);
        config_release(&c);
        assert_int_equal(rc, AB_EINPUT);
        assert_int_equal(e.code, AB_EINPUT);
        if (!strstr(e.msg, "exp.json") || !strstr(e.msg, cases[i].what))
            fail_msg("%s: message lacks '%s': %s", cases[i].text, cases[i].what, e.msg);
    }
}

static void test_config__load_errors(void **state)
{
    (void)state;
    struct config c;
    struct err e;
    /* a missing file */
    err_clear(&e);
    assert_int_equal(config_load("fixtures/config/no-such-config.json", &c, &e), AB_EINPUT);
    config_release(&c);
    assert_non_null(strstr(e.msg, "fixtures/config/no-such-config.json"));

    /* a file over CONFIG_MAX_BYTES */
    const char *t = getenv("TMPDIR");
    char path[256];
    snprintf(path, sizeof path, "%s/abtally-test-config-XXXXXX", t && *t ? t : "/tmp");
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *fp = fdopen(fd, "wb");
    assert_non_null(fp);
    char chunk[4096];
    memset(chunk, ' ', sizeof chunk);
    fputc('{', fp);
    for (size_t n = 0; n < CONFIG_MAX_BYTES; n += sizeof chunk)
        assert_int_equal(fwrite(chunk, 1, sizeof chunk, fp), sizeof chunk);
    fputc('}', fp);
    assert_int_equal(fclose(fp), 0);
    err_clear(&e);
    assert_int_equal(config_load(path, &c, &e), AB_EINPUT);
    config_release(&c);
    unlink(path);
    assert_non_null(strstr(e.msg, path));
    char limit[32];
    snprintf(limit, sizeof limit, "%d", CONFIG_MAX_BYTES);
    if (!strstr(e.msg, limit))
        fail_msg("the message does not give the size limit %s: %s", limit, e.msg);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_config__full_fixture),
        cmocka_unit_test(test_config__design_example),
        cmocka_unit_test(test_config__other_methods),
        cmocka_unit_test(test_config__arm_limit),
        cmocka_unit_test(test_config__arm_index),
        cmocka_unit_test(test_config__errors_name_the_key),
        cmocka_unit_test(test_config__not_a_config),
        cmocka_unit_test(test_config__load_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
