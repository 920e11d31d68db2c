"""C player of stereo ladder streams: two N-bit ladders written by one ``out pins, 2N``.

Generated from the mono ladder player's template (``templates/ladderpack_player.c``) with
its names prefixed ``lp_stereo_`` (so both players link into one firmware) and the few
functions that know what a code is replaced: here a code is a frame ``left | right << N``,
pin order and inversion apply to each ladder on its own, and a ramp made at run time
moves both ladders together, neither by more than the stream's largest step.  The mono
player's files stay byte for byte what they were.
"""

from __future__ import annotations

import functools
import re

from ladderpack._version import __version__
from ladderpack.emit import templates
from ladderpack.emit.names import player_files

__all__ = ["HEADER_NAME", "SOURCE_NAME", "files", "render_header", "render_source"]

HEADER_NAME, SOURCE_NAME = player_files("ladderpack_stereo")

_PINS_OF = """\
/* Frame code (left | right << N) -> the bits OUT writes to the 2N pins: pin order and
 * inversion applied to each ladder on its own. */
static uint32_t lp_stereo_half_pins(const lp_stereo_stream_t *s, uint32_t code) {
    uint32_t n = s->bits / 2u;
    uint32_t v = code;
    uint32_t k;
    if (!s->msb_high) {
        v = 0u;
        for (k = 0u; k < n; ++k) {
            if ((code >> k) & 1u) {
                v |= 1u << (n - 1u - k);
            }
        }
    }
    if (s->invert) {
        v = ~v & ((1u << n) - 1u);
    }
    return v;
}

static uint32_t lp_stereo_pins_of(const lp_stereo_stream_t *s, uint32_t code) {
    uint32_t n = s->bits / 2u;
    uint32_t mask = (1u << n) - 1u;
    return lp_stereo_half_pins(s, code & mask) | (lp_stereo_half_pins(s, (code >> n) & mask) << n);
}

/* Pin bits -> frame code (the inverse of lp_stereo_pins_of: each mapping is its own
 * inverse). */
static uint32_t lp_stereo_code_of(const lp_stereo_stream_t *s, uint32_t pins) {
    uint32_t n = s->bits / 2u;
    uint32_t mask = (1u << n) - 1u;
    return lp_stereo_half_pins(s, pins & mask) | (lp_stereo_half_pins(s, (pins >> n) & mask) << n);
}
"""

_FILL = """\
/* The ring's fill: decode the next codes, left and right alternating, into frames
 * (left | right << N) and pack them. A fill ends at the end of the codes (a loop's pass);
 * the next fill of a loop that goes on starts the next pass. */
static uint32_t lp_stereo_fill(lp_common_ring_t *r, uint32_t *words, uint32_t max) {
    lp_stereo_player_t *p = (lp_stereo_player_t *)r->owner;
    const lp_stereo_stream_t *s = p->stream;
    uint32_t spw = s->samples_per_word;
    uint32_t half = s->bits / 2u;
    uint32_t n = 0u;
    uint16_t codes[64];
    if (r->at_end) {
        if (!p->looping) {
            return 0u; /* the end */
        }
        lp_lossless_start(&p->dec, s->lossless, 0u); /* the next pass */
        r->at_end = false;
    }
    while (n < max) {
        uint32_t got = lp_lossless_decode(&p->dec, codes, 2u * spw);
        uint32_t word = 0u;
        uint32_t k;
        if (got == 0u) {
            break;
        }
        for (k = 0u; 2u * k + 1u < got; ++k) {
            uint32_t frame = (uint32_t)codes[2u * k] | ((uint32_t)codes[2u * k + 1u] << half);
            word |= lp_stereo_pins_of(s, frame) << lp_stereo_slot_shift(s, k);
        }
        words[n++] = word;
    }
    r->at_end = p->dec.block + 1u >= s->lossless->block_count && p->dec.done == p->dec.in_block;
    return n;
}
"""

