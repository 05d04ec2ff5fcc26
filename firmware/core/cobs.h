/* Consistent Overhead Byte Stuffing (S. Cheshire and M. Baker, IEEE/ACM ToN 7(2), 1999),
 * as PROTOCOL.md section 2 uses it: standard COBS, no trailing-zero elision, no delimiter
 * inside these functions (the caller appends or splits at 0x00). */
#ifndef POISE_COBS_H
#define POISE_COBS_H

#include <stddef.h>
#include <stdint.h>

/* Largest encoding of n input bytes: n + one code byte per started block of 254. */
#define COBS_MAX_ENCODED(n) ((n) + (n) / 254u + 1u)

/* Encode n bytes of in into out (capacity cap). Returns the encoded length, or 0 when cap is
 * too small. The output holds no 0x00 byte. */
size_t cobs_encode(const uint8_t *in, size_t n, uint8_t *out, size_t cap);

/* Decode n encoded bytes (no delimiter) into out (capacity cap). Returns the decoded length,
 * or (size_t)-1 when the input holds a 0x00, a code byte points past the end, or cap is
 * too small. */
size_t cobs_decode(const uint8_t *in, size_t n, uint8_t *out, size_t cap);

#define COBS_ERROR ((size_t)-1)

#endif
