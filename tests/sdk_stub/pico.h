/* Test stand-in for the SDK's pico.h: only what the generated player needs. */
#ifndef LP_TEST_PICO_H
#define LP_TEST_PICO_H
#include <stdbool.h>
#include <stdint.h>
typedef unsigned int uint;
static inline void tight_loop_contents(void) {}
#endif
