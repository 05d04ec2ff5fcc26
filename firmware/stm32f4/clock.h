/* The 84 MHz system clock and the microsecond clock of port_time_us. */
#ifndef POISE_STM32_CLOCK_H
#define POISE_STM32_CLOCK_H

#define CPU_HZ 84000000u  /* SYSCLK = HCLK = APB2 = every timer's clock */
#define APB1_HZ 42000000u /* APB1 peripherals (USART2); its timers still count at 84 MHz */

/* From reset (16 MHz internal oscillator) to 84 MHz on the PLL, and the cycle counter on. */
void clock_init(void);

#endif
