/*
 * test_render.c — the HTML readout (render_html in render.h).
 *
 * Renders hand-built records into memory and checks the page: well-formed
 * (a small checker below: every opened tag closed in order, attribute
 * quotes balanced, every '&' an entity, no raw '<' in text), one effect
 * chart per metric and arm, the daily units chart, the plain sentences, the
 * escaping of hostile names, no script and no network address; and that
 * missing values (no units, null estimates, an empty or absent series, no
 * final record) still give a whole page.
 */
#include <ctype.h>
#include <stdlib.h>
#include <string.h>

#include "helpers.h"
#include "render.h"

/* ---- a tiny well-formedness checker -------------------------------- */

static const char *const void_tags[] = {"meta", "br", "input", "hr", "img", "link", "col", "wbr", NULL};

static int is_void(const char *name)
{
    for (int i = 0; void_tags[i]; i++)
        if (!strcmp(name, void_tags[i]))
            return 1;
    return 0;
}

/* Returns NULL when well-formed, else a static message naming the place. */
static const char *check_html(const char *s)
{
    static char msg[200];
    char stack[256][24];
    int depth = 0;
    const char *p = s;
    while (*p) {
        if (*p == '&') {
            const char *e = strchr(p, ';');
            if (!e || e - p > 10 || !(p[1] == '#' || isalpha((unsigned char)p[1]))) {
                snprintf(msg, sizeof msg, "bare '&' at %ld: %.30s", (long)(p - s), p);
                return msg;
            }
            p = e + 1;
            continue;
        }
        if (*p == '>') {
            snprintf(msg, sizeof msg, "raw '>' in text at %ld: %.30s", (long)(p - s), p > s + 20 ? p - 20 : s);
            return msg;
        }
        if (*p != '<') {
            p++;
            continue;
        }
        if (!strncmp(p, "<!DOCTYPE", 9) || !strncmp(p, "<!doctype", 9)) {
            p = strchr(p, '>');
            if (!p)
                return "unterminated doctype";
            p++;
            continue;
        }
        if (!strncmp(p, "<!--", 4)) {
            p = strstr(p, "-->");
            if (!p)
                return "unterminated comment";
            p += 3;
            continue;
        }
        int closing = p[1] == '/';
        const char *n = p + 1 + closing;
        char name[24];
        size_t k = 0;
        while (isalnum((unsigned char)*n) && k < sizeof name - 1)
            name[k++] = (char)tolower((unsigned char)*n++);
        name[k] = '\0';
        if (!k) {
            snprintf(msg, sizeof msg, "raw '<' in text at %ld: %.30s", (long)(p - s), p);
            return msg;
        }
        /* attributes: quotes must balance; no '<' inside the tag */
        const char *q = n;
        int self_closing = 0;
        while (*q && *q != '>') {
            if (*q == '"' || *q == '\'') {
                char quote = *q++;
                while (*q && *q != quote) {
                    if (*q == '<') {
                        snprintf(msg, sizeof msg, "'<' in an attribute of <%s>", name);
                        return msg;
                    }
                    q++;
                }
                if (!*q) {
                    snprintf(msg, sizeof msg, "unbalanced quote in <%s>", name);
                    return msg;
                }
            } else if (*q == '<') {
                snprintf(msg, sizeof msg, "'<' inside the tag <%s>", name);
                return msg;
            } else if (*q == '/' && q[1] == '>')
                self_closing = 1;
            q++;
        }
        if (!*q) {
            snprintf(msg, sizeof msg, "unterminated tag <%s>", name);
            return msg;
        }
        p = q + 1;
        if (closing) {
            if (!depth || strcmp(stack[depth - 1], name)) {
                snprintf(msg, sizeof msg, "</%s> closes <%s> at %ld", name, depth ? stack[depth - 1] : "(nothing)",
                         (long)(p - s));
                return msg;
            }
            depth--;
        } else if (!self_closing && !is_void(name)) {
            if (depth == 256)
                return "too deep";
            snprintf(stack[depth++], sizeof stack[0], "%s", name);
            if (!strcmp(name, "style")) {
                const char *e = strstr(p, "</style>");
                if (!e)
                    return "unterminated style";
                if (memchr(p, '<', (size_t)(e - p)))
                    return "'<' inside style";
                p = e;
            }
        }
    }
    if (depth) {
        snprintf(msg, sizeof msg, "<%s> never closed (%d open)", stack[depth - 1], depth);
        return msg;
    }
    return NULL;
}

