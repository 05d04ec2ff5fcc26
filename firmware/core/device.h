/* The device state machine of PROTOCOL.md section 9, on top of the codec and the port.
 *
 * The port calls poise_device_init once at power-up, then poise_device_step from its main
 * loop at least once per timer tick (a tick being well under one sample period). Each step
 * reads the serial line, watches the e-stop, driver and supply, runs the watchdog, and takes
 * a sample when port_time_us() has reached the next sample instant: sampling is paced by the
 * device's own microsecond clock, never by the host. Within a step the sample comes first and
 * the commands read after it, so a Drive read in this step applies from the next sample on.
 * No allocation, no OS. */
#ifndef POISE_DEVICE_H
#define POISE_DEVICE_H

#include <stdint.h>

#include "frame_rx.h"

/* What the device says in its DeviceHello, fixed for a rig. */
typedef struct {
    char device_id[PW_DEVICE_ID_BYTES + 1]; /* 1-16 ASCII characters */
    uint8_t firmware_major, firmware_minor, firmware_patch;
    uint16_t max_sample_rate_hz;
    float cart_counts_per_m;
    uint32_t pendulum_counts_per_rev;
    float track_length_m;
    float drive_limit;        /* |drive| applied is never more than this */
    uint8_t drive_kind;       /* 0 volts, 1 newtons */
    uint32_t capabilities;    /* CAP_* bits of the fitted hardware */
    float supply_min_v, supply_max_v; /* F_SUPPLY outside this range (with CAP_SUPPLY_VOLTAGE) */
} poise_identity;

typedef struct {
    poise_identity id;
    pw_rx rx;
    uint8_t configured, armed, estop_was_pressed, driver_fault_was_on, supply_was_bad;
    uint8_t has_pending;
    uint16_t faults;
    uint16_t sample_rate_hz, watchdog_ms;
    uint32_t period_us;
    uint64_t next_sample_us, last_feed_us;
    float drive_output, pending_drive;
    uint16_t late_commands;
    int32_t sample_seq; /* -1 before the first sample of a stream */
    uint16_t reply_seq, fault_seq;
    uint32_t tx_dropped; /* frames the serial port could not take whole */
} poise_device;

/* Power-up: disarmed, not configured, faults = F_RESET (and F_ESTOP if the button is down),
 * no telemetry; sends one DeviceHello unprompted. */
void poise_device_init(poise_device *d, const poise_identity *id);

/* One pass of the main loop (see above). */
void poise_device_step(poise_device *d);

#endif
