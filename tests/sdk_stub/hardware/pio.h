/* Test stand-in for hardware/pio.h, from the SDK's documented signatures. */
#ifndef LP_TEST_HARDWARE_PIO_H
#define LP_TEST_HARDWARE_PIO_H
#include "pico.h"

typedef struct {
    volatile uint32_t ctrl;
    volatile uint32_t fstat;
    volatile uint32_t fdebug;
    volatile uint32_t flevel;
    volatile uint32_t txf[4];
    volatile uint32_t rxf[4];
} pio_hw_t;
typedef pio_hw_t *PIO;
extern pio_hw_t *lp_test_pio0;
#define pio0 lp_test_pio0

typedef struct pio_program {
    const uint16_t *instructions;
    uint8_t length;
    int8_t origin;
} pio_program_t;

typedef struct {
    uint32_t clkdiv;
    uint32_t execctrl;
    uint32_t shiftctrl;
    uint32_t pinctrl;
} pio_sm_config;

enum pio_fifo_join { PIO_FIFO_JOIN_NONE = 0, PIO_FIFO_JOIN_TX = 1, PIO_FIFO_JOIN_RX = 2 };

bool pio_can_add_program(PIO pio, const pio_program_t *program);
uint pio_add_program(PIO pio, const pio_program_t *program);
void pio_remove_program(PIO pio, const pio_program_t *program, uint loaded_offset);
int pio_claim_unused_sm(PIO pio, bool required);
void pio_sm_unclaim(PIO pio, uint sm);
pio_sm_config pio_get_default_sm_config(void);
void sm_config_set_wrap(pio_sm_config *c, uint wrap_target, uint wrap);
void sm_config_set_out_pins(pio_sm_config *c, uint out_base, uint out_count);
void sm_config_set_out_shift(pio_sm_config *c, bool shift_right, bool autopull,
                             uint pull_threshold);
void sm_config_set_fifo_join(pio_sm_config *c, enum pio_fifo_join join);
void sm_config_set_clkdiv_int_frac(pio_sm_config *c, uint16_t div_int, uint8_t div_frac);
void pio_gpio_init(PIO pio, uint pin);
void pio_sm_set_pins_with_mask(PIO pio, uint sm, uint32_t pin_values, uint32_t pin_mask);
void pio_sm_set_pins_with_mask64(PIO pio, uint sm, uint64_t pin_values, uint64_t pin_mask);
int pio_set_gpio_base(PIO pio, uint gpio_base);
uint pio_get_gpio_base(PIO pio);
#define PICO_OK 0
#ifndef PICO_PIO_USE_GPIO_BASE
#define PICO_PIO_USE_GPIO_BASE 0
#endif
int pio_sm_set_consecutive_pindirs(PIO pio, uint sm, uint pin_base, uint pin_count, bool is_out);
int pio_sm_init(PIO pio, uint sm, uint initial_pc, const pio_sm_config *config);
void pio_sm_set_enabled(PIO pio, uint sm, bool enabled);
void pio_sm_put(PIO pio, uint sm, uint32_t data);
void pio_sm_put_blocking(PIO pio, uint sm, uint32_t data);
bool pio_sm_is_tx_fifo_empty(PIO pio, uint sm);
uint pio_get_dreq(PIO pio, uint sm, bool is_tx);
#endif