static size_t count(const char *s, const char *needle)
{
    size_t n = 0;
    for (const char *p = s; (p = strstr(p, needle)); p += strlen(needle))
        n++;
    return n;
}

static int contains_ci(const char *s, const char *needle)
{
    size_t n = strlen(needle);
    for (; *s; s++)
        if (!strncasecmp(s, needle, n))
            return 1;
    return 0;
}

/* Renders and returns the page (caller frees); fails the test on error. */
static char *render(const json_t *series, const json_t *final_rec)
{
    char *buf = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&buf, &len);
    assert_non_null(f);
    assert_int_equal(render_html(f, series, final_rec), 0);
    assert_int_equal(fclose(f), 0);
    assert_non_null(buf);
    return buf;
}

static json_t *load(const char *text)
{
    json_error_t je;
    json_t *j = json_loads(text, 0, &je);
    if (!j)
        fail_msg("test JSON: %s (line %d)", je.text, je.line);
    return j;
}

static void assert_page_ok(const char *html)
{
    const char *why = check_html(html);
    if (why)
        fail_msg("not well-formed: %s", why);
    assert_false(contains_ci(html, "<script"));
    assert_null(strstr(html, "http:"));
    assert_null(strstr(html, "https:"));
    assert_null(strstr(html, "//www."));
    assert_non_null(strstr(html, "<!DOCTYPE html>"));
    assert_non_null(strstr(html, "</html>"));
}

/* ---- records ---------------------------------------------------------- */

/* A metric row: diff 0.5 with a 95% interval [0.2, 0.8] (z = 3.2667). */
#define ROW_A(diff, lo, hi, z, verdict, info)                                                                    \
    "{\"metric\":\"order_value\",\"arm\":\"treatment\",\"type\":\"mean\",\"role\":\"primary\",\"n\":5000,"        \
    "\"mean\":16.6,\"control_n\":5010,\"control_mean\":16.1,\"diff\":" diff ",\"ci\":[" lo "," hi "],"            \
    "\"p\":0.0011,\"p_adjusted\":0.0022,\"test\":\"z\",\"df\":null,\"lift\":0.031,\"lift_ci\":[0.012,0.05],"     \
    "\"cuped_diff\":0.48,\"cuped_ci\":[0.21,0.75],\"var_reduction\":0.1,\"info\":" info ",\"z\":" z ","           \
    "\"bound\":2.96,\"verdict\":\"" verdict "\"}"

#define ROW_HOSTILE                                                                                               \
    "{\"metric\":\"<script>&\\\"'\",\"arm\":\"treatment\",\"type\":\"binary\",\"role\":\"primary\",\"n\":5000,"   \
    "\"mean\":0.15,\"control_n\":5010,\"control_mean\":0.152,\"diff\":-0.002,\"ci\":[-0.016,0.012],"             \
    "\"p\":0.78,\"p_adjusted\":0.78,\"test\":\"z\",\"df\":null,\"lift\":-0.013,\"lift_ci\":[-0.1,0.08],"          \
    "\"cuped_diff\":null,\"cuped_ci\":[null,null],\"var_reduction\":null,\"info\":0.5,\"z\":-0.28,"               \
    "\"bound\":2.96,\"verdict\":\"running\"}"

#define ROW_GUARD                                                                                                 \
    "{\"metric\":\"page_errors\",\"arm\":\"treatment\",\"type\":\"mean\",\"role\":\"guardrail\",\"n\":5000,"     \
    "\"mean\":0.14,\"control_n\":5010,\"control_mean\":0.12,\"diff\":0.02,\"ci\":[0.008,0.032],"                  \
    "\"p\":0.001,\"p_adjusted\":0.0005,\"test\":\"z\",\"lift\":0.167,\"lift_ci\":[0.06,0.27],"                    \
    "\"better\":\"lower\",\"p_harm\":0.0005,\"harm\":true,\"info\":0.5,\"z\":3.27,\"bound\":2.96,"                \
    "\"verdict\":\"crossed-upper\"}"

