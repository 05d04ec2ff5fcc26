#include "messages.h"

#include "crc16.h"
#include "wire.h"

size_t pw_frame_size(uint8_t type)
{
    switch (type) {
    case PW_DEVICE_HELLO: return 54;
    case PW_TELEMETRY: return 41;
    case PW_FAULT_REPORT: return 15;
    case PW_REPLY: return 11;
    case PW_CONFIGURE: return 11;
    case PW_ARM: return 8;
    case PW_DRIVE: return 13;
    case PW_HEARTBEAT: case PW_STOP: case PW_CLEAR_FAULTS: case PW_IDENTIFY: return 7;
    default: return 0;
    }
}

static void encode_hello(const pw_device_hello *h, uint8_t *p)
{
    p[0] = h->protocol_version;
    put_u32(p + 1, h->schema_fingerprint);
    memcpy(p + 5, h->device_id, PW_DEVICE_ID_BYTES);
    p[21] = h->firmware_major;
    p[22] = h->firmware_minor;
    p[23] = h->firmware_patch;
    put_u16(p + 24, h->sample_rate_hz);
    put_f32(p + 26, h->cart_counts_per_m);
    put_u32(p + 30, h->pendulum_counts_per_rev);
    put_f32(p + 34, h->track_length_m);
    put_f32(p + 38, h->drive_limit);
    p[42] = h->drive_kind;
    put_u32(p + 43, h->capabilities);
}

static void decode_hello(const uint8_t *p, pw_device_hello *h)
{
    h->protocol_version = p[0];
    h->schema_fingerprint = get_u32(p + 1);
    memcpy(h->device_id, p + 5, PW_DEVICE_ID_BYTES);
    h->firmware_major = p[21];
    h->firmware_minor = p[22];
    h->firmware_patch = p[23];
    h->sample_rate_hz = get_u16(p + 24);
    h->cart_counts_per_m = get_f32(p + 26);
    h->pendulum_counts_per_rev = get_u32(p + 30);
    h->track_length_m = get_f32(p + 34);
    h->drive_limit = get_f32(p + 38);
    h->drive_kind = p[42];
    h->capabilities = get_u32(p + 43);
}

static void encode_telemetry(const pw_telemetry *t, uint8_t *p)
{
    put_u64(p, t->t_us);
    put_u32(p + 8, (uint32_t)t->cart_counts);
    put_u32(p + 12, (uint32_t)t->pendulum_counts);
    p[16] = t->switches;
    put_u16(p + 17, t->faults);
    p[19] = t->status;
    put_f32(p + 20, t->drive_applied);
    put_f32(p + 24, t->motor_current_a);
    put_f32(p + 28, t->supply_v);
    put_u16(p + 32, t->late_commands);
}

/* Two's complement from the wire without implementation-defined conversion. */
static int32_t as_i32(uint32_t u)
{
    return u <= 0x7FFFFFFFul ? (int32_t)u : -(int32_t)(~u) - 1;
}

static void decode_telemetry(const uint8_t *p, pw_telemetry *t)
{
    t->t_us = get_u64(p);
    t->cart_counts = as_i32(get_u32(p + 8));
    t->pendulum_counts = as_i32(get_u32(p + 12));
    t->switches = p[16];
    t->faults = get_u16(p + 17);
    t->status = p[19];
    t->drive_applied = get_f32(p + 20);
    t->motor_current_a = get_f32(p + 24);
    t->supply_v = get_f32(p + 28);
    t->late_commands = get_u16(p + 32);
}

