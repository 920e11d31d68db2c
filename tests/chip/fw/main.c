/* Test firmware for the emulated chip: runs the steps of scenario.h against the
 * generated C player and reports each step's result through a mailbox word that the
 * harness watches (every write is recorded with its time in system clocks). */
#include <stdbool.h>
#include <stdint.h>

#include "hardware/pio.h"
#include "hardware/sync.h"
#include "pico/stdlib.h"

#include "ladderpack_player.h"

enum { OP_INIT = 1, OP_START, OP_WAIT, OP_DELAY, OP_STOP, OP_DEINIT, OP_POLL_STOP,
       OP_HOLD, OP_MARK, OP_HOLD_VOLTS, OP_END = 0x7F };

typedef struct lp_step {
    uint8_t op;
    uint8_t slot;
    uint32_t arg;
    uint32_t arg2;
} lp_step_t;

#include "scenario.h"

volatile uint32_t lp_test_mailbox;
static lp_ladder_player_t players[4];

static void report(uint32_t op, uint32_t index, int rc) {
    lp_test_mailbox = (op << 24) | ((index & 0xFFFFu) << 8) | ((uint32_t)rc & 0xFFu);
}

int main(void) {
    uint32_t i;
    for (i = 0; i < sizeof(lp_steps) / sizeof(lp_steps[0]); ++i) {
        const lp_step_t *st = &lp_steps[i];
        lp_ladder_player_t *p = &players[st->slot];
        int rc = 0;
        switch (st->op) {
        case OP_INIT:
            rc = lp_ladder_init(p, &lp_streams[st->arg], st->arg2 ? pio1 : pio0);
            break;
        case OP_START:
            rc = lp_ladder_start(p, st->arg != 0u);
            break;
        case OP_WAIT:
            while (lp_ladder_busy(p)) {
                tight_loop_contents();
            }
            break;
        case OP_DELAY:
            busy_wait_at_least_cycles(st->arg);
            break;
        case OP_STOP:
            rc = lp_ladder_stop(p);
            break;
        case OP_POLL_STOP:
            rc = lp_ladder_request_stop(p);
            break;
        case OP_DEINIT:
            lp_ladder_deinit(p);
            break;
        case OP_HOLD:
            rc = lp_ladder_hold_code(p, (uint16_t)st->arg);
            break;
        case OP_HOLD_VOLTS: /* arg: millivolts, through the stream's embedded level table */
#ifdef LP_TEST_LEVELS
            rc = lp_ladder_code_for_volts(LP_TEST_LEVELS, LP_TEST_LEVEL_COUNT, (float)st->arg / 1000.0f);
            rc = lp_ladder_hold_code(p, (uint16_t)rc) == LP_LADDER_OK ? rc : -100;
#endif
            break;
        case OP_MARK:
            rc = (int)st->arg;
            break;
        default:
            break;
        }
        report(st->op, i, rc);
    }
    report(OP_END, 0u, 0);
    for (;;) {
        tight_loop_contents();
    }
}
