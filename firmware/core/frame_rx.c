#include "frame_rx.h"

#include <string.h>

#include "cobs.h"

void pw_rx_init(pw_rx *rx)
{
    memset(rx, 0, sizeof *rx);
}

static void note_telemetry_seq(pw_rx *rx, uint16_t seq)
{
    if (rx->have_telemetry && seq != rx->next_telemetry_seq && seq != 0) {
        uint16_t lost = (uint16_t)(seq - rx->next_telemetry_seq);
        rx->counters.gaps++;
        if (lost < 0x8000u)
            rx->counters.lost_frames += lost; /* a backwards jump loses nothing */
    }
    rx->have_telemetry = 1;
    rx->next_telemetry_seq = (uint16_t)(seq + 1u);
}

static pw_rx_event finish_frame(pw_rx *rx, pw_message *out, uint8_t *result)
{
    uint8_t raw[PW_MAX_FRAME];
    size_t n = cobs_decode(rx->buf, rx->len, raw, sizeof raw);
    pw_rx_counters *c = &rx->counters;
    if (n == COBS_ERROR) {
        c->cobs_errors++;
        c->resyncs++;
        return PW_RX_NONE;
    }
    switch (pw_decode(raw, n, out)) {
    case PW_DECODE_OK:
        if (out->type == PW_TELEMETRY)
            note_telemetry_seq(rx, out->seq);
        c->frames_rx++;
        return PW_RX_MESSAGE;
    case PW_DECODE_RUNT: c->runts++; c->resyncs++; return PW_RX_NONE;
    case PW_DECODE_CRC: c->crc_failures++; c->resyncs++; return PW_RX_NONE;
    case PW_DECODE_VERSION: c->bad_version++; return PW_RX_NONE;
    case PW_DECODE_FLAGS: c->unknown_flags++; return PW_RX_NONE;
    case PW_DECODE_UNKNOWN_TYPE:
        c->unknown_type++;
        *result = PW_UNKNOWN_TYPE;
        return PW_RX_REJECTED;
    case PW_DECODE_BAD_LENGTH:
    case PW_DECODE_BAD_TEXT:
        c->malformed++;
        *result = PW_BAD_PAYLOAD;
        return PW_RX_REJECTED;
    }
    return PW_RX_NONE;
}

pw_rx_event pw_rx_byte(pw_rx *rx, uint8_t byte, pw_message *out, uint8_t *result)
{
    pw_rx_event event = PW_RX_NONE;
    if (byte != 0) {
        if (rx->discarding)
            return PW_RX_NONE;
        if (rx->len == PW_MAX_ENCODED) {
            rx->counters.oversize++;
            rx->counters.resyncs++;
            rx->discarding = 1;
            rx->len = 0;
            return PW_RX_NONE;
        }
        rx->buf[rx->len++] = byte;
        return PW_RX_NONE;
    }
    if (!rx->discarding && rx->len > 0)
        event = finish_frame(rx, out, result);
    rx->discarding = 0;
    rx->len = 0;
    return event;
}

uint16_t pw_to_wire(const pw_message *m, uint8_t *out, uint16_t cap)
{
    uint8_t raw[PW_MAX_FRAME];
    size_t n = pw_encode(m, raw, sizeof raw);
    size_t w;
    if (n == 0 || cap < 1)
        return 0;
    w = cobs_encode(raw, n, out, (size_t)cap - 1u);
    if (w == 0)
        return 0;
    out[w] = 0x00;
    return (uint16_t)(w + 1u);
}