_BUILD_RAMP = """\
/* One ladder's code at step i of n of a raised cosine from `from` to `to`, no further
 * than `step` from `prev`. */
static int32_t lp_stereo_ramp_at(uint32_t from, uint32_t to, uint32_t i, uint32_t n,
                                 int32_t prev, uint32_t step) {
    int32_t code = (int32_t)to;
    if (i <= n) {
        uint32_t pos = (i << 14) / n; /* 0..64 in Q8 */
        uint32_t idx = pos >> 8;
        int32_t frac = (int32_t)(pos & 255u);
        int32_t c0 = lp_common_cosine_q15[idx];
        int32_t c1 = lp_common_cosine_q15[idx < 64u ? idx + 1u : 64u];
        int32_t w = c0 + (((c1 - c0) * frac) >> 8);
        int64_t span = (int64_t)from - (int64_t)to;
        code = (int32_t)to + (int32_t)((span * w + (span >= 0 ? 16384 : -16384)) / 32768);
    }
    if (code > prev + (int32_t)step) {
        code = prev + (int32_t)step;
    } else if (code < prev - (int32_t)step) {
        code = prev - (int32_t)step;
    }
    return code;
}

/* Fill p->ramp with raised-cosine ramps of both ladders from the frame on the pins
 * (`from`, not repeated) to the frame `to`, padded with `to`, neither ladder stepping more
 * than the stream's largest step. The loop program repeats the last word when its FIFO
 * runs dry, so for it a whole word of `to` closes the ramp. Returns the number of words.
 * Kept out of line (see the mono player). */
static __noinline uint32_t lp_stereo_build_ramp(lp_stereo_player_t *p, uint32_t from,
                                                uint32_t to) {
    const lp_stereo_stream_t *s = p->stream;
    uint32_t spw = s->samples_per_word;
    uint32_t step = s->max_step ? s->max_step : 1u;
    uint32_t nb = s->bits / 2u;
    uint32_t mask = (1u << nb) - 1u;
    uint32_t fl = from & mask, fr = (from >> nb) & mask;
    uint32_t tl = to & mask, tr = (to >> nb) & mask;
    uint32_t dl = fl > tl ? fl - tl : tl - fl;
    uint32_t dr = fr > tr ? fr - tr : tr - fr;
    uint32_t delta = dl > dr ? dl : dr;
    uint32_t cap = (LP_STEREO_RAMP_WORDS - 1u) * spw;
    uint32_t n = 0u;
    uint32_t count = 0u;
    uint32_t words = 0u;
    uint32_t word = 0u;
    int32_t pl = (int32_t)fl;
    int32_t pr = (int32_t)fr;
    uint32_t i;

    if (delta != 0u) {
        /* The raised cosine's steepest step is (pi / 2) delta / n; 355 / 226 > pi / 2. */
        n = (355u * delta + 226u * step - 1u) / (226u * step) + 1u;
        if (n > cap) {
            n = cap;
        }
    }
    for (i = 1u; i <= n || (uint32_t)pl != tl || (uint32_t)pr != tr; ++i) {
        if (count == cap) {
            break; /* the buffer is full: the closing word below jumps the rest */
        }
        pl = lp_stereo_ramp_at(fl, tl, i, n, pl, step);
        pr = lp_stereo_ramp_at(fr, tr, i, n, pr, step);
        word |= lp_stereo_pins_of(s, (uint32_t)pl | ((uint32_t)pr << nb))
                << lp_stereo_slot_shift(s, count % spw);
        ++count;
        if (count % spw == 0u) {
            p->ramp[words++] = word;
            word = 0u;
        }
    }
    if (count % spw != 0u) {
        for (i = count % spw; i < spw; ++i) {
            word |= lp_stereo_pins_of(s, to) << lp_stereo_slot_shift(s, i);
        }
        p->ramp[words++] = word;
    }
    if (s->program_kind == LP_STEREO_PROGRAM_LOOP || (uint32_t)pl != tl || (uint32_t)pr != tr) {
        word = 0u;
        for (i = 0u; i < spw; ++i) {
            word |= lp_stereo_pins_of(s, to) << lp_stereo_slot_shift(s, i);
        }
        p->ramp[words++] = word;
    }
    return words;
}
"""


