/* The few STM32F401 and Cortex-M4 registers this port uses, written out by hand so the port
 * needs no vendor header.
 *
 * Sources, cited by section beside each block:
 *   RM0368  STMicroelectronics, "STM32F401xB/C and STM32F401xD/E advanced Arm-based 32-bit
 *           MCUs", reference manual RM0368 (register addresses and bit positions);
 *   PM0214  STMicroelectronics, "STM32 Cortex-M4 MCUs and MPUs programming manual" (NVIC,
 *           CPACR);
 *   DDI0403 Arm, "ARMv7-M Architecture Reference Manual", ARM DDI 0403E (DWT, DEMCR).
 * The STM32F411 (RM0383) has the same addresses and bits for everything below. */
#ifndef POISE_STM32F401_H
#define POISE_STM32F401_H

#include <stdint.h>

#define REG32(addr) (*(volatile uint32_t *)(uintptr_t)(addr))

/* ---- Memory map: RM0368 section 2.3, Table 1 (register boundary addresses) ---- */
#define TIM2_BASE 0x40000000u
#define TIM3_BASE 0x40000400u
#define TIM4_BASE 0x40000800u
#define TIM5_BASE 0x40000C00u
#define IWDG_BASE 0x40003000u
#define USART2_BASE 0x40004400u
#define TIM1_BASE 0x40010000u
#define USART1_BASE 0x40011000u
#define USART6_BASE 0x40011400u
#define SYSCFG_BASE 0x40013800u
#define EXTI_BASE 0x40013C00u
#define TIM9_BASE 0x40014000u
#define TIM10_BASE 0x40014400u
#define TIM11_BASE 0x40014800u
#define GPIO_BASE(port) (0x40020000u + 0x400u * (uint32_t)(port)) /* port 0 = A ... 7 = H */
#define RCC_BASE 0x40023800u
#define FLASH_BASE 0x40023C00u

/* ---- RCC: RM0368 section 6.3 (RCC registers) ---- */
#define RCC_CR REG32(RCC_BASE + 0x00u)
#define RCC_CR_HSEON (1u << 16)
#define RCC_CR_HSERDY (1u << 17)
#define RCC_CR_PLLON (1u << 24)
#define RCC_CR_PLLRDY (1u << 25)
#define RCC_PLLCFGR REG32(RCC_BASE + 0x04u)
#define RCC_PLLCFGR_M(m) ((uint32_t)(m) << 0)   /* PLLM[5:0], VCO input = source / M */
#define RCC_PLLCFGR_N(n) ((uint32_t)(n) << 6)   /* PLLN[14:6], VCO output = input * N */
#define RCC_PLLCFGR_P(p) ((uint32_t)((p) / 2u - 1u) << 16) /* PLLP[17:16]: 2, 4, 6, 8 */
#define RCC_PLLCFGR_SRC_HSE (1u << 22)
#define RCC_PLLCFGR_Q(q) ((uint32_t)(q) << 24)  /* PLLQ[27:24], the 48 MHz USB clock */
#define RCC_CFGR REG32(RCC_BASE + 0x08u)
#define RCC_CFGR_SW_PLL (2u << 0)
#define RCC_CFGR_SWS_MASK (3u << 2)
#define RCC_CFGR_SWS_PLL (2u << 2)
#define RCC_CFGR_PPRE1_DIV2 (4u << 10) /* APB1 = HCLK / 2 (APB1 at most 42 MHz) */
#define RCC_AHB1ENR REG32(RCC_BASE + 0x30u) /* bit n: GPIO port n clock */
#define RCC_APB1ENR REG32(RCC_BASE + 0x40u)
#define RCC_APB1ENR_TIM2 (1u << 0)   /* TIM3 bit 1, TIM4 bit 2, TIM5 bit 3 */
#define RCC_APB1ENR_USART2 (1u << 17)
#define RCC_APB2ENR REG32(RCC_BASE + 0x44u)
#define RCC_APB2ENR_TIM1 (1u << 0)
#define RCC_APB2ENR_USART1 (1u << 4)
#define RCC_APB2ENR_USART6 (1u << 5)
#define RCC_APB2ENR_SYSCFG (1u << 14)
#define RCC_APB2ENR_TIM9 (1u << 16)  /* TIM10 bit 17, TIM11 bit 18 */

