/* Benchmark driver for the firmware core (bench/bench_firmware_core.py builds and runs it).
 *
 * A fake port behind port.h: the clock is a variable, the encoders, switches and drive are
 * constants or sinks, and the serial line is a buffer. After power-up the driver configures
 * the device (1000 Hz, watchdog 50 ms), clears F_RESET and arms it, then runs N samples: in
 * each, the clock jumps to the next sample instant and one Drive frame answering the newest
 * Telemetry is waiting on the serial line, so one poise_device_step takes the sample (one
 * Telemetry out) and reads the Drive, as on a rig whose host keeps up.
 *
 * Usage: firmware_core_driver N
 * Prints "samples N tx_bytes B late L faults 0xF armed A ns_per_sample T". The Drive frames
 * are encoded before the sample loop, so the loop runs only the core and the fake port;
 * callgrind counts it with --toggle-collect=poise_device_step. */
#define _POSIX_C_SOURCE 199309L /* clock_gettime */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "device.h"
#include "port.h"

#define DRIVE_WIRE 15u /* a Drive on the wire: 13-byte frame, COBS + 1, delimiter + 1 */

static uint64_t now_us = 1000000u; /* one second after power-up */
static const uint8_t *in_at, *in_end;
static size_t tx_bytes;
static float drive_set;

uint64_t port_time_us(void) { return now_us; }
int32_t port_cart_counts(void) { return -1500; }
int32_t port_pendulum_counts(void) { return 2048; }
void port_set_drive(float drive) { drive_set = drive; }
uint8_t port_switches(void) { return 0; }
int port_estop_pressed(void) { return 0; }
float port_motor_current_a(void) { return NAN; }
float port_supply_v(void) { return NAN; }
int port_driver_fault(void) { return 0; }

size_t port_serial_read(uint8_t *buf, size_t cap)
{
    size_t n = (size_t)(in_end - in_at) < cap ? (size_t)(in_end - in_at) : cap;
    memcpy(buf, in_at, n);
    in_at += n;
    return n;
}

size_t port_serial_write(const uint8_t *buf, size_t n)
{
    (void)buf; /* a UART would start sending here; the bench only counts the bytes */
    tx_bytes += n;
    return n;
}

/* One step with these host bytes waiting on the serial line. */
static void step_with(poise_device *d, const uint8_t *bytes, size_t n)
{
    in_at = bytes;
    in_end = bytes + n;
    poise_device_step(d);
}

static size_t wire(pw_message *m, uint8_t *out)
{
    return pw_to_wire(m, out, PW_WIRE_MAX);
}

/* Configure, ClearFaults (F_RESET), Arm: the device is armed with no fault latched. */
static void set_up(poise_device *d)
{
    uint8_t buf[PW_WIRE_MAX];
    pw_message m;
    memset(&m, 0, sizeof m);
    m.type = PW_CONFIGURE;
    m.u.configure.sample_rate_hz = 1000;
    m.u.configure.watchdog_ms = 50;
    step_with(d, buf, wire(&m, buf));
    m.type = PW_CLEAR_FAULTS; /* this step also takes sample 0 */
    step_with(d, buf, wire(&m, buf));
    m.type = PW_ARM;
    m.u.arm.arm = 1;
    step_with(d, buf, wire(&m, buf));
}

int main(int argc, char **argv)
{
    static poise_device d;
    poise_identity id = {"bench-core", 1, 0, 0, 1000, 40000.0f, 4096, 0.75f, 12.0f, 0,
                         CAP_LIMIT_SWITCHES, 0.0f, 0.0f};
    char *end;
    long samples = argc == 2 ? strtol(argv[1], &end, 10) : -1;
    uint8_t *drives;
    struct timespec start, stop;
    double ns;
    if (argc != 2 || *end != '\0' || samples < 0 || samples > 10000000) {
        fprintf(stderr, "firmware_core_driver: give the sample count N (0..10000000) as the one argument\n");
        return 2;
    }
    drives = malloc((size_t)samples * DRIVE_WIRE + 1u);
    if (drives == NULL) {
        fprintf(stderr, "firmware_core_driver: no memory for %ld Drive frames\n", samples);
        return 1;
    }
    for (long i = 0; i < samples; i++) {
        /* loop sample i is Telemetry seq i + 1 (seq 0 went out during set-up) */
        pw_message m;
        m.type = PW_DRIVE;
        m.seq = (uint16_t)i;
        m.u.drive.drive = (i & 1) ? 1.5f : -1.5f;
        m.u.drive.answers_seq = (uint16_t)(i + 1);
        if (wire(&m, drives + i * DRIVE_WIRE) != DRIVE_WIRE) {
            fprintf(stderr, "firmware_core_driver: a Drive frame is not %u bytes on the wire\n", DRIVE_WIRE);
            return 1;
        }
    }
    poise_device_init(&d, &id);
    set_up(&d);
    tx_bytes = 0;
    clock_gettime(CLOCK_MONOTONIC, &start);
    for (long i = 0; i < samples; i++) {
        now_us = d.next_sample_us;
        step_with(&d, drives + i * DRIVE_WIRE, DRIVE_WIRE);
    }
    clock_gettime(CLOCK_MONOTONIC, &stop);
    ns = (double)(stop.tv_sec - start.tv_sec) * 1e9 + (double)(stop.tv_nsec - start.tv_nsec);
    printf("samples %ld tx_bytes %zu late %u faults 0x%04x armed %u drive %g ns_per_sample %.1f\n",
           samples, tx_bytes, d.late_commands, d.faults, d.armed, (double)drive_set,
           samples ? ns / (double)samples : 0.0);
    free(drives);
    return 0;
}
