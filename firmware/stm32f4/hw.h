/* Small helpers over the registers of stm32f401.h: a pin's mode, a timer's base address and
 * clock, an interrupt's enable. Pins are board.h's PIN(port, n) numbers. */
#ifndef POISE_STM32_HW_H
#define POISE_STM32_HW_H

#include <stdint.h>

/* Clock the pin's port, then set its mode (GPIO_MODE_*), pull (GPIO_PULL_*) and, for
 * GPIO_MODE_AF, its alternate function number. */
void pin_setup(int pin, uint32_t mode, uint32_t pull, uint32_t af);
int pin_read(int pin);
void pin_write(int pin, int high);

/* Base address of TIMn (1..5, 9..11) after switching its clock on. */
uint32_t timer_enable(int n);

/* Enable interrupt position irq at priority 0 (highest) to 15. */
void irq_enable(uint32_t irq, uint32_t priority);

#endif
