/* Test driver for the firmware codec: reads commands from stdin, one per line, and prints
 * what the core made of them, for tests/test_firmware_codec.py.
 *   crc <hex>   -> "crc XXXX"  (CRC-16/CCITT-FALSE of the bytes)
 *   rx <hex>    -> the bytes fed to a fresh receiver; per decoded message one line
 *                  "msg <raw frame hex> <wire hex> name=value ...", per refused well-framed
 *                  frame "rejected <type> <seq> <result>", then "counters name=value ...". */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "crc16.h"
#include "frame_rx.h"

#define LINE_MAX_BYTES 8192

static size_t parse_hex(const char *s, uint8_t *out, size_t cap)
{
    size_t n = 0;
    unsigned v;
    while (s[0] && s[1] && n < cap && sscanf(s, "%2x", &v) == 1) {
        out[n++] = (uint8_t)v;
        s += 2;
    }
    return n;
}

static void print_hex(const uint8_t *p, size_t n)
{
    for (size_t i = 0; i < n; i++)
        printf("%02x", p[i]);
}

static void print_f32(const char *name, float v)
{
    if (isnan(v))
        printf(" %s=NaN", name);
    else if (isinf(v))
        printf(" %s=%s", name, v > 0 ? "Infinity" : "-Infinity");
    else
        printf(" %s=%.9g", name, (double)v);
}

static void print_fields(const pw_message *m)
{
    printf(" seq=%u", m->seq);
    switch (m->type) {
    case PW_DEVICE_HELLO: {
        const pw_device_hello *h = &m->u.hello;
        printf(" protocol_version=%u schema_fingerprint=%lu device_id=%.16s", h->protocol_version,
               (unsigned long)h->schema_fingerprint, (const char *)h->device_id);
        printf(" firmware_major=%u firmware_minor=%u firmware_patch=%u sample_rate_hz=%u",
               h->firmware_major, h->firmware_minor, h->firmware_patch, h->sample_rate_hz);
        print_f32("cart_counts_per_m", h->cart_counts_per_m);
        printf(" pendulum_counts_per_rev=%lu", (unsigned long)h->pendulum_counts_per_rev);
        print_f32("track_length_m", h->track_length_m);
        print_f32("drive_limit", h->drive_limit);
        printf(" drive_kind=%u capabilities=%lu", h->drive_kind, (unsigned long)h->capabilities);
        break;
    }
    case PW_TELEMETRY: {
        const pw_telemetry *t = &m->u.telemetry;
        printf(" t_us=%llu cart_counts=%ld pendulum_counts=%ld switches=%u faults=%u status=%u",
               (unsigned long long)t->t_us, (long)t->cart_counts, (long)t->pendulum_counts,
               t->switches, t->faults, t->status);
        print_f32("drive_applied", t->drive_applied);
        print_f32("motor_current_a", t->motor_current_a);
        print_f32("supply_v", t->supply_v);
        printf(" late_commands=%u", t->late_commands);
        break;
    }
    case PW_FAULT_REPORT:
        printf(" faults=%u code=%u", m->u.fault_report.faults, m->u.fault_report.code);
        print_f32("detail", m->u.fault_report.detail);
        break;
    case PW_REPLY:
        printf(" for_type=%u for_seq=%u result=%u", m->u.reply.for_type, m->u.reply.for_seq,
               m->u.reply.result);
        break;
    case PW_CONFIGURE:
        printf(" sample_rate_hz=%u watchdog_ms=%u", m->u.configure.sample_rate_hz,
               m->u.configure.watchdog_ms);
        break;
    case PW_ARM: printf(" arm=%u", m->u.arm.arm); break;
    case PW_DRIVE:
        print_f32("drive", m->u.drive.drive);
        printf(" answers_seq=%u", m->u.drive.answers_seq);
        break;
    default: break;
    }
}

static void run_rx(const uint8_t *bytes, size_t n)
{
    static pw_rx rx;
    pw_message m;
    uint8_t result = 0, raw[PW_MAX_FRAME], wire[PW_WIRE_MAX];
    const pw_rx_counters *c = &rx.counters;
    pw_rx_init(&rx);
    for (size_t i = 0; i < n; i++) {
        pw_rx_event e = pw_rx_byte(&rx, bytes[i], &m, &result);
        if (e == PW_RX_MESSAGE) {
            size_t raw_n = pw_encode(&m, raw, sizeof raw);
            uint16_t wire_n = pw_to_wire(&m, wire, sizeof wire);
            printf("msg %u ", m.type);
            print_hex(raw, raw_n);
            printf(" ");
            print_hex(wire, wire_n);
            print_fields(&m);
            printf("\n");
        } else if (e == PW_RX_REJECTED) {
            printf("rejected %u %u %u\n", m.type, m.seq, result);
        }
    }
    printf("counters frames_rx=%lu crc_failures=%lu cobs_errors=%lu runts=%lu oversize=%lu"
           " resyncs=%lu bad_version=%lu unknown_flags=%lu unknown_type=%lu malformed=%lu"
           " gaps=%lu lost_frames=%lu\n",
           (unsigned long)c->frames_rx, (unsigned long)c->crc_failures,
           (unsigned long)c->cobs_errors, (unsigned long)c->runts, (unsigned long)c->oversize,
           (unsigned long)c->resyncs, (unsigned long)c->bad_version,
           (unsigned long)c->unknown_flags, (unsigned long)c->unknown_type,
           (unsigned long)c->malformed, (unsigned long)c->gaps, (unsigned long)c->lost_frames);
}

int main(void)
{
    static char line[LINE_MAX_BYTES];
    static uint8_t bytes[LINE_MAX_BYTES / 2];
    while (fgets(line, sizeof line, stdin)) {
        line[strcspn(line, "\r\n")] = 0;
        if (strncmp(line, "crc ", 4) == 0) {
            size_t n = parse_hex(line + 4, bytes, sizeof bytes);
            printf("crc %04X\n", crc16_ccitt_false(bytes, n));
        } else if (strncmp(line, "rx ", 3) == 0) {
            run_rx(bytes, parse_hex(line + 3, bytes, sizeof bytes));
        } else {
            printf("error: unknown command line '%.40s'\n", line);
        }
        fflush(stdout);
    }
    return 0;
}
