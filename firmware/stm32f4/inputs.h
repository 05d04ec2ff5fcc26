/* The rig's inputs: the two encoders, the switches, the e-stop contact and the driver's fault
 * output (port_cart_counts .. port_driver_fault of port.h). */
#ifndef POISE_STM32_INPUTS_H
#define POISE_STM32_INPUTS_H

/* After clock_init: encoder timers counting from 0, input pins, the EXTI edges. */
void inputs_init(void);

/* The EXTI interrupt handler (vector table): notes an e-stop or driver-fault edge. */
void inputs_exti_isr(void);

#endif
