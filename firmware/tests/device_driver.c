/* Test driver for the device core: a scripted port (clock, pins and serial line set from
 * stdin) for tests/test_firmware_device.py. Commands, one per line:
 *   t <us>       set the microsecond clock
 *   rx <hex>     the host's bytes arrive; one step of the device runs
 *   sample       the clock jumps to the next sample instant; one step runs
 *   estop <0|1>  the e-stop button; one step runs
 * After power-up and after each command every byte the device wrote is printed as
 * "tx <hex>" (nothing if none), then "end". */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "device.h"
#include "port.h"

static uint64_t now_us;
static int estop;
static uint8_t in_buf[4096], out_buf[8192];
static size_t in_len, in_at, out_len;

uint64_t port_time_us(void) { return now_us; }
int32_t port_cart_counts(void) { return 0; }
int32_t port_pendulum_counts(void) { return 0; }
void port_set_drive(float drive) { (void)drive; }
uint8_t port_switches(void) { return 0; }
int port_estop_pressed(void) { return estop; }
float port_motor_current_a(void) { return NAN; }
float port_supply_v(void) { return NAN; }
int port_driver_fault(void) { return 0; }

size_t port_serial_read(uint8_t *buf, size_t cap)
{
    size_t n = in_len - in_at < cap ? in_len - in_at : cap;
    memcpy(buf, in_buf + in_at, n);
    in_at += n;
    return n;
}

size_t port_serial_write(const uint8_t *buf, size_t n)
{
    if (n > sizeof out_buf - out_len)
        return 0;
    memcpy(out_buf + out_len, buf, n);
    out_len += n;
    return n;
}

static void flush_tx(void)
{
    if (out_len) {
        printf("tx ");
        for (size_t i = 0; i < out_len; i++)
            printf("%02x", out_buf[i]);
        printf("\n");
    }
    out_len = 0;
}

int main(int argc, char **argv)
{
    static char line[8192];
    static poise_device d;
    poise_identity id = {"c-core", 1, 0, 0, 500, 40000.0f, 4096, 0.75f, 12.0f, 0,
                         CAP_LIMIT_SWITCHES | CAP_ESTOP_BUTTON, 0.0f, 0.0f};
    if (argc == 2)
        now_us = strtoull(argv[1], NULL, 0); /* power-up happened this long before t = 0 */
    poise_device_init(&d, &id);
    flush_tx();
    printf("end\n");
    while (fgets(line, sizeof line, stdin)) {
        unsigned v;
        line[strcspn(line, "\r\n")] = 0;
        if (strncmp(line, "t ", 2) == 0) {
            now_us = strtoull(line + 2, NULL, 0);
        } else if (strncmp(line, "rx ", 3) == 0) {
            in_len = in_at = 0;
            for (const char *s = line + 3; s[0] && s[1] && sscanf(s, "%2x", &v) == 1; s += 2)
                in_buf[in_len++] = (uint8_t)v;
            poise_device_step(&d);
        } else if (strcmp(line, "sample") == 0) {
            now_us = d.next_sample_us > now_us ? d.next_sample_us : now_us;
            poise_device_step(&d);
        } else if (strncmp(line, "estop ", 6) == 0) {
            estop = line[6] == '1';
            poise_device_step(&d);
        } else {
            fprintf(stderr, "device_driver: unknown command line '%.40s'\n", line);
            return 2;
        }
        flush_tx();
        printf("end\n");
        fflush(stdout);
    }
    return 0;
}
