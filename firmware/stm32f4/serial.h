/* The host's serial line on a USART, through interrupt-driven ring buffers both ways
 * (port_serial_read and port_serial_write of port.h). */
#ifndef POISE_STM32_SERIAL_H
#define POISE_STM32_SERIAL_H

/* After clock_init: pins, baud rate, receive interrupt on. */
void serial_init(void);

/* The USART's interrupt handler (vector table). */
void serial_isr(void);

#endif
