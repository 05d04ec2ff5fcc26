#include "hw.h"

#include "stm32f401.h"

#define PIN_PORT(pin) ((uint32_t)(pin) / 16u)
#define PIN_NUMBER(pin) ((uint32_t)(pin) % 16u)

void pin_setup(int pin, uint32_t mode, uint32_t pull, uint32_t af)
{
    uint32_t port = PIN_PORT(pin), n = PIN_NUMBER(pin), shift2 = 2u * n, shift4 = 4u * (n % 8u);
    RCC_AHB1ENR |= 1u << port;
    (void)RCC_AHB1ENR; /* read back: errata ES0182, "Delay after an RCC peripheral clock enabling" */
    GPIO_AFR(port, n) = (GPIO_AFR(port, n) & ~(0xFu << shift4)) | (af << shift4);
    GPIO_OSPEEDR(port) = (GPIO_OSPEEDR(port) & ~(3u << shift2)) | (2u << shift2);
    GPIO_PUPDR(port) = (GPIO_PUPDR(port) & ~(3u << shift2)) | (pull << shift2);
    GPIO_MODER(port) = (GPIO_MODER(port) & ~(3u << shift2)) | (mode << shift2);
}

int pin_read(int pin) { return (int)((GPIO_IDR(PIN_PORT(pin)) >> PIN_NUMBER(pin)) & 1u); }

void pin_write(int pin, int high)
{
    GPIO_BSRR(PIN_PORT(pin)) = 1u << (PIN_NUMBER(pin) + (high ? 0u : 16u));
}

uint32_t timer_enable(int n)
{
    switch (n) {
    case 1: RCC_APB2ENR |= RCC_APB2ENR_TIM1; return TIM1_BASE;
    case 2: RCC_APB1ENR |= RCC_APB1ENR_TIM2; return TIM2_BASE;
    case 3: RCC_APB1ENR |= RCC_APB1ENR_TIM2 << 1; return TIM3_BASE;
    case 4: RCC_APB1ENR |= RCC_APB1ENR_TIM2 << 2; return TIM4_BASE;
    case 5: RCC_APB1ENR |= RCC_APB1ENR_TIM2 << 3; return TIM5_BASE;
    case 9: RCC_APB2ENR |= RCC_APB2ENR_TIM9; return TIM9_BASE;
    case 10: RCC_APB2ENR |= RCC_APB2ENR_TIM9 << 1; return TIM10_BASE;
    default: RCC_APB2ENR |= RCC_APB2ENR_TIM9 << 2; return TIM11_BASE; /* 11 */
    }
}

void irq_enable(uint32_t irq, uint32_t priority)
{
    NVIC_IPR(irq) = (uint8_t)(priority << 4); /* the F4 implements the top 4 priority bits */
    NVIC_ISER(irq) = 1u << (irq % 32u);
}