static const char final_text[] =
    "{\"exp\":\"tea <shop> & 'co'\",\"time\":\"2026-11-05T00:00:00Z\",\"final\":true,"
    "\"units\":{\"control\":5010,\"treatment\":5000},"
    "\"srm\":{\"chi2\":0.01,\"df\":1,\"p\":0.92,\"test\":\"chi2\",\"p_seq\":1,\"alarm\":false,"
    "\"by_day\":[{\"day\":\"2026-11-02\",\"units\":3000,\"p\":0.5,\"p_adjusted\":1},"
    "{\"day\":\"2026-11-03\",\"units\":3500,\"p\":0.0001,\"p_adjusted\":0.0003},"
    "{\"day\":\"2026-11-04\",\"units\":3510,\"p\":0.7,\"p_adjusted\":1}],"
    "\"by_segment\":[{\"segment\":\"platform=<img src=x>\",\"units\":10010,\"p\":0.9,\"p_adjusted\":0.9}]},"
    "\"metrics\":[" ROW_HOSTILE "," ROW_GUARD "," ROW_A("0.5", "0.2", "0.8", "3.2667", "crossed-upper", "0.5") "],"
    "\"looks\":[{\"time\":\"2026-11-05T00:00:00Z\",\"fraction\":0.5,\"z\":2.96,\"alpha_cumulative\":0.003}],"
    "\"integrity\":{\"verdict\":\"failed\",\"reasons\":["
    "{\"check\":\"srm_day\",\"severity\":\"warn\",\"detail\":\"units first exposed on 2026-11-03 do not match "
    "the weights (Holm-adjusted p = 0.0003)\"},"
    "{\"check\":\"hash\",\"severity\":\"fail\",\"detail\":\"3 of 10 assignments <b>differ</b>\"}],"
    "\"multi_arm_units\":0,\"orphan_outcomes\":12,\"duplicates\":0,\"outside_window\":0,"
    "\"late_assignments\":0,\"other_experiment\":0,\"ignored_outcomes\":0,\"hash_checked\":10,"
    "\"hash_mismatch\":3,\"lines_read\":90000,\"accepted\":89990,"
    "\"rejected\":{\"not_json\":10,\"bad_time\":0},"
    "\"multi_arm_by_arm\":{\"control\":0,\"treatment\":0},\"duplicates_by_arm\":{\"control\":0,\"treatment\":0}}}";

/* Earlier records: per-arm units that grow by day, so the daily bars can
 * be drawn per arm. */
static const char series_text[] =
    "[{\"exp\":\"tea <shop> & 'co'\",\"time\":\"2026-11-03T00:00:00Z\",\"final\":false,"
    "\"units\":{\"control\":1500,\"treatment\":1500},\"srm\":{\"by_day\":[{\"day\":\"2026-11-02\",\"units\":3000}]},"
    "\"metrics\":[" ROW_A("0.9", "-0.1", "1.9", "1.76", "burn-in", "0.15") "],\"integrity\":{\"verdict\":\"sound\"}},"
    "{\"exp\":\"tea <shop> & 'co'\",\"time\":\"2026-11-04T00:00:00Z\",\"final\":false,"
    "\"units\":{\"control\":3300,\"treatment\":3200},"
    "\"metrics\":[" ROW_A("null", "null", "null", "null", "running", "0.33") "],\"integrity\":{\"verdict\":\"sound\"}}]";

/* ---- tests -------------------------------------------------------------- */

