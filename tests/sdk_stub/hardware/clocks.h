/* Test stand-in for hardware/clocks.h, from the SDK's documented signatures. */
#ifndef LP_TEST_HARDWARE_CLOCKS_H
#define LP_TEST_HARDWARE_CLOCKS_H
#include "pico.h"
enum clock_index { clk_gpout0 = 0, clk_gpout1, clk_gpout2, clk_gpout3, clk_ref, clk_sys };
uint32_t clock_get_hz(enum clock_index clk_index);
#endif
