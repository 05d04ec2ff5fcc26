#include "device.h"

#include <math.h>
#include <string.h>

#include "port.h"

static void send(poise_device *d, const pw_message *m)
{
    uint8_t wire[PW_WIRE_MAX];
    uint16_t n = pw_to_wire(m, wire, sizeof wire);
    if (port_serial_write(wire, n) != n)
        d->tx_dropped++;
}

/* seq: the Identify's it answers, or PW_UNPROMPTED_HELLO_SEQ after power-up (section 6). */
static void send_hello(poise_device *d, uint16_t seq)
{
    pw_message m;
    pw_device_hello *h = &m.u.hello;
    memset(&m, 0, sizeof m);
    m.type = PW_DEVICE_HELLO;
    m.seq = seq;
    h->protocol_version = PW_VERSION;
    h->schema_fingerprint = PW_SCHEMA_FINGERPRINT;
    memcpy(h->device_id, d->id.device_id, strlen(d->id.device_id));
    h->firmware_major = d->id.firmware_major;
    h->firmware_minor = d->id.firmware_minor;
    h->firmware_patch = d->id.firmware_patch;
    h->sample_rate_hz = d->id.max_sample_rate_hz;
    h->cart_counts_per_m = d->id.cart_counts_per_m;
    h->pendulum_counts_per_rev = d->id.pendulum_counts_per_rev;
    h->track_length_m = d->id.track_length_m;
    h->drive_limit = d->id.drive_limit;
    h->drive_kind = d->id.drive_kind;
    h->capabilities = d->id.capabilities;
    send(d, &m);
}

static void reply(poise_device *d, uint8_t for_type, uint16_t for_seq, uint8_t result)
{
    pw_message m;
    m.type = PW_REPLY;
    m.seq = d->reply_seq++;
    m.u.reply.for_type = for_type;
    m.u.reply.for_seq = for_seq;
    m.u.reply.result = result;
    send(d, &m);
}

/* Zero drive at once and disarm (Stop, disarm, any new fault: section 9.2). */
static void cut_drive(poise_device *d)
{
    d->armed = 0;
    d->drive_output = 0.0f;
    d->has_pending = 0;
    port_set_drive(0.0f);
}

static void latch_fault(poise_device *d, uint16_t bit, float detail)
{
    pw_message m;
    cut_drive(d);
    if (d->faults & bit)
        return;
    d->faults |= bit;
    m.type = PW_FAULT_REPORT;
    m.seq = d->fault_seq++;
    m.u.fault_report.faults = d->faults;
    m.u.fault_report.code = bit;
    m.u.fault_report.detail = detail;
    send(d, &m);
}

static int supply_out_of_range(const poise_device *d)
{
    float v;
    if (!(d->id.capabilities & CAP_SUPPLY_VOLTAGE))
        return 0;
    v = port_supply_v();
    return !(v >= d->id.supply_min_v && v <= d->id.supply_max_v);
}

void poise_device_init(poise_device *d, const poise_identity *id)
{
    memset(d, 0, sizeof *d);
    d->id = *id;
    pw_rx_init(&d->rx);
    port_set_drive(0.0f);
    d->estop_was_pressed = (id->capabilities & CAP_ESTOP_BUTTON) && port_estop_pressed();
    d->faults = (uint16_t)(F_RESET | (d->estop_was_pressed ? F_ESTOP : 0u));
    d->sample_seq = -1;
    send_hello(d, PW_UNPROMPTED_HELLO_SEQ);
}

/* Clamp to +-drive_limit; NaN or infinite counts as 0 (section 6, Drive). */
static float clamp_drive(const poise_device *d, float drive)
{
    float limit = d->id.drive_limit;
    if (!isfinite(drive))
        return 0.0f;
    return drive > limit ? limit : drive < -limit ? -limit : drive;
}

static void on_drive(poise_device *d, const pw_drive *drive, uint64_t now)
{
    uint16_t behind;
    if (!d->configured)
        return;
    d->pending_drive = clamp_drive(d, drive->drive);
    d->has_pending = 1;
    d->last_feed_us = now;
    behind = (uint16_t)((uint16_t)d->sample_seq - drive->answers_seq);
    if (behind != 0 && behind < 0x8000u)
        d->late_commands++; /* late: a newer Telemetry has gone out (section 8.2) */
}

static void on_configure(poise_device *d, const pw_message *m, uint64_t now)
{
    uint16_t rate = m->u.configure.sample_rate_hz;
    if (d->armed) {
        reply(d, m->type, m->seq, PW_NOT_NOW);
        return;
    }
    if (rate < 1 || rate > d->id.max_sample_rate_hz || m->u.configure.watchdog_ms < 1) {
        reply(d, m->type, m->seq, PW_OUT_OF_RANGE);
        return;
    }
    d->sample_rate_hz = rate;
    d->watchdog_ms = m->u.configure.watchdog_ms;
    reply(d, m->type, m->seq, PW_ACCEPTED);
    d->configured = 1;
    d->period_us = (1000000u + rate / 2u) / rate;
    d->sample_seq = -1;
    d->next_sample_us = now; /* the first sample of the new stream is taken at once */
    d->last_feed_us = now;
}

