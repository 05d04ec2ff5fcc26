/* Everything a lab edits to fit this port to its board and rig: pins, timers, clock, serial
 * line, the rig's numbers for DeviceHello, and the signs of the encoders and the motor.
 * No other file of firmware/stm32f4 names a pin, a timer or a rig constant.
 *
 * As shipped: an STM32F401CC "Black Pill"-class board (25 MHz crystal, 256 KiB flash,
 * 64 KiB RAM) with a USB-serial adapter on USART1, two quadrature encoders, a DC motor on an
 * H-bridge driven by PWM plus a direction pin, two limit switches, an end stop, an e-stop
 * contact and the driver's fault output. An STM32F411 board runs the same build (it has more
 * flash and RAM than the F401CC the linker script assumes).
 *
 * Pin, alternate-function and timer choices follow the alternate function mapping table of the
 * STM32F401xB/C datasheet (DS9716, section 4, "Pinouts and pin description"); check a new
 * choice against it. */
#ifndef POISE_BOARD_H
#define POISE_BOARD_H

#include "stm32f401.h" /* GPIO_PULL_* */

/* A pin: port letter and number. PIN(B, 6) is PB6. PIN_NONE: not fitted. */
#define PORT_A 0
#define PORT_B 1
#define PORT_C 2
#define PIN(port, n) (PORT_##port * 16 + (n))
#define PIN_NONE (-1)

/* ---- Clock ---- */
/* The board's crystal in Hz (WeAct-style Black Pill boards: 25 MHz), or 0 for none. Either way
 * the PLL makes an 84 MHz system clock (the F401's maximum); without a crystal, or when it does
 * not start, from the internal 16 MHz RC oscillator (1 % accuracy, still fine for the UART). */
#define BOARD_HSE_HZ 25000000u

/* ---- Serial line to the host: a USB-serial adapter (3.3 V levels) on a USART ---- */
#define BOARD_UART 1             /* USART1, 2 or 6 */
#define BOARD_UART_TX PIN(A, 9)  /* to the adapter's RX */
#define BOARD_UART_RX PIN(A, 10) /* to the adapter's TX */
#define BOARD_UART_AF 7          /* AF7 for USART1 and USART2, AF8 for USART6 */
/* The host's rate (daemon/link/port.py, BAUD_RATE); 84 MHz / 921600 gives 923 077 baud, +0.16 %.
 * At 1000 samples/s the device sends 43 kB/s (PROTOCOL.md section 1): at least 460800 baud. */
#define BOARD_BAUD 921600u
#define BOARD_SERIAL_RING_BYTES 512u /* each way; a power of two */

/* ---- Encoders: quadrature A/B on channels 1 and 2 of a timer in encoder mode (x4) ----
 * Only TIM2 and TIM5 have 32-bit counters, so the counts wrap as the protocol's i32 without
 * software help; keep both encoders on them. The input filter (0..15, RM0368 TIMx_CCMR1 ICxF)
 * ignores pulses shorter than its setting: 3 is 8 samples at 84 MHz, about 0.1 us. Encoders
 * with 5 V outputs need 5 V tolerant pins (datasheet pin table) or a level shifter. */
#define BOARD_CART_TIM 2
#define BOARD_CART_A PIN(A, 15) /* TIM2_CH1 (JTDI after reset; SWD keeps working) */
#define BOARD_CART_B PIN(B, 3)  /* TIM2_CH2 (JTDO/SWO after reset) */
#define BOARD_CART_AF 1
#define BOARD_PENDULUM_TIM 5
#define BOARD_PENDULUM_A PIN(A, 0) /* TIM5_CH1; on Black Pill boards also the KEY button: leave it */
#define BOARD_PENDULUM_B PIN(A, 1) /* TIM5_CH2 */
#define BOARD_PENDULUM_AF 2
#define BOARD_ENCODER_FILTER 3
/* +1 or -1 so that the counts run as port.h says: cart positive toward +x (right, seen from the
 * front), pendulum positive counter-clockwise seen from the front. Swapping A and B does the
 * same in the wiring. */
#define BOARD_CART_SIGN (+1)
#define BOARD_PENDULUM_SIGN (+1)

/* ---- Motor: PWM on one timer channel plus a direction pin, for an H-bridge ----
 * The bridge's PWM input needs a pull-down resistor: during reset, and if the firmware stops,
 * the pin floats. */