/* ---- Flash interface: RM0368 section 3.8 (FLASH_ACR); wait states: section 3.4, Table 6 ---- */
#define FLASH_ACR REG32(FLASH_BASE + 0x00u)
#define FLASH_ACR_LATENCY(ws) ((uint32_t)(ws) << 0)
#define FLASH_ACR_PRFTEN (1u << 8)
#define FLASH_ACR_ICEN (1u << 9)
#define FLASH_ACR_DCEN (1u << 10)

/* ---- GPIO: RM0368 section 8.4 (GPIO registers) ---- */
#define GPIO_MODER(port) REG32(GPIO_BASE(port) + 0x00u)   /* 2 bits a pin */
#define GPIO_MODE_INPUT 0u
#define GPIO_MODE_OUTPUT 1u
#define GPIO_MODE_AF 2u
#define GPIO_OSPEEDR(port) REG32(GPIO_BASE(port) + 0x08u) /* 2 bits a pin; 2 = fast */
#define GPIO_PUPDR(port) REG32(GPIO_BASE(port) + 0x0Cu)   /* 2 bits a pin */
#define GPIO_PULL_NONE 0u
#define GPIO_PULL_UP 1u
#define GPIO_PULL_DOWN 2u
#define GPIO_IDR(port) REG32(GPIO_BASE(port) + 0x10u)
#define GPIO_BSRR(port) REG32(GPIO_BASE(port) + 0x18u)    /* bit n sets pin n, bit n+16 resets */
#define GPIO_AFR(port, pin) REG32(GPIO_BASE(port) + 0x20u + 4u * ((uint32_t)(pin) / 8u))

/* ---- SYSCFG: RM0368 section 7.2 (SYSCFG_EXTICR1..4: 4 bits a line, the port number) ---- */
#define SYSCFG_EXTICR(line) REG32(SYSCFG_BASE + 0x08u + 4u * ((uint32_t)(line) / 4u))

/* ---- EXTI: RM0368 section 10.3 (EXTI registers); bit n is line n ---- */
#define EXTI_IMR REG32(EXTI_BASE + 0x00u)
#define EXTI_RTSR REG32(EXTI_BASE + 0x08u)
#define EXTI_FTSR REG32(EXTI_BASE + 0x0Cu)
#define EXTI_PR REG32(EXTI_BASE + 0x14u) /* write 1 to clear */

/* ---- Timers: RM0368 section 13.4 (TIM2 to TIM5 registers); TIM1 section 12.4 and
 * TIM9 to TIM11 section 14.4 have the same offsets for the registers used here ---- */
#define TIM_CR1(base) REG32((base) + 0x00u)
#define TIM_CR1_CEN (1u << 0)
#define TIM_CR1_ARPE (1u << 7)
#define TIM_SMCR(base) REG32((base) + 0x08u)
#define TIM_SMCR_ENCODER_MODE_3 (3u << 0) /* SMS = 011: count on both TI1 and TI2 edges */
#define TIM_EGR(base) REG32((base) + 0x14u)
#define TIM_EGR_UG (1u << 0)
#define TIM_CCMR(base, ch) REG32((base) + 0x18u + 4u * (((uint32_t)(ch) - 1u) / 2u))
#define TIM_CCMR_SHIFT(ch) (8u * (((uint32_t)(ch) - 1u) % 2u)) /* channel's byte in CCMRx */
#define TIM_CCMR_CC1S_TI1 (1u << 0)          /* CC1 input, IC1 on TI1 */
#define TIM_CCMR_CC2S_TI2 (1u << 8)          /* CC2 input, IC2 on TI2 */
#define TIM_CCMR_IC1F(f) ((uint32_t)(f) << 4)
#define TIM_CCMR_IC2F(f) ((uint32_t)(f) << 12)
#define TIM_CCMR_OC_PRELOAD (1u << 3)        /* OCxPE, in the channel's byte */
#define TIM_CCMR_OC_PWM1 (6u << 4)           /* OCxM = 110, in the channel's byte */
#define TIM_CCER(base) REG32((base) + 0x20u)
#define TIM_CCER_CCE(ch) (1u << (4u * ((uint32_t)(ch) - 1u)))
#define TIM_CNT(base) REG32((base) + 0x24u)
#define TIM_PSC(base) REG32((base) + 0x28u)
#define TIM_ARR(base) REG32((base) + 0x2Cu)
#define TIM_CCR(base, ch) REG32((base) + 0x34u + 4u * ((uint32_t)(ch) - 1u))
#define TIM_BDTR(base) REG32((base) + 0x44u) /* TIM1 only: RM0368 section 12.4.18 */
#define TIM_BDTR_MOE (1u << 15)

