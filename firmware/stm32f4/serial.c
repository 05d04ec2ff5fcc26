/* Each ring has one writer and one reader: the receive ring is written by the interrupt and
 * read by the main loop, the transmit ring the other way round. head and tail are free-running
 * 16-bit counters (the ring size divides 65536), so head - tail is the fill level and every
 * byte of the ring is usable. The data bytes are volatile too, so the compiler cannot move a
 * byte's store past the head update that publishes it. */
#include "serial.h"

#include "board.h"
#include "clock.h"
#include "hw.h"
#include "port.h"
#include "stm32f401.h"

#if BOARD_SERIAL_RING_BYTES & (BOARD_SERIAL_RING_BYTES - 1u) || BOARD_SERIAL_RING_BYTES > 32768u
#error "BOARD_SERIAL_RING_BYTES must be a power of two, at most 32768"
#endif
#define RING_MASK (BOARD_SERIAL_RING_BYTES - 1u)

#if BOARD_UART == 1
#define UART_BASE USART1_BASE
#define UART_IRQ IRQ_USART1
#define UART_CLOCK_ON() (RCC_APB2ENR |= RCC_APB2ENR_USART1, (void)RCC_APB2ENR)
#define UART_BUS_HZ CPU_HZ
#elif BOARD_UART == 2
#define UART_BASE USART2_BASE
#define UART_IRQ IRQ_USART2
#define UART_CLOCK_ON() (RCC_APB1ENR |= RCC_APB1ENR_USART2, (void)RCC_APB1ENR)
#define UART_BUS_HZ APB1_HZ
#else
#define UART_BASE USART6_BASE
#define UART_IRQ IRQ_USART6
#define UART_CLOCK_ON() (RCC_APB2ENR |= RCC_APB2ENR_USART6, (void)RCC_APB2ENR)
#define UART_BUS_HZ CPU_HZ
#endif
#define UART_IRQ_PRIORITY 2u /* below the e-stop and driver-fault edges */

typedef struct {
    volatile uint8_t bytes[BOARD_SERIAL_RING_BYTES];
    volatile uint16_t head, tail; /* written at head, read at tail */
} ring;

static ring rx, tx;

static uint16_t ring_used(const ring *r) { return (uint16_t)(r->head - r->tail); }

void serial_init(void)
{
    UART_CLOCK_ON();
    pin_setup(BOARD_UART_TX, GPIO_MODE_AF, GPIO_PULL_NONE, BOARD_UART_AF);
    pin_setup(BOARD_UART_RX, GPIO_MODE_AF, GPIO_PULL_UP, BOARD_UART_AF);
    /* 16x oversampling: BRR holds bus clock / baud as 12.4 fixed point (RM0368 section 19.3.4),
     * which is the quotient rounded to an integer. 8 data bits, no parity, 1 stop bit. */
    USART_BRR(UART_BASE) = (UART_BUS_HZ + BOARD_BAUD / 2u) / BOARD_BAUD;
    USART_CR1(UART_BASE) = USART_CR1_UE | USART_CR1_TE | USART_CR1_RE | USART_CR1_RXNEIE;
    irq_enable(UART_IRQ, UART_IRQ_PRIORITY);
}

void serial_isr(void)
{
    uint32_t sr = USART_SR(UART_BASE);
    if (sr & (USART_SR_RXNE | USART_SR_ORE)) {
        /* Reading DR after SR also clears an overrun, framing or noise flag (RM0368 19.6.1). */
        uint8_t byte = (uint8_t)USART_DR(UART_BASE);
        if (ring_used(&rx) < BOARD_SERIAL_RING_BYTES) {
            rx.bytes[rx.head & RING_MASK] = byte;
            rx.head++;
        } /* else the byte is lost: the receiver counts the broken frame (PROTOCOL.md 3.1) */
    }
    if ((sr & USART_SR_TXE) && (USART_CR1(UART_BASE) & USART_CR1_TXEIE)) {
        if (ring_used(&tx) == 0u) {
            USART_CR1(UART_BASE) &= ~USART_CR1_TXEIE;
        } else {
            USART_DR(UART_BASE) = tx.bytes[tx.tail & RING_MASK];
            tx.tail++;
        }
    }
}

size_t port_serial_read(uint8_t *buf, size_t cap)
{
    size_t n = 0;
    while (n < cap && ring_used(&rx) > 0u) {
        buf[n++] = rx.bytes[rx.tail & RING_MASK];
        rx.tail++;
    }
    return n;
}

/* All or nothing: a frame that does not fit whole is not started, so no half frame goes out
 * (the core counts it as dropped). */
size_t port_serial_write(const uint8_t *buf, size_t n)
{
    if (n > BOARD_SERIAL_RING_BYTES - ring_used(&tx))
        return 0;
    for (size_t i = 0; i < n; i++) {
        tx.bytes[tx.head & RING_MASK] = buf[i];
        tx.head++;
    }
    USART_CR1(UART_BASE) |= USART_CR1_TXEIE; /* the interrupt sends, and stops when empty */
    return n;
}
