/* ladderpack @@VERSION@@: the IMA ADPCM decoder (see ladderpack.compress).
 *
 * Interactive Multimedia Association, "Recommended Practices for Enhancing Digital Audio
 * Compatibility in Multimedia Systems", rev. 3.00, 1992: 4 bits a sample, 89 step sizes,
 * the step index moved by the code's magnitude bits. A stream is blocks that each start
 * from a stored predictor and step index (a header word: the predictor as a signed 16-bit
 * value in the low half, the index in bits 16..22) and whose first sample is that
 * predictor; the codes are two a byte, the earlier sample in the low nibble. Two channels
 * are coded each on its own and interleaved (left, right, ...): a header word per block
 * and channel, a frame's two codes in one byte. Plain C99 for a Cortex-M0+ (no division,
 * no 64-bit arithmetic).
 *
 * Usage:
 *     lp_adpcm_t d;
 *     lp_adpcm_start(&d, &stream, 0);         // from block 0 (any block will do)
 *     n = lp_adpcm_decode(&d, samples, 256);  // up to 256 samples; 0 at the end
 *                                             // (two channels: whole frames, L then R)
 */
#ifndef LADDERPACK_ADPCM_H
#define LADDERPACK_ADPCM_H

#include <stdint.h>

/* A compressed stream as the generated source describes it. */
typedef struct lp_adpcm_stream {
    const uint32_t *headers; /* per block and channel: predictor (low half), index (16..22) */
    const uint8_t *codes;    /* two codes a byte, the earlier in the low nibble */
    uint32_t block_count;
    uint32_t block_samples; /* samples in every block but the last (all channels) */
    uint32_t samples;       /* samples in all (all channels) */
    uint8_t channels;       /* 1, or 2 interleaved (left, right, ...) */
} lp_adpcm_stream_t;

/* A decoder's place in a stream. */
typedef struct lp_adpcm {
    const lp_adpcm_stream_t *s;
    uint32_t block;    /* the block being decoded */
    uint32_t done;     /* samples of it already given */
    uint32_t in_block; /* samples it holds */
    int32_t pred[2];   /* per channel */
    uint32_t index[2];
} lp_adpcm_t;

static const uint16_t lp_adpcm_steps[89] = {
    7u, 8u, 9u, 10u, 11u, 12u, 13u, 14u, 16u, 17u, 19u, 21u, 23u, 25u, 28u, 31u, 34u, 37u,
    41u, 45u, 50u, 55u, 60u, 66u, 73u, 80u, 88u, 97u, 107u, 118u, 130u, 143u, 157u, 173u,
    190u, 209u, 230u, 253u, 279u, 307u, 337u, 371u, 408u, 449u, 494u, 544u, 598u, 658u,
    724u, 796u, 876u, 963u, 1060u, 1166u, 1282u, 1411u, 1552u, 1707u, 1878u, 2066u, 2272u,
    2499u, 2749u, 3024u, 3327u, 3660u, 4026u, 4428u, 4871u, 5358u, 5894u, 6484u, 7132u,
    7845u, 8630u, 9493u, 10442u, 11487u, 12635u, 13899u, 15289u, 16818u, 18500u, 20350u,
    22385u, 24623u, 27086u, 29794u, 32767u
};
static const int8_t lp_adpcm_index_adjust[8] = {-1, -1, -1, -1, 2, 4, 6, 8};

static inline void lp_adpcm_block(lp_adpcm_t *d, uint32_t block) {
    const lp_adpcm_stream_t *s = d->s;
    uint32_t c;
    d->block = block;
    d->done = 0u;
    for (c = 0u; c < s->channels; ++c) {
        uint32_t h = s->headers[block * s->channels + c];
        d->pred[c] = (int32_t)(int16_t)(uint16_t)(h & 0xFFFFu);
        d->index[c] = (h >> 16) & 0x7Fu;
    }
    d->in_block = block + 1u < s->block_count ? s->block_samples
                                             : s->samples - block * s->block_samples;
}

/* Start decoding at `block` (0 .. block_count - 1). */
static inline void lp_adpcm_start(lp_adpcm_t *d, const lp_adpcm_stream_t *s, uint32_t block) {
    d->s = s;
    lp_adpcm_block(d, block);
}

/* Decode up to `n` samples into `out`; returns how many (0: the stream has ended). */
static inline uint32_t lp_adpcm_decode(lp_adpcm_t *d, int16_t *out, uint32_t n) {
    uint32_t got = 0u;
    const uint32_t two = d->s->channels == 2u ? 1u : 0u;
    while (got < n) {
        uint32_t at, code, step, diff, c;
        int32_t pred;
        int32_t index;
        if (d->done == d->in_block) {
            if (d->block + 1u >= d->s->block_count) {
                break;
            }
            lp_adpcm_block(d, d->block + 1u);
        }
        c = d->done & two; /* the channel of this sample */
        if (d->done <= two) { /* a block's first frame is its headers' predictors */
            out[got++] = (int16_t)d->pred[c];
            d->done++;
            continue;
        }
        at = d->block * d->s->block_samples + d->done;
        code = (uint32_t)(d->s->codes[at >> 1] >> ((at & 1u) * 4u)) & 15u;
        step = lp_adpcm_steps[d->index[c]];
        diff = step >> 3;
        if (code & 4u) diff += step;
        if (code & 2u) diff += step >> 1;
        if (code & 1u) diff += step >> 2;
        pred = (code & 8u) ? d->pred[c] - (int32_t)diff : d->pred[c] + (int32_t)diff;
        if (pred > 32767) pred = 32767;
        if (pred < -32768) pred = -32768;
        index = (int32_t)d->index[c] + lp_adpcm_index_adjust[code & 7u];
        if (index < 0) index = 0;
        if (index > 88) index = 88;
        d->pred[c] = pred;
        d->index[c] = (uint32_t)index;
        out[got++] = (int16_t)pred;
        d->done++;
    }
    return got;
}

#endif /* LADDERPACK_ADPCM_H */
