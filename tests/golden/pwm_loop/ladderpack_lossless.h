/* ladderpack 0.1.0: the lossless code-stream decoder (see ladderpack.compress).
 *
 * A stream is blocks of codes, each starting on a 32-bit word and decoded on its own:
 * a 2-bit predictor order (0, 1 or 2), a 4-bit Rice parameter k, the first `order` codes
 * of each channel verbatim, then per code the zigzag residual u: q = u >> k one bits, a
 * zero, the k low bits of u; or, from q = 16 on, 16 one bits and u in N + 3 bits. With
 * two channels the codes alternate (left, right, ...) and each is predicted from its own
 * channel's. Bits run MSB first through each word. Plain C99 for a Cortex-M0+ (no
 * division, no 64-bit arithmetic).
 *
 * Usage:
 *     lp_lossless_t d;
 *     lp_lossless_start(&d, &stream, 0);         // from block 0 (any block will do)
 *     n = lp_lossless_decode(&d, codes, 256);    // up to 256 codes; 0 at the end
 */
#ifndef LADDERPACK_LOSSLESS_H
#define LADDERPACK_LOSSLESS_H

#include <stdbool.h>
#include <stdint.h>

/* A compressed stream as the generated source describes it. */
typedef struct lp_lossless_stream {
    const uint32_t *words;       /* the bit stream */
    const uint32_t *block_words; /* the word where each block starts */
    uint32_t block_count;
    uint32_t block_samples; /* codes in every block but the last */
    uint32_t samples;       /* codes in all */
    uint8_t bits;           /* code width N, 1..16 */
    uint8_t channels;       /* 1, or 2 interleaved (left, right, ...) */
} lp_lossless_stream_t;

/* A decoder's place in a stream. */
typedef struct lp_lossless {
    const lp_lossless_stream_t *s;
    const uint32_t *next; /* the word after `cur` */
    uint32_t cur;         /* the word being read, its used bits shifted out (MSB first) */
    uint32_t left;        /* bits of `cur` not yet read */
    uint32_t block;       /* the block being decoded */
    uint32_t in_block;    /* codes of this block still to come */
    uint32_t done;        /* codes of this block already given */
    uint32_t order, k;
    int32_t h1[2], h2[2]; /* the last two codes of each channel */
} lp_lossless_t;

static inline uint32_t lp_lossless_bits(lp_lossless_t *d, uint32_t n) {
    /* n = 0..19 bits, MSB first */
    uint32_t v;
    if (n == 0u) {
        return 0u;
    }
    if (n <= d->left) {
        v = d->cur >> (32u - n);
        d->cur = n < 32u ? d->cur << n : 0u;
        d->left -= n;
        return v;
    }
    /* the rest of this word, then the head of the next */
    v = d->left ? d->cur >> (32u - d->left) : 0u;
    n -= d->left;
    d->cur = *d->next++;
    v = (v << n) | (d->cur >> (32u - n));
    d->cur <<= n;
    d->left = 32u - n;
    return v;
}

static inline void lp_lossless_block(lp_lossless_t *d, uint32_t block) {
    const lp_lossless_stream_t *s = d->s;
    uint32_t head;
    d->block = block;
    d->next = s->words + s->block_words[block];
    d->cur = *d->next++;
    d->left = 32u;
    head = lp_lossless_bits(d, 6u);
    d->order = head >> 4;
    d->k = head & 15u;
    d->done = 0u;
    d->in_block = block + 1u < s->block_count ? s->block_samples
                                             : s->samples - block * s->block_samples;
}

/* Start decoding at `block` (0 .. block_count - 1). */
static inline void lp_lossless_start(lp_lossless_t *d, const lp_lossless_stream_t *s,
                                     uint32_t block) {
    d->s = s;
    d->h1[0] = d->h1[1] = 0;
    d->h2[0] = d->h2[1] = 0;
    lp_lossless_block(d, block);
}

/* True when the stream's last code has been given. */
static inline bool lp_lossless_ended(const lp_lossless_t *d) {
    return d->block + 1u >= d->s->block_count && d->done == d->in_block;
}

/* Decode up to `n` codes into `out`; returns how many (0: the stream has ended). */
static inline uint32_t lp_lossless_decode(lp_lossless_t *d, uint16_t *out, uint32_t n) {
    uint32_t got = 0u;
    const uint32_t bits = d->s->bits;
    const uint32_t two = d->s->channels == 2u ? 1u : 0u;
    while (got < n) {
        int32_t x;
        uint32_t c;
        if (d->done == d->in_block) {
            if (d->block + 1u >= d->s->block_count) {
                break;
            }
            lp_lossless_block(d, d->block + 1u);
        }
        c = d->done & two; /* the channel of this code */
        if (d->done < (d->order << two)) {
            x = (int32_t)lp_lossless_bits(d, bits);
        } else {
            uint32_t q = 0u, u;
            int32_t e;
            /* unary: count one bits (the M0+ has no count-leading-zeros instruction) */
            for (;;) {
                if (d->left == 0u) {
                    d->cur = *d->next++;
                    d->left = 32u;
                }
                if (!(d->cur & 0x80000000u)) {
                    break;
                }
                d->cur <<= 1;
                d->left--;
                if (++q == 16u) {
                    break;
                }
            }
            if (q == 16u) {
                u = lp_lossless_bits(d, bits + 3u);
            } else {
                d->cur <<= 1; /* the terminating zero */
                d->left--;
                u = (q << d->k) | lp_lossless_bits(d, d->k);
            }
            e = (u & 1u) ? -(int32_t)((u + 1u) >> 1) : (int32_t)(u >> 1);
            if (d->order == 0u) {
                x = e;
            } else if (d->order == 1u) {
                x = d->h1[c] + e;
            } else {
                x = 2 * d->h1[c] - d->h2[c] + e;
            }
        }
        d->h2[c] = d->h1[c];
        d->h1[c] = x;
        out[got++] = (uint16_t)x;
        d->done++;
    }
    return got;
}

#endif /* LADDERPACK_LOSSLESS_H */