static void test_render__page_holds_charts_sentences_and_escapes(void **state)
{
    (void)state;
    json_t *rec = load(final_text), *series = load(series_text);
    char *html = render(series, rec);
    assert_page_ok(html);

    /* the verdict first, failures before warnings */
    const char *v = strstr(html, "id=\"verdict\"");
    assert_non_null(v);
    assert_true(v < strstr(html, "id=\"summary\""));
    assert_non_null(strstr(html, "class=\"vword\">failed<"));
    const char *fail = strstr(v, "3 of 10 assignments &lt;b&gt;differ&lt;/b&gt;");
    const char *warn = strstr(v, "units first exposed on 2026-11-03");
    assert_non_null(fail);
    assert_non_null(warn);
    assert_true(fail < warn);

    /* one effect chart per metric and arm, primaries first; the daily chart */
    assert_int_equal(count(html, "<svg class=\"chart effect\""), 3);
    assert_int_equal(count(html, "<svg class=\"chart days\""), 1);
    const char *first = strstr(html, "<figure class=\"effect\"");
    assert_non_null(first);
    assert_true(strstr(html, "data-metric=\"page_errors\"") > strstr(html, "data-metric=\"order_value\""));
    /* every chart has a title, a description and its numbers */
    assert_int_equal(count(html, "role=\"img\" aria-labelledby="), 4);
    assert_true(count(html, "<title id=\"t") == 4 && count(html, "<desc id=\"d") == 4);
    assert_true(count(html, "<table>") >= 4);
    /* the band, the bound and the zero line; the path has three points */
    assert_non_null(strstr(html, "class=\"band\""));
    assert_non_null(strstr(html, "class=\"bound\""));
    assert_non_null(strstr(html, "class=\"zero\""));
    /* units per arm per day (derived from the readouts), the flagged day */
    assert_non_null(strstr(html, "class=\"bar a0\""));
    assert_non_null(strstr(html, "class=\"bar a1\""));
    assert_non_null(strstr(html, "class=\"strip flag"));
    assert_non_null(strstr(html, "class=\"flagmark\""));

    /* sentences, with the level read back from the record (95%) */
    assert_non_null(strstr(html, "treatment is 3.1% higher than control"));
    assert_non_null(strstr(html, "95% interval +1.2% to +5.0%"));
    assert_non_null(strstr(html, "The sequential test has crossed its upper bound"));
    assert_non_null(strstr(html, "tends to overstate the true effect"));
    assert_non_null(strstr(html, "this guardrail has moved in the harmful direction"));
    assert_non_null(strstr(html, "the integrity checks failed, so this estimate cannot be trusted"));
    assert_non_null(strstr(html, "The sequential test has not crossed its bound"));

    /* the checklist: a failed hash, passed checks, the counters */
    assert_non_null(strstr(html, "\xe2\x9c\x95 fail</span></td><td><strong>Assignments agree with the assignment hash"));
    assert_non_null(strstr(html, "pass</span></td><td><strong>Every unit is in one arm only"));
    assert_non_null(strstr(html, "<dt>orphan outcomes</dt><dd>12</dd>"));

    /* hostile names are escaped everywhere */
    assert_non_null(strstr(html, "&lt;script&gt;&amp;&quot;&#39;"));
    assert_non_null(strstr(html, "tea &lt;shop&gt; &amp; &#39;co&#39;"));
    assert_non_null(strstr(html, "platform=&lt;img src=x&gt;"));
    assert_null(strstr(html, "<img"));
    assert_null(strstr(html, "<shop"));
    free(html);
    json_decref(rec);
    json_decref(series);
}

static void test_render__missing_values_give_a_whole_page(void **state)
{
    (void)state;
    json_t *rec = load("{\"exp\":\"bare\",\"time\":\"2026-11-03T00:00:00Z\",\"final\":true,\"units\":{},"
                       "\"srm\":{\"chi2\":null,\"p\":null,\"p_seq\":null,\"by_day\":[],\"by_segment\":[]},"
                       "\"metrics\":[{\"metric\":\"m\",\"arm\":\"b\",\"role\":\"primary\",\"n\":0,\"mean\":null,"
                       "\"control_mean\":null,\"diff\":null,\"ci\":[null,null],\"lift\":null,\"lift_ci\":[null,null],"
                       "\"p\":null,\"p_adjusted\":null}],"
                       "\"integrity\":{}}");
    /* an empty series, a NULL series */
    json_t *empty = json_array();
    char *html = render(empty, rec);
    assert_page_ok(html);
    assert_int_equal(count(html, "<svg class=\"chart effect\""), 1);
    assert_non_null(strstr(html, "No estimate yet"));
    assert_non_null(strstr(html, "no estimate for b against control yet"));
    assert_non_null(strstr(html, "class=\"vword\">sound<"));
    /* no alpha to read back: the interval has no percentage */
    assert_null(strstr(html, "% interval"));
    free(html);
    html = render(NULL, rec);
    assert_page_ok(html);
    free(html);

    /* a record with nothing at all, and no record */
    json_t *nothing = json_object();
    html = render(NULL, nothing);
    assert_page_ok(html);
    assert_non_null(strstr(html, "The record has no estimates yet"));
    free(html);
    html = render(NULL, NULL);
    assert_page_ok(html);
    assert_non_null(strstr(html, "No record to show"));
    free(html);
    json_decref(nothing);
    json_decref(empty);
    json_decref(rec);
}