#define BOARD_MOTOR_TIM 4             /* TIM1..5 or 9..11; TIM1 needs its MOE bit, done in motor.c */
#define BOARD_MOTOR_CHANNEL 1
#define BOARD_MOTOR_PWM PIN(B, 6)     /* TIM4_CH1 */
#define BOARD_MOTOR_PWM_AF 2
#define BOARD_MOTOR_DIR PIN(B, 7)     /* high: the bridge's forward direction */
#define BOARD_MOTOR_PWM_HZ 20000u     /* above hearing; the timer counts at 84 MHz */
/* Drive is in volts (DeviceHello.drive_kind 0): duty = |drive| / BOARD_SUPPLY_V. */
#define BOARD_SUPPLY_V 12.0f
#define BOARD_MOTOR_SIGN (+1)         /* -1 if a positive duty pushes the cart toward -x */

/* ---- Switch inputs (PIN_NONE: not fitted) ----
 * ACTIVE is the level read while the switch is tripped. As shipped every input has the MCU's
 * pull-up and the switches are normally closed to ground, so that a broken wire reads as
 * tripped; the driver's fault output is open-drain, low on fault. */
#define BOARD_LIMIT_NEG PIN(B, 12)
#define BOARD_LIMIT_POS PIN(B, 13)
#define BOARD_END_STOP PIN(B, 14)
#define BOARD_SWITCH_ACTIVE 1
/* The e-stop contact only reports: the button itself must cut the motor supply (PROTOCOL.md
 * section 9.3). E-stop and driver fault also raise an EXTI interrupt on their active edge, so a
 * press or fault pulse shorter than one main-loop pass is still latched. They need different
 * pin numbers (one EXTI line each). */
#define BOARD_ESTOP PIN(B, 15)
#define BOARD_ESTOP_ACTIVE 1
#define BOARD_DRIVER_FAULT PIN(B, 10) /* PB11 does not exist on the 48-pin F401CC */
#define BOARD_DRIVER_FAULT_ACTIVE 0
#define BOARD_INPUT_PULL GPIO_PULL_UP

/* ---- The rig, as DeviceHello reports it (PROTOCOL.md section 6) ----
 * As shipped, the numbers of configs/kestrel-1.toml. The host refuses to arm while counts per
 * metre or revolution, track length or drive kind disagree with the rig's config, or the
 * config's drive limit exceeds this one. */
#define BOARD_DEVICE_ID "kestrel-1"       /* 1-16 ASCII characters; the config's [rig] id */
#define BOARD_FIRMWARE_MAJOR 1            /* this firmware's version, reported as is */
#define BOARD_FIRMWARE_MINOR 0
#define BOARD_FIRMWARE_PATCH 0
#define BOARD_MAX_SAMPLE_RATE_HZ 1000u
#define BOARD_CART_COUNTS_PER_M 173852.0f
#define BOARD_PENDULUM_COUNTS_PER_REV 4096u
#define BOARD_TRACK_LENGTH_M 0.90f
#define BOARD_DRIVE_LIMIT_V 12.0f         /* at most BOARD_SUPPLY_V */

/* ---- Independent watchdog: resets the chip (and so stops the motor) if the main loop hangs ----
 * Counts the ~32 kHz LSI, which RM0368 gives only to within 17..47 kHz: 100 ms nominal is 68 to
 * 188 ms. The host then finds F_RESET latched. */
#define BOARD_IWDG_MS 100u

#if BOARD_CART_TIM != 2 && BOARD_CART_TIM != 5
#error "BOARD_CART_TIM must be TIM2 or TIM5 (the 32-bit counters)"
#endif
#if BOARD_PENDULUM_TIM != 2 && BOARD_PENDULUM_TIM != 5
#error "BOARD_PENDULUM_TIM must be TIM2 or TIM5 (the 32-bit counters)"
#endif
#if BOARD_MOTOR_TIM < 1 || (BOARD_MOTOR_TIM > 5 && BOARD_MOTOR_TIM < 9) || BOARD_MOTOR_TIM > 11
#error "BOARD_MOTOR_TIM must be TIM1..5 or TIM9..11"
#endif
#if BOARD_UART != 1 && BOARD_UART != 2 && BOARD_UART != 6
#error "BOARD_UART must be USART1, 2 or 6"
#endif
#if BOARD_ESTOP != PIN_NONE && BOARD_DRIVER_FAULT != PIN_NONE && \
    BOARD_ESTOP % 16 == BOARD_DRIVER_FAULT % 16
#error "BOARD_ESTOP and BOARD_DRIVER_FAULT need different pin numbers (EXTI lines)"
#endif

#endif
