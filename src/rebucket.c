/*
 * rebucket.c — the assignment re-check (see rebucket.h).
 */
#include "rebucket.h"

#include <openssl/evp.h>
#include <string.h>

void *rebucket_ctx_new(void)
{
    return EVP_MD_CTX_new();
}

void rebucket_ctx_free(void *ctx)
{
    EVP_MD_CTX_free(ctx);
}

uint64_t rebucket_bucket(const struct config *cfg, void *reuse, const char *unit, size_t n)
{
    const struct hash_cfg *h = &cfg->hash;
    const EVP_MD *md = h->function == 1 ? EVP_md5() : EVP_sha256();
    EVP_MD_CTX *ctx = reuse ? reuse : EVP_MD_CTX_new();
    if (!ctx)
        return UINT64_MAX;
    int ok = EVP_DigestInit_ex(ctx, md, NULL);
    for (const char *p = h->format; ok && *p;) {
        if (!strncmp(p, "{salt}", 6)) {
            ok = EVP_DigestUpdate(ctx, h->salt, strlen(h->salt));
            p += 6;
        } else if (!strncmp(p, "{unit}", 6)) {
            ok = EVP_DigestUpdate(ctx, unit, n);
            p += 6;
        } else {
            ok = EVP_DigestUpdate(ctx, p, 1);
            p++;
        }
    }
    unsigned char d[EVP_MAX_MD_SIZE];
    unsigned int dl = 0;
    ok = ok && EVP_DigestFinal_ex(ctx, d, &dl) && dl >= 8;
    if (!reuse)
        EVP_MD_CTX_free(ctx);
    if (!ok)
        return UINT64_MAX;
    uint64_t v = 0;
    for (int i = 0; i < 8; i++)
        v = (v << 8) | d[i];
    return v % h->buckets;
}

int rebucket_arm(const struct config *cfg, void *ctx, const char *unit, size_t n)
{
    uint64_t b = rebucket_bucket(cfg, ctx, unit, n);
    if (b == UINT64_MAX)
        return -1;
    for (int a = 0; a < cfg->n_arms; a++)
        if (b >= cfg->hash.lo[a] && b < cfg->hash.hi[a])
            return a;
    return -1;
}
