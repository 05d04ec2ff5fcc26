/* Poise wire protocol version 1: message layouts (PROTOCOL.md sections 3 and 6). */
#ifndef POISE_MESSAGES_H
#define POISE_MESSAGES_H

#include <stddef.h>
#include <stdint.h>

#define PW_VERSION 1u
#define PW_SCHEMA_FINGERPRINT 0x3CC7DDFAul
#define PW_HEADER_BYTES 5u
#define PW_CRC_BYTES 2u
#define PW_MIN_FRAME (PW_HEADER_BYTES + PW_CRC_BYTES)
#define PW_MAX_FRAME 254u         /* decoded frame */
#define PW_MAX_ENCODED 255u       /* its COBS encoding, before the 0x00 delimiter */
#define PW_FLAGS_MUST_UNDERSTAND 0x0Fu
#define PW_UNPROMPTED_HELLO_SEQ 0xFFFFu /* a DeviceHello nobody asked for (section 6) */
#define PW_KNOWN_MUST_UNDERSTAND 0x00u
#define PW_DEVICE_ID_BYTES 16u

enum pw_type {
    PW_DEVICE_HELLO = 0x01, PW_TELEMETRY = 0x02, PW_FAULT_REPORT = 0x03, PW_REPLY = 0x04,
    PW_CONFIGURE = 0x10, PW_ARM = 0x11, PW_DRIVE = 0x12, PW_HEARTBEAT = 0x13,
    PW_STOP = 0x14, PW_CLEAR_FAULTS = 0x15, PW_IDENTIFY = 0x16
};

enum pw_reply_result {
    PW_ACCEPTED = 0, PW_UNKNOWN_TYPE = 1, PW_BAD_PAYLOAD = 2, PW_NOT_NOW = 3,
    PW_OUT_OF_RANGE = 4, PW_FAULT_LATCHED = 5
};

/* Bit constants of PROTOCOL.md section 6. */
#define SW_LIMIT_NEG 0x01u
#define SW_LIMIT_POS 0x02u
#define SW_ESTOP_BUTTON 0x04u
#define SW_END_STOP 0x08u
#define F_WATCHDOG 0x0001u
#define F_DRIVER 0x0002u
#define F_SUPPLY 0x0004u
#define F_RESET 0x0008u
#define F_ESTOP 0x0010u
#define ST_ARMED 0x01u
#define ST_WATCHDOG_ACTIVE 0x02u
#define ST_LOCKSTEP 0x04u
#define CAP_LIMIT_SWITCHES 0x01u
#define CAP_MOTOR_CURRENT 0x02u
#define CAP_SUPPLY_VOLTAGE 0x04u
#define CAP_ESTOP_BUTTON 0x08u
#define CAP_SIMULATED 0x10u
#define CAP_LOCKSTEP 0x20u

typedef struct {
    uint8_t protocol_version;
    uint32_t schema_fingerprint;
    uint8_t device_id[PW_DEVICE_ID_BYTES]; /* ASCII, NUL-padded */
    uint8_t firmware_major, firmware_minor, firmware_patch;
    uint16_t sample_rate_hz;
    float cart_counts_per_m;
    uint32_t pendulum_counts_per_rev;
    float track_length_m;
    float drive_limit;
    uint8_t drive_kind;
    uint32_t capabilities;
} pw_device_hello;

typedef struct {
    uint64_t t_us;
    int32_t cart_counts, pendulum_counts;
    uint8_t switches;
    uint16_t faults;
    uint8_t status;
    float drive_applied, motor_current_a, supply_v;
    uint16_t late_commands;
} pw_telemetry;

typedef struct { uint16_t faults, code; float detail; } pw_fault_report;
typedef struct { uint8_t for_type; uint16_t for_seq; uint8_t result; } pw_reply;
typedef struct { uint16_t sample_rate_hz, watchdog_ms; } pw_configure;
typedef struct { uint8_t arm; } pw_arm;
typedef struct { float drive; uint16_t answers_seq; } pw_drive;

/* One message: header type and seq, and the payload of that type (Heartbeat, Stop,
 * ClearFaults and Identify have none). */
typedef struct {
    uint8_t type;
    uint8_t flags; /* as received; encoded as 0x00 (version 1 defines no flag bits) */
    uint16_t seq;
    union {
        pw_device_hello hello;
        pw_telemetry telemetry;
        pw_fault_report fault_report;
        pw_reply reply;
        pw_configure configure;
        pw_arm arm;
        pw_drive drive;
    } u;
} pw_message;

/* Outcome of decoding one frame, in the order PROTOCOL.md section 3 checks. */
typedef enum {
    PW_DECODE_OK = 0,
    PW_DECODE_RUNT,          /* fewer than 7 bytes */
    PW_DECODE_CRC,           /* CRC mismatch */
    PW_DECODE_VERSION,       /* version is not 1 */
    PW_DECODE_FLAGS,         /* unknown must-understand flag bit */
    PW_DECODE_UNKNOWN_TYPE,  /* header trusted: answer Reply UNKNOWN_TYPE */
    PW_DECODE_BAD_LENGTH,    /* header trusted: answer Reply BAD_PAYLOAD */
    PW_DECODE_BAD_TEXT       /* device_id not ASCII; header trusted: BAD_PAYLOAD */
} pw_decode_result;

/* Frame size (header + payload + CRC) of a type, 0 for a type version 1 does not know. */
size_t pw_frame_size(uint8_t type);

/* Write m as a frame (header, payload, CRC) to out. Returns its length, or 0 when the type
 * is unknown or cap is too small. */
size_t pw_encode(const pw_message *m, uint8_t *out, size_t cap);

/* Decode one frame of n bytes (after COBS). On PW_DECODE_OK m holds the message; on
 * PW_DECODE_UNKNOWN_TYPE, PW_DECODE_BAD_LENGTH and PW_DECODE_BAD_TEXT m->type and m->seq
 * hold the header's values, so the frame can be answered. */
pw_decode_result pw_decode(const uint8_t *raw, size_t n, pw_message *m);

#endif
