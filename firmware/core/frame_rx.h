/* Receive path: bytes from the serial line in, whole decoded messages out (PROTOCOL.md
 * sections 2, 3, 5 and 7). Fixed buffers, byte at a time, so it can run from a UART
 * interrupt or a polling loop. Every rejected frame is counted by reason. */
#ifndef POISE_FRAME_RX_H
#define POISE_FRAME_RX_H

#include <stdint.h>

#include "messages.h"

/* Counter names as in protocol/vectors.json. resyncs counts frames discarded for COBS,
 * runt, CRC or oversize (the ones whose header cannot be trusted). gaps and lost_frames
 * are telemetry sequence checks (section 5), meaningful on the host side of the link. */
typedef struct {
    uint32_t frames_rx, crc_failures, cobs_errors, runts, oversize, resyncs;
    uint32_t bad_version, unknown_flags, unknown_type, malformed, gaps, lost_frames;
} pw_rx_counters;

typedef struct {
    uint8_t buf[PW_MAX_ENCODED];
    uint16_t len;
    uint8_t discarding;     /* inside an oversize run: drop up to the next 0x00 */
    uint8_t have_telemetry; /* next_telemetry_seq is valid */
    uint16_t next_telemetry_seq;
    pw_rx_counters counters;
} pw_rx;

typedef enum {
    PW_RX_NONE = 0,    /* byte taken, no frame completed (or a frame dropped and counted) */
    PW_RX_MESSAGE,     /* *out holds a valid message */
    PW_RX_REJECTED     /* well-framed but refused: out->type/out->seq set, *result the Reply code */
} pw_rx_event;

void pw_rx_init(pw_rx *rx);

/* Take one byte. On PW_RX_REJECTED *result is PW_UNKNOWN_TYPE or PW_BAD_PAYLOAD. */
pw_rx_event pw_rx_byte(pw_rx *rx, uint8_t byte, pw_message *out, uint8_t *result);

/* Encode m for the wire: COBS(frame) then 0x00. Returns the byte count, 0 if cap is short.
 * PW_WIRE_MAX bytes always suffice for a version 1 message. */
#define PW_WIRE_MAX (PW_MAX_ENCODED + 1u)
uint16_t pw_to_wire(const pw_message *m, uint8_t *out, uint16_t cap);

#endif