/* ---- USART: RM0368 section 19.6 (USART registers) ---- */
#define USART_SR(base) REG32((base) + 0x00u)
#define USART_SR_ORE (1u << 3)
#define USART_SR_RXNE (1u << 5)
#define USART_SR_TXE (1u << 7)
#define USART_DR(base) REG32((base) + 0x04u)
#define USART_BRR(base) REG32((base) + 0x08u)
#define USART_CR1(base) REG32((base) + 0x0Cu)
#define USART_CR1_RE (1u << 2)
#define USART_CR1_TE (1u << 3)
#define USART_CR1_RXNEIE (1u << 5)
#define USART_CR1_TXEIE (1u << 7)
#define USART_CR1_UE (1u << 13)

/* ---- Independent watchdog: RM0368 section 15.4 (IWDG registers) ---- */
#define IWDG_KR REG32(IWDG_BASE + 0x00u)
#define IWDG_KR_RELOAD 0xAAAAu
#define IWDG_KR_UNLOCK 0x5555u
#define IWDG_KR_START 0xCCCCu
#define IWDG_PR REG32(IWDG_BASE + 0x04u)  /* prescaler 4 << PR */
#define IWDG_RLR REG32(IWDG_BASE + 0x08u) /* 12-bit reload */
#define IWDG_SR REG32(IWDG_BASE + 0x0Cu)  /* PVU, RVU: an update is still in progress */

/* ---- Debug MCU: RM0368 chapter 23 (Debug support), DBGMCU_APB1_FZ ---- */
#define DBGMCU_APB1_FZ REG32(0xE0042008u)
#define DBGMCU_APB1_FZ_IWDG_STOP (1u << 12) /* the watchdog pauses while a debugger halts the core */

/* ---- Cortex-M4 core ---- */
#define CPACR REG32(0xE000ED88u)            /* PM0214 section 4.6.1 */
#define CPACR_CP10_CP11_FULL (0xFu << 20)   /* full access to the FPU */
#define NVIC_ISER(irq) REG32(0xE000E100u + 4u * ((uint32_t)(irq) / 32u)) /* PM0214 section 4.3.2 */
#define NVIC_IPR(irq) (*(volatile uint8_t *)(uintptr_t)(0xE000E400u + (uint32_t)(irq))) /* 4.3.7 */
#define DEMCR REG32(0xE000EDFCu)            /* DDI0403 section C1.6.5 */
#define DEMCR_TRCENA (1u << 24)
#define DWT_CTRL REG32(0xE0001000u)         /* DDI0403 section C1.8.7 */
#define DWT_CTRL_CYCCNTENA (1u << 0)
#define DWT_CYCCNT REG32(0xE0001004u)       /* DDI0403 section C1.8.8 */

/* ---- Interrupt positions: RM0368 section 10.1.3, Table 38 (vector table) ---- */
#define IRQ_EXTI0 6u /* EXTI1..4: 7..10 */
#define IRQ_EXTI9_5 23u
#define IRQ_USART1 37u
#define IRQ_USART2 38u
#define IRQ_EXTI15_10 40u
#define IRQ_USART6 71u
#define IRQ_COUNT 85u /* positions 0..84 (SPI4 is the last) */

#endif
