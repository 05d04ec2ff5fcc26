/* System clock and port_time_us.
 *
 * PLL (RM0368 section 6.3, RCC_PLLCFGR): source / M = 1 MHz into the VCO, x336 = 336 MHz
 * (inside its 192..432 MHz range), / 4 = 84 MHz system clock, / 7 = 48 MHz for USB. The flash
 * needs 2 wait states at 84 MHz and 2.7..3.6 V (RM0368 section 3.4, Table 6), set before the
 * switch. APB1 may run at most at 42 MHz, hence its divider 2. The reset value of the F401's
 * voltage scaling (scale 2) allows 84 MHz, and the F411's (scale 1) too. */
#include "clock.h"

#include <stdint.h>

#include "board.h"
#include "port.h"
#include "stm32f401.h"

#define HSE_START_TRIES 200000u /* a few tens of ms on the 16 MHz RC oscillator */
#define HSI_HZ 16000000u

/* Start the crystal; 0 when there is none or it does not start in time. */
static int hse_started(void)
{
    if (BOARD_HSE_HZ == 0u)
        return 0;
    RCC_CR |= RCC_CR_HSEON;
    for (uint32_t i = 0; i < HSE_START_TRIES; i++)
        if (RCC_CR & RCC_CR_HSERDY)
            return 1;
    RCC_CR &= ~RCC_CR_HSEON;
    return 0;
}

void clock_init(void)
{
    int hse = hse_started();
    uint32_t pll_in_mhz = (hse ? BOARD_HSE_HZ : HSI_HZ) / 1000000u;
    RCC_PLLCFGR = RCC_PLLCFGR_M(pll_in_mhz) | RCC_PLLCFGR_N(336u) | RCC_PLLCFGR_P(4u) |
                  RCC_PLLCFGR_Q(7u) | (hse ? RCC_PLLCFGR_SRC_HSE : 0u);
    RCC_CR |= RCC_CR_PLLON;
    while (!(RCC_CR & RCC_CR_PLLRDY)) {
    }
    FLASH_ACR = FLASH_ACR_LATENCY(2u) | FLASH_ACR_PRFTEN | FLASH_ACR_ICEN | FLASH_ACR_DCEN;
    while ((FLASH_ACR & 0xFu) != 2u) { /* RM0368 section 3.4: check the latency took */
    }
    RCC_CFGR = RCC_CFGR_PPRE1_DIV2 | RCC_CFGR_SW_PLL;
    while ((RCC_CFGR & RCC_CFGR_SWS_MASK) != RCC_CFGR_SWS_PLL) {
    }
    DEMCR |= DEMCR_TRCENA;
    DWT_CYCCNT = 0;
    DWT_CTRL |= DWT_CTRL_CYCCNTENA;
}

/* The 32-bit cycle counter wraps every 51 s at 84 MHz; the main loop calls this on every pass,
 * far more often, and each call adds the cycles since the previous one to a 64-bit count. */
uint64_t port_time_us(void)
{
    static uint32_t last_cycles, spare_cycles;
    static uint64_t us;
    uint32_t now = DWT_CYCCNT;
    spare_cycles += now - last_cycles;
    last_cycles = now;
    us += spare_cycles / (CPU_HZ / 1000000u);
    spare_cycles %= CPU_HZ / 1000000u;
    return us;
}
