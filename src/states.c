/*
 * states.c — loading a set of snapshots (see states.h).
 */
#include "states.h"

#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "state.h"

static int add_one(struct state_set *s, const struct layout *lay, const char *path, struct err *e)
{
    struct state_meta meta;
    struct ledger *l;
    int rc = state_load(path, lay, &meta, &l, e);
    if (rc)
        return rc;
    struct ledger **nl = realloc(s->ledgers, (size_t)(s->n + 1) * sizeof *nl);
    if (!nl) {
        ledger_free(l);
        return err_set(e, AB_EINPUT, "out of memory");
    }
    s->ledgers = nl;
    s->ledgers[s->n++] = l;
    return AB_OK;
}

int state_set_load(struct state_set *s, const struct layout *lay, char *const *args, int n_args,
                   struct err *e)
{
    memset(s, 0, sizeof *s);
    for (int i = 0; i < n_args; i++) {
        struct stat st;
        if (stat(args[i], &st) != 0)
            return err_set(e, AB_EINPUT, "state '%s': no such file or directory", args[i]);
        if (S_ISDIR(st.st_mode)) {
            char **paths;
            size_t n;
            int rc = state_list(args[i], &paths, &n, e);
            for (size_t k = 0; !rc && k < n; k++)
                rc = add_one(s, lay, paths[k], e);
            state_list_free(paths, n);
            if (rc)
                return rc;
            if (!n)
                return err_set(e, AB_EINPUT, "state '%s': holds no *.abstate snapshot", args[i]);
        } else {
            int rc = add_one(s, lay, args[i], e);
            if (rc)
                return rc;
        }
    }
    if (!s->n)
        return err_set(e, AB_EINPUT, "no state given");
    return AB_OK;
}

void state_set_release(struct state_set *s)
{
    for (int i = 0; i < s->n; i++)
        ledger_free(s->ledgers[i]);
    free(s->ledgers);
    memset(s, 0, sizeof *s);
}
