/* The motor: PWM duty on one timer channel and a direction pin (port_set_drive of port.h). */
#ifndef POISE_STM32_MOTOR_H
#define POISE_STM32_MOTOR_H

/* After clock_init: timer and pins, duty 0. */
void motor_init(void);

/* Force the PWM pin low at once, whatever state the timer is in: for the fault handlers. */
void motor_off(void);

#endif