static void encode_payload(const pw_message *m, uint8_t *p)
{
    switch (m->type) {
    case PW_DEVICE_HELLO: encode_hello(&m->u.hello, p); break;
    case PW_TELEMETRY: encode_telemetry(&m->u.telemetry, p); break;
    case PW_FAULT_REPORT:
        put_u16(p, m->u.fault_report.faults);
        put_u16(p + 2, m->u.fault_report.code);
        put_f32(p + 4, m->u.fault_report.detail);
        break;
    case PW_REPLY:
        p[0] = m->u.reply.for_type;
        put_u16(p + 1, m->u.reply.for_seq);
        p[3] = m->u.reply.result;
        break;
    case PW_CONFIGURE:
        put_u16(p, m->u.configure.sample_rate_hz);
        put_u16(p + 2, m->u.configure.watchdog_ms);
        break;
    case PW_ARM: p[0] = m->u.arm.arm; break;
    case PW_DRIVE:
        put_f32(p, m->u.drive.drive);
        put_u16(p + 4, m->u.drive.answers_seq);
        break;
    default: break; /* no payload */
    }
}

static void decode_payload(const uint8_t *p, pw_message *m)
{
    switch (m->type) {
    case PW_DEVICE_HELLO: decode_hello(p, &m->u.hello); break;
    case PW_TELEMETRY: decode_telemetry(p, &m->u.telemetry); break;
    case PW_FAULT_REPORT:
        m->u.fault_report.faults = get_u16(p);
        m->u.fault_report.code = get_u16(p + 2);
        m->u.fault_report.detail = get_f32(p + 4);
        break;
    case PW_REPLY:
        m->u.reply.for_type = p[0];
        m->u.reply.for_seq = get_u16(p + 1);
        m->u.reply.result = p[3];
        break;
    case PW_CONFIGURE:
        m->u.configure.sample_rate_hz = get_u16(p);
        m->u.configure.watchdog_ms = get_u16(p + 2);
        break;
    case PW_ARM: m->u.arm.arm = p[0]; break;
    case PW_DRIVE:
        m->u.drive.drive = get_f32(p);
        m->u.drive.answers_seq = get_u16(p + 4);
        break;
    default: break;
    }
}

size_t pw_encode(const pw_message *m, uint8_t *out, size_t cap)
{
    size_t size = pw_frame_size(m->type);
    if (size == 0 || cap < size)
        return 0;
    out[0] = PW_VERSION;
    out[1] = 0x00;
    out[2] = m->type;
    put_u16(out + 3, m->seq);
    encode_payload(m, out + PW_HEADER_BYTES);
    put_u16(out + size - PW_CRC_BYTES, crc16_ccitt_false(out, size - PW_CRC_BYTES));
    return size;
}

/* device_id is ASCII (bytes < 0x80); the host rejects anything else (PROTOCOL.md sec. 6). */
static int text_is_ascii(const uint8_t *p, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (p[i] >= 0x80)
            return 0;
    return 1;
}

pw_decode_result pw_decode(const uint8_t *raw, size_t n, pw_message *m)
{
    size_t size;
    if (n < PW_MIN_FRAME)
        return PW_DECODE_RUNT;
    if (crc16_ccitt_false(raw, n - PW_CRC_BYTES) != get_u16(raw + n - PW_CRC_BYTES))
        return PW_DECODE_CRC;
    if (raw[0] != PW_VERSION)
        return PW_DECODE_VERSION;
    if (raw[1] & PW_FLAGS_MUST_UNDERSTAND & (uint8_t)~PW_KNOWN_MUST_UNDERSTAND)
        return PW_DECODE_FLAGS;
    m->type = raw[2];
    m->flags = raw[1];
    m->seq = get_u16(raw + 3);
    size = pw_frame_size(m->type);
    if (size == 0)
        return PW_DECODE_UNKNOWN_TYPE;
    if (n != size)
        return PW_DECODE_BAD_LENGTH;
    if (m->type == PW_DEVICE_HELLO && !text_is_ascii(raw + PW_HEADER_BYTES + 5, PW_DEVICE_ID_BYTES))
        return PW_DECODE_BAD_TEXT;
    decode_payload(raw + PW_HEADER_BYTES, m);
    return PW_DECODE_OK;
}
