/* Host program: prints the asset table that ladderpack generated. */
#include <stdio.h>

#include "assets.h"

int main(void) {
    unsigned i;
    printf("%-12s %-6s %14s %5s %8s %8s %8s\n", "asset", "kind", "rate_hz", "bits", "samples",
           "words", "bytes");
    for (i = 0; i < LADDERPACK_ASSET_COUNT; ++i) {
        const ladderpack_asset_t *a = &ladderpack_assets[i];
        printf("%-12s %-6s %14.6f %5u %8lu %8lu %8lu\n", a->name, a->kind, a->rate_hz, a->bits,
               a->samples, a->words, a->bytes);
    }
    return 0;
}
