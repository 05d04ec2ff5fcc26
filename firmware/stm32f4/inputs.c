/* Encoders: encoder mode 3 (RM0368 section 13.3.12), counting every edge of both channels
 * (x4), up or down by their phase; the 32-bit counter is the protocol's i32 count as is.
 *
 * Switches are read when the core asks (at the sample instant). The e-stop and the driver fault
 * are read the same way, and each also has an EXTI interrupt on its active edge (RM0368 section
 * 10.2) that records the edge: the next read then reports it even if the input has gone back in
 * the meantime, so a short pulse still latches the fault. */
#include "inputs.h"

#include <math.h>
#include <stdint.h>

#include "board.h"
#include "hw.h"
#include "messages.h"
#include "port.h"
#include "stm32f401.h"

#define EXTI_PRIORITY 0u

static uint32_t cart_timer, pendulum_timer;
static volatile uint8_t estop_edge, fault_edge;

static uint32_t encoder_init(int timer, int pin_a, int pin_b, uint32_t af)
{
    uint32_t t = timer_enable(timer);
    pin_setup(pin_a, GPIO_MODE_AF, GPIO_PULL_UP, af);
    pin_setup(pin_b, GPIO_MODE_AF, GPIO_PULL_UP, af);
    TIM_CCMR(t, 1) = TIM_CCMR_CC1S_TI1 | TIM_CCMR_CC2S_TI2 |
                     TIM_CCMR_IC1F(BOARD_ENCODER_FILTER) | TIM_CCMR_IC2F(BOARD_ENCODER_FILTER);
    TIM_SMCR(t) = TIM_SMCR_ENCODER_MODE_3;
    TIM_ARR(t) = 0xFFFFFFFFu;
    TIM_CNT(t) = 0;
    TIM_CR1(t) = TIM_CR1_CEN;
    return t;
}

/* Route the pin's EXTI line to its port and interrupt on the edge into its active level. */
static void edge_init(int pin, int active)
{
    uint32_t line = (uint32_t)pin % 16u, shift = 4u * (line % 4u);
    SYSCFG_EXTICR(line) = (SYSCFG_EXTICR(line) & ~(0xFu << shift)) | ((uint32_t)pin / 16u) << shift;
    if (active)
        EXTI_RTSR |= 1u << line;
    else
        EXTI_FTSR |= 1u << line;
    EXTI_IMR |= 1u << line;
    irq_enable(line <= 4u ? IRQ_EXTI0 + line : line <= 9u ? IRQ_EXTI9_5 : IRQ_EXTI15_10,
               EXTI_PRIORITY);
}

static void input_init(int pin)
{
    if (pin != PIN_NONE)
        pin_setup(pin, GPIO_MODE_INPUT, BOARD_INPUT_PULL, 0);
}

void inputs_init(void)
{
    cart_timer = encoder_init(BOARD_CART_TIM, BOARD_CART_A, BOARD_CART_B, BOARD_CART_AF);
    pendulum_timer = encoder_init(BOARD_PENDULUM_TIM, BOARD_PENDULUM_A, BOARD_PENDULUM_B,
                                  BOARD_PENDULUM_AF);
    input_init(BOARD_LIMIT_NEG);
    input_init(BOARD_LIMIT_POS);
    input_init(BOARD_END_STOP);
    input_init(BOARD_ESTOP);
    input_init(BOARD_DRIVER_FAULT);
    RCC_APB2ENR |= RCC_APB2ENR_SYSCFG;
    (void)RCC_APB2ENR;
    if (BOARD_ESTOP != PIN_NONE)
        edge_init(BOARD_ESTOP, BOARD_ESTOP_ACTIVE);
    if (BOARD_DRIVER_FAULT != PIN_NONE)
        edge_init(BOARD_DRIVER_FAULT, BOARD_DRIVER_FAULT_ACTIVE);
}

void inputs_exti_isr(void)
{
    uint32_t pending = EXTI_PR;
    EXTI_PR = pending; /* clear what was seen; write 1 clears */
    if (BOARD_ESTOP != PIN_NONE && (pending & (1u << (BOARD_ESTOP % 16))))
        estop_edge = 1;
    if (BOARD_DRIVER_FAULT != PIN_NONE && (pending & (1u << (BOARD_DRIVER_FAULT % 16))))
        fault_edge = 1;
}

/* The 32-bit count, negated (wrapping) when the board's sign is -1. */
static int32_t signed_count(uint32_t timer, int sign)
{
    uint32_t count = TIM_CNT(timer);
    return (int32_t)(sign < 0 ? 0u - count : count);
}

int32_t port_cart_counts(void) { return signed_count(cart_timer, BOARD_CART_SIGN); }
int32_t port_pendulum_counts(void) { return signed_count(pendulum_timer, BOARD_PENDULUM_SIGN); }

static int tripped(int pin, int active) { return pin != PIN_NONE && pin_read(pin) == active; }

uint8_t port_switches(void)
{
    return (uint8_t)((tripped(BOARD_LIMIT_NEG, BOARD_SWITCH_ACTIVE) ? SW_LIMIT_NEG : 0u) |
                     (tripped(BOARD_LIMIT_POS, BOARD_SWITCH_ACTIVE) ? SW_LIMIT_POS : 0u) |
                     (tripped(BOARD_END_STOP, BOARD_SWITCH_ACTIVE) ? SW_END_STOP : 0u));
}

/* Active now, or an edge into the active level since the last call (the flag is taken, so
 * it reports a pulse once). */
static int active_or_edge(int pin, int active, volatile uint8_t *edge)
{
    int seen = *edge;
    if (seen)
        *edge = 0; /* only when set: an edge arriving between the read and a write would be lost */
    return seen || tripped(pin, active);
}

int port_estop_pressed(void) { return active_or_edge(BOARD_ESTOP, BOARD_ESTOP_ACTIVE, &estop_edge); }
int port_driver_fault(void)
{
    return active_or_edge(BOARD_DRIVER_FAULT, BOARD_DRIVER_FAULT_ACTIVE, &fault_edge);
}

/* No current or supply sense on this board (the capabilities leave them out). */
float port_motor_current_a(void) { return NAN; }
float port_supply_v(void) { return NAN; }
