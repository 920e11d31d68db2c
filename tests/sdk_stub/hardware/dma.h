/* Test stand-in for hardware/dma.h, from the SDK's documented signatures. */
#ifndef LP_TEST_HARDWARE_DMA_H
#define LP_TEST_HARDWARE_DMA_H
#include "pico.h"

enum dma_channel_transfer_size { DMA_SIZE_8 = 0, DMA_SIZE_16 = 1, DMA_SIZE_32 = 2 };
typedef struct {
    uint32_t ctrl;
} dma_channel_config;

typedef struct {
    volatile uint32_t read_addr, write_addr, transfer_count, ctrl_trig;
    volatile uint32_t al1_ctrl, al1_read_addr, al1_write_addr, al1_transfer_count_trig;
    volatile uint32_t al2_ctrl, al2_transfer_count, al2_read_addr, al2_write_addr_trig;
    volatile uint32_t al3_ctrl, al3_write_addr, al3_transfer_count, al3_read_addr_trig;
} dma_channel_hw_t;
typedef struct {
    dma_channel_hw_t ch[12];
} dma_hw_t;
extern dma_hw_t *lp_test_dma_hw;
#define dma_hw lp_test_dma_hw

int dma_claim_unused_channel(bool required);
void dma_channel_unclaim(uint channel);
dma_channel_config dma_channel_get_default_config(uint channel);
dma_channel_config dma_get_channel_config(uint channel);
void channel_config_set_transfer_data_size(dma_channel_config *c,
                                           enum dma_channel_transfer_size size);
void channel_config_set_read_increment(dma_channel_config *c, bool incr);
void channel_config_set_write_increment(dma_channel_config *c, bool incr);
void channel_config_set_dreq(dma_channel_config *c, uint dreq);
void channel_config_set_chain_to(dma_channel_config *c, uint chain_to);
void dma_channel_configure(uint channel, const dma_channel_config *config,
                           volatile void *write_addr, const volatile void *read_addr,
                           uint transfer_count, bool trigger);
void dma_channel_set_config(uint channel, const dma_channel_config *config, bool trigger);
void dma_channel_abort(uint channel);
bool dma_channel_is_busy(uint channel);
#endif
