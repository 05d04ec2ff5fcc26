/* The STM32F4 port's main loop: bring the board up, start the independent watchdog, then run
 * the portable core (firmware/core) for ever. The port.h functions live in clock.c, serial.c,
 * motor.c and inputs.c; every board constant in board.h. */
#include <stdint.h>

#include "board.h"
#include "clock.h"
#include "device.h"
#include "inputs.h"
#include "messages.h"
#include "motor.h"
#include "port.h"
#include "serial.h"
#include "stm32f401.h"

#define LSI_HZ 32000u         /* nominal; RM0368 gives 17..47 kHz */
#define IWDG_PRESCALER_CODE 3u /* LSI / 32: 1 kHz nominal, so the reload is in ms */

#define FITTED(pin) ((pin) != PIN_NONE)
#define CAPABILITIES                                                                          \
    ((FITTED(BOARD_LIMIT_NEG) || FITTED(BOARD_LIMIT_POS) || FITTED(BOARD_END_STOP)           \
          ? CAP_LIMIT_SWITCHES                                                               \
          : 0u) |                                                                            \
     (FITTED(BOARD_ESTOP) ? CAP_ESTOP_BUTTON : 0u))

#if BOARD_IWDG_MS < 1 || BOARD_IWDG_MS > 4095
#error "BOARD_IWDG_MS must be 1..4095 (the 12-bit reload at 1 kHz)"
#endif

static void watchdog_start(void)
{
    DBGMCU_APB1_FZ |= DBGMCU_APB1_FZ_IWDG_STOP;
    IWDG_KR = IWDG_KR_START;
    IWDG_KR = IWDG_KR_UNLOCK;
    IWDG_PR = IWDG_PRESCALER_CODE;
    IWDG_RLR = BOARD_IWDG_MS * (LSI_HZ / 32u) / 1000u;
    while (IWDG_SR != 0u) { /* RM0368 section 15.4.4: wait for both updates */
    }
    IWDG_KR = IWDG_KR_RELOAD;
}

int main(void)
{
    static poise_device device;
    static const poise_identity identity = {
        .device_id = BOARD_DEVICE_ID,
        .firmware_major = BOARD_FIRMWARE_MAJOR,
        .firmware_minor = BOARD_FIRMWARE_MINOR,
        .firmware_patch = BOARD_FIRMWARE_PATCH,
        .max_sample_rate_hz = BOARD_MAX_SAMPLE_RATE_HZ,
        .cart_counts_per_m = BOARD_CART_COUNTS_PER_M,
        .pendulum_counts_per_rev = BOARD_PENDULUM_COUNTS_PER_REV,
        .track_length_m = BOARD_TRACK_LENGTH_M,
        .drive_limit = BOARD_DRIVE_LIMIT_V,
        .drive_kind = 0, /* volts */
        .capabilities = CAPABILITIES,
    };
    static const uint8_t delimiter = 0x00;
    clock_init();
    motor_init();
    inputs_init();
    serial_init();
    watchdog_start();
    /* PROTOCOL.md section 2: one 0x00 first ends whatever the line carried at power-up. */
    port_serial_write(&delimiter, 1);
    poise_device_init(&device, &identity);
    for (;;) {
        poise_device_step(&device);
        IWDG_KR = IWDG_KR_RELOAD;
    }
}
