/* The hardware port interface: everything the portable core needs from a board.
 *
 * A port (one per board, or the Linux host port) implements these functions; the core calls
 * nothing else and never allocates. All functions are called from the core's main context
 * (poise_device_init / poise_device_step), never concurrently with each other.
 *
 * Sign conventions (PROTOCOL.md section 6, Telemetry):
 *   - cart counts are positive toward +x (right, seen from the front) and 0 at power-up;
 *   - pendulum counts are positive counter-clockwise seen from the front, 0 at power-up;
 *   - a positive drive pushes the cart toward +x.
 * A port whose wiring counts the other way negates in these functions, not in the core. */
#ifndef POISE_PORT_H
#define POISE_PORT_H

#include <stddef.h>
#include <stdint.h>

/* Microseconds since power-up, monotonic, never wrapping in a rig's lifetime (u64).
 * Telemetry's t_us is this clock at the sample instant. */
uint64_t port_time_us(void);

/* Quadrature counts of the two encoders since power-up (wrapping two's complement). */
int32_t port_cart_counts(void);
int32_t port_pendulum_counts(void);

/* Apply a drive in the unit of DeviceHello.drive_kind (volts: PWM duty and direction from
 * the supply; newtons: force command). The core has already clamped it to +-drive_limit and
 * replaced NaN/infinity by 0; 0 means no torque. Takes effect at once. */
void port_set_drive(float drive);

/* SW_LIMIT_NEG, SW_LIMIT_POS and SW_END_STOP bits as read now (0 when not fitted). */
uint8_t port_switches(void);

/* Nonzero while the e-stop button is pressed (0 when not fitted). The button must also cut
 * motor power in hardware; this input only lets the firmware report and latch it. */
int port_estop_pressed(void);

/* Motor current in A and supply voltage in V, or NaN when not fitted
 * (CAP_MOTOR_CURRENT / CAP_SUPPLY_VOLTAGE in the port's capabilities). */
float port_motor_current_a(void);
float port_supply_v(void);

/* Nonzero while the motor driver reports a fault (over-current, over-temperature). */
int port_driver_fault(void);

/* Serial line. port_serial_read copies up to cap received bytes into buf without blocking and
 * returns how many; port_serial_write queues n bytes for sending without blocking and returns
 * how many it took (the core drops a frame it cannot send whole and counts it). */
size_t port_serial_read(uint8_t *buf, size_t cap);
size_t port_serial_write(const uint8_t *buf, size_t n);

#endif