static void on_arm(poise_device *d, const pw_message *m)
{
    uint8_t arm = m->u.arm.arm, result = PW_ACCEPTED;
    if (arm > 1)
        result = PW_OUT_OF_RANGE;
    else if (arm == 0)
        cut_drive(d);
    else if (!d->configured)
        result = PW_NOT_NOW;
    else if (d->faults)
        result = PW_FAULT_LATCHED;
    else
        d->armed = 1;
    reply(d, m->type, m->seq, result);
}

static void on_clear_faults(poise_device *d, const pw_message *m)
{
    uint16_t remain = 0;
    if (d->estop_was_pressed)
        remain |= F_ESTOP;
    if (port_driver_fault())
        remain |= F_DRIVER;
    if (supply_out_of_range(d))
        remain |= F_SUPPLY;
    d->faults &= remain;
    reply(d, m->type, m->seq, d->faults ? PW_FAULT_LATCHED : PW_ACCEPTED);
}

static void on_message(poise_device *d, const pw_message *m, uint64_t now)
{
    switch (m->type) {
    case PW_DRIVE: on_drive(d, &m->u.drive, now); break;
    case PW_HEARTBEAT: if (d->configured) d->last_feed_us = now; break;
    case PW_CONFIGURE: on_configure(d, m, now); break;
    case PW_ARM: on_arm(d, m); break;
    case PW_STOP: cut_drive(d); reply(d, m->type, m->seq, PW_ACCEPTED); break;
    case PW_CLEAR_FAULTS: on_clear_faults(d, m); break;
    case PW_IDENTIFY: send_hello(d, m->seq); break;
    default: reply(d, m->type, m->seq, PW_UNKNOWN_TYPE); break; /* a device-to-host type */
    }
}

static void read_serial(poise_device *d)
{
    uint8_t buf[64], result;
    size_t n;
    pw_message m;
    while ((n = port_serial_read(buf, sizeof buf)) > 0) {
        for (size_t i = 0; i < n; i++) {
            pw_rx_event e = pw_rx_byte(&d->rx, buf[i], &m, &result);
            if (e == PW_RX_MESSAGE)
                on_message(d, &m, port_time_us());
            else if (e == PW_RX_REJECTED)
                reply(d, m.type, m.seq, result);
        }
    }
}

static void watch_inputs(poise_device *d)
{
    int pressed = (d->id.capabilities & CAP_ESTOP_BUTTON) && port_estop_pressed();
    int driver = port_driver_fault();
    int supply = supply_out_of_range(d);
    if (pressed && !d->estop_was_pressed)
        latch_fault(d, F_ESTOP, NAN);
    if (driver && !d->driver_fault_was_on)
        latch_fault(d, F_DRIVER, port_motor_current_a());
    if (supply && !d->supply_was_bad)
        latch_fault(d, F_SUPPLY, port_supply_v());
    d->estop_was_pressed = (uint8_t)pressed;
    d->driver_fault_was_on = (uint8_t)driver;
    d->supply_was_bad = (uint8_t)supply;
}

static void take_sample(poise_device *d, uint64_t t_us)
{
    pw_message m;
    pw_telemetry *t = &m.u.telemetry;
    if (!d->armed)
        d->drive_output = 0.0f;
    else if (d->has_pending)
        d->drive_output = d->pending_drive;
    d->has_pending = 0;
    port_set_drive(d->drive_output);
    d->sample_seq = (int32_t)(uint16_t)(d->sample_seq + 1);
    m.type = PW_TELEMETRY;
    m.seq = (uint16_t)d->sample_seq;
    t->t_us = t_us;
    t->cart_counts = port_cart_counts();
    t->pendulum_counts = port_pendulum_counts();
    t->switches = (uint8_t)(port_switches() | (d->estop_was_pressed ? SW_ESTOP_BUTTON : 0u));
    t->faults = d->faults;
    t->status = (uint8_t)(ST_WATCHDOG_ACTIVE | (d->armed ? ST_ARMED : 0u) |
                          ((d->id.capabilities & CAP_LOCKSTEP) ? ST_LOCKSTEP : 0u)); /* 8.4 */
    t->drive_applied = d->drive_output;
    t->motor_current_a = (d->id.capabilities & CAP_MOTOR_CURRENT) ? port_motor_current_a() : NAN;
    t->supply_v = (d->id.capabilities & CAP_SUPPLY_VOLTAGE) ? port_supply_v() : NAN;
    t->late_commands = d->late_commands;
    send(d, &m);
}

void poise_device_step(poise_device *d)
{
    uint64_t now = port_time_us();
    watch_inputs(d);
    if (d->configured) {
        if (now - d->last_feed_us > (uint64_t)d->watchdog_ms * 1000u)
            latch_fault(d, F_WATCHDOG, (float)(now - d->last_feed_us) * 1e-3f);
        if (now >= d->next_sample_us) {
            take_sample(d, now);
            d->next_sample_us += d->period_us;
            if (d->next_sample_us <= now) /* overran a whole period: keep the rate */
                d->next_sample_us = now + d->period_us;
        }
    }
    /* Commands after the sample: a Configure's first sample is the next step's, and a Drive
     * read now takes effect at the next sample instant (one sample of delay). */
    read_serial(d);
}