static void test_render__single_record_and_final_from_series(void **state)
{
    (void)state;
    json_t *rec = load(final_text);
    /* a series holding the final record itself (same time): one point */
    json_t *series = json_array();
    json_array_append(series, rec);
    char *html = render(series, rec);
    assert_page_ok(html);
    assert_non_null(strstr(html, "1 readout in the path"));
    assert_int_equal(count(html, "<svg class=\"chart effect\""), 3);
    /* a single point is drawn as a bar for its interval */
    assert_non_null(strstr(html, "<rect class=\"band\""));
    free(html);
    /* no final record: the last of the series is read out */
    html = render(series, NULL);
    assert_page_ok(html);
    assert_non_null(strstr(html, "class=\"vword\">failed<"));
    free(html);
    json_decref(series);
    json_decref(rec);
}

static void test_render__always_valid_band(void **state)
{
    (void)state;
    json_t *rec = load("{\"exp\":\"mix\",\"time\":\"2026-11-04T12:00:00Z\",\"final\":true,"
                       "\"units\":{\"ctl\":900,\"new\":910},"
                       "\"srm\":{\"p\":0.8,\"p_seq\":1,\"alarm\":false,\"by_day\":[{\"day\":\"2026-11-04\","
                       "\"units\":1810,\"p\":0.8,\"p_adjusted\":0.8,\"by_arm\":{\"ctl\":900,\"new\":910}}]},"
                       "\"metrics\":[{\"metric\":\"m\",\"arm\":\"new\",\"type\":\"mean\",\"role\":\"primary\","
                       "\"n\":910,\"mean\":1.2,\"control_n\":900,\"control_mean\":1.0,\"diff\":0.2,"
                       "\"ci\":[0.1,0.3],\"p\":0.0001,\"test\":\"z\",\"lift\":0.2,\"lift_ci\":[0.1,0.3],"
                       "\"info\":400,\"p_always\":0.02,\"ci_always\":[0.01,0.39],\"verdict\":\"crossed-upper\"}],"
                       "\"integrity\":{\"verdict\":\"sound\",\"reasons\":[]}}");
    json_t *series = load("[{\"time\":\"2026-11-04T00:00:00Z\",\"units\":{\"ctl\":500,\"new\":505},"
                          "\"metrics\":[{\"metric\":\"m\",\"arm\":\"new\",\"diff\":0.1,\"ci\":[-0.1,0.3],"
                          "\"p_always\":1,\"ci_always\":[null,null],\"verdict\":\"burn-in\"}]}]");
    char *html = render(series, rec);
    assert_page_ok(html);
    assert_non_null(strstr(html, "class=\"av\""));
    assert_non_null(strstr(html, "always-valid interval"));
    assert_non_null(strstr(html, "The always-valid interval lies entirely above zero"));
    assert_null(strstr(html, "class=\"bound\""));
    /* the per-arm split of the day comes from the record itself */
    assert_non_null(strstr(html, "class=\"bar a1\""));
    assert_non_null(strstr(html, "ctl</strong> 900 units"));
    free(html);
    json_decref(series);
    json_decref(rec);
}

static void test_render__checker_rejects_broken_html(void **state)
{
    (void)state;
    assert_null(check_html("<!DOCTYPE html><p>a &amp; b<br /></p><meta charset=\"x\">"));
    assert_non_null(check_html("<p><b>x</p></b>"));
    assert_non_null(check_html("<p>a & b</p>"));
    assert_non_null(check_html("<p title=\"x>y</p>"));
    assert_non_null(check_html("<div><p>x</p>"));
    assert_non_null(check_html("<p>1 < 2</p>"));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_render__page_holds_charts_sentences_and_escapes),
        cmocka_unit_test(test_render__missing_values_give_a_whole_page),
        cmocka_unit_test(test_render__single_record_and_final_from_series),
        cmocka_unit_test(test_render__always_valid_band),
        cmocka_unit_test(test_render__checker_rejects_broken_html),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