#: The stereo player's function names before every API was lp_<output>_*, until 0.3.
_OLD_NAMES = (
    "/* The names before every player's API was lp_<output>_* (lp_stereo_* here), kept as\n"
    " * aliases until version 0.3. */\n"
    + "".join(
        f"#define lp_stereo_player_{v} lp_stereo_{v}\n"
        for v in ("init", "start", "busy", "request_stop", "stop", "hold_code", "deinit")
    )
)


def _renamed(text: str) -> str:
    text = re.sub(r"\blp_ladder_", "lp_stereo_", text)
    text = re.sub(r"\bLP_LADDER_", "LP_STEREO_", text)
    text = text.replace("LADDERPACK_PLAYER_H", "LADDERPACK_STEREO_H")
    return text.replace('"ladderpack_player.h"', '"ladderpack_stereo.h"')


def _replace_function(text: str, name: str, new: str) -> str:
    """Replace the definition of `name` (its comment block and body) in `text` by `new`."""
    start = text.index(f" {name}(")
    head = text.rfind("\n\n", 0, start) + 2
    end = text.index("\n}\n", start) + 3
    return text[:head] + new + text[end:]


@functools.cache
def render_header() -> str:
    """Return ``ladderpack_stereo.h``."""
    text = _renamed(templates.render("ladderpack_player.h", VERSION=__version__))
    text = text.replace(
        " * Plays ladderpack streams on RP2040/RP2350 with the vendor SDK:",
        " * Plays ladderpack stereo ladder streams (two N-bit ladders on 2N consecutive pins,\n"
        " * both written by one OUT; a code is the frame left | right << N) on RP2040/RP2350\n"
        " * with the vendor SDK:",
    )
    text = text.replace(  # the ladder's old spelling of its ramp size is not the stereo's
        "#if !defined(LP_STEREO_RAMP_WORDS) && defined(LP_RAMP_WORDS)\n"
        "#define LP_STEREO_RAMP_WORDS LP_RAMP_WORDS /* its old name, until version 0.3 */\n"
        "#endif\n",
        "",
    )
    start = text.index("/* The names before every player's API")
    end = text.index("#endif /* LADDERPACK_STEREO_H */")
    text = text[:start] + _OLD_NAMES + "\n" + text[end:]
    for old, new in (
        (
            "    uint16_t idle_code;\n",
            "    uint32_t idle_code;           /* frame of both ladders */\n",
        ),
        ("    uint16_t target_code;", "    uint32_t target_code;"),
        ("(filled by <NAME>_LADDER_INIT)", "(filled by <NAME>_STEREO_INIT)"),
        (
            "int lp_stereo_hold_code(lp_stereo_player_t *p, uint16_t code);",
            "int lp_stereo_hold_code(lp_stereo_player_t *p, uint32_t code);",
        ),
    ):
        assert old in text, old
        text = text.replace(old, new)
    return text


@functools.cache
def render_source() -> str:
    """Return ``ladderpack_stereo.c``."""
    text = _renamed(templates.render("ladderpack_player.c", VERSION=__version__))
    start = text.index("/* Ladder code -> the bits OUT writes")
    end = text.index("/* Bit position of sample slot k")
    text = text[:start] + _PINS_OF + "\n" + text[end:]
    text = _replace_function(text, "lp_stereo_build_ramp", _BUILD_RAMP)
    text = _replace_function(text, "lp_stereo_fill", _FILL)
    old = "int lp_stereo_hold_code(lp_stereo_player_t *p, uint16_t code) {"
    assert old in text
    return text.replace(old, old.replace("uint16_t code", "uint32_t code"))


def files() -> dict[str, bytes]:
    """The stereo player's two files and the players' shared header."""
    header = render_header().encode()
    return {
        HEADER_NAME: header,
        SOURCE_NAME: render_source().encode(),
        templates.COMMON_NAME: templates.render(
            templates.COMMON_NAME, VERSION=__version__
        ).encode(),
        **templates.included_decoders(header),
    }
