/* Fuzz the firmware's receive path: deterministic inputs from a seeded PRNG, fed to the
 * core's receiver byte by byte. Usage: fuzz_rx <seed> <inputs>. Prints one line of counts
 * and exits 1 on the first violation (describing it on stderr):
 *   - random byte streams: anything accepted must be a frame whose CRC, checked here by an
 *     independent table-driven CRC, matches and whose fields re-encode to the bytes received;
 *   - valid frames with 1, 2 or 3 bits flipped before COBS: never accepted, always counted as
 *     CRC failures (CRC-16/CCITT-FALSE has Hamming distance 4 at these lengths: P. Koopman,
 *     "Cyclic Redundancy Code (CRC) Polynomial Selection for Embedded Networks", DSN 2004);
 *   - valid frames with 1 to 4 distinct bits flipped on the wire (COBS bytes and
 *     delimiters): a COBS code byte error can corrupt many decoded bytes, so the CRC's
 *     distance does not bound these, and whatever is accepted passes the same consistency
 *     check (none is accepted for the test's seeds);
 *   - runs of 256 to 800 non-zero bytes then a valid frame: one oversize, then that frame. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cobs.h"
#include "frame_rx.h"

static uint64_t prng_state;

/* xorshift64* (S. Vigna, "An experimental exploration of Marsaglia's xorshift generators,
 * scrambled", ACM TOMS 42(4), 2016). */
static uint32_t prng(void)
{
    prng_state ^= prng_state >> 12;
    prng_state ^= prng_state << 25;
    prng_state ^= prng_state >> 27;
    return (uint32_t)((prng_state * 2685821657736338717ull) >> 32);
}

static uint32_t below(uint32_t n) { return prng() % n; }

static uint16_t crc_table[256];

static void make_crc_table(void)
{
    for (unsigned i = 0; i < 256; i++) {
        uint16_t c = (uint16_t)(i << 8);
        for (int k = 0; k < 8; k++)
            c = (c & 0x8000u) ? (uint16_t)((c << 1) ^ 0x1021u) : (uint16_t)(c << 1);
        crc_table[i] = c;
    }
}

static uint16_t reference_crc(const uint8_t *p, size_t n)
{
    uint16_t crc = 0xFFFFu;
    while (n--)
        crc = (uint16_t)((crc << 8) ^ crc_table[((crc >> 8) ^ *p++) & 0xFFu]);
    return crc;
}

static const uint8_t known_types[] = {0x01, 0x02, 0x03, 0x04, 0x10, 0x11, 0x12, 0x13, 0x14, 0x15, 0x16};

/* A valid version 1 frame of a random known type with random field bytes. */
static size_t random_frame(uint8_t *raw)
{
    uint8_t type = known_types[below(sizeof known_types)];
    size_t n = pw_frame_size(type);
    raw[0] = PW_VERSION;
    raw[1] = (uint8_t)(below(4) == 0 ? (prng() & 0xF0u) : 0u); /* sometimes may-ignore bits */
    raw[2] = type;
    for (size_t i = 3; i < n - 2; i++)
        raw[i] = (uint8_t)prng();
    if (type == PW_DEVICE_HELLO)
        for (size_t i = 10; i < 26; i++)
            raw[i] &= 0x7Fu;
    uint16_t crc = reference_crc(raw, n - 2);
    raw[n - 2] = (uint8_t)crc;
    raw[n - 1] = (uint8_t)(crc >> 8);
    return n;
}

typedef struct {
    unsigned long inputs, random_streams, random_accepts, valid_frames, raw_flipped,
        raw_flip_accepts, wire_flipped, wire_flip_accepts, oversize_runs, checked_accepts;
} tally;

static tally t;

static void fail(const char *what)
{
    fprintf(stderr, "fuzz_rx: %s (after %lu inputs)\n", what, t.inputs);
    exit(1);
}

/* An accepted message must be the frame received: CRC good, fields re-encode to its header
 * and payload (the flags byte aside: may-ignore bits are not re-sent, so the CRC differs). */
static void check_accept(const uint8_t *wire, size_t n, const pw_message *m)
{
    uint8_t raw[PW_MAX_FRAME], again[PW_MAX_FRAME];
    size_t raw_n = cobs_decode(wire, n, raw, sizeof raw), again_n;
    if (raw_n == COBS_ERROR || raw_n < PW_MIN_FRAME)
        fail("accepted a frame that is not valid COBS of at least 7 bytes");
    if (reference_crc(raw, raw_n - 2) != (uint16_t)(raw[raw_n - 2] | raw[raw_n - 1] << 8))
        fail("accepted a frame whose CRC does not match");
    again_n = pw_encode(m, again, sizeof again);
    raw[1] = 0;
    if (again_n != raw_n || memcmp(raw, again, raw_n - 2) != 0)
        fail("accepted message does not re-encode to the frame received");
    t.checked_accepts++;
}

/* Feed bytes to rx; return how many messages were accepted, each checked. */
static unsigned feed(pw_rx *rx, const uint8_t *bytes, size_t n)
{
    static uint8_t since_delim[4096];
    size_t held = 0;
    unsigned accepts = 0;
    pw_message m;
    uint8_t result;
    for (size_t i = 0; i < n; i++) {
        pw_rx_event e = pw_rx_byte(rx, bytes[i], &m, &result);
        if (e == PW_RX_MESSAGE) {
            check_accept(since_delim, held, &m);
            accepts++;
        } else if (e == PW_RX_REJECTED && result != PW_UNKNOWN_TYPE && result != PW_BAD_PAYLOAD) {
            fail("refusal with a result code other than UNKNOWN_TYPE or BAD_PAYLOAD");
        }
        if (bytes[i] == 0)
            held = 0;
        else if (held < sizeof since_delim)
            since_delim[held++] = bytes[i];
    }
    if (rx->len > PW_MAX_ENCODED)
        fail("receiver holds more than 255 bytes");
    return accepts;
}

static size_t to_wire(const uint8_t *raw, size_t n, uint8_t *out)
{
    size_t w = cobs_encode(raw, n, out, PW_WIRE_MAX);
    out[w] = 0;
    return w + 1;
}

static void random_stream(pw_rx *rx)
{
    static uint8_t buf[600];
    size_t n = 1 + below(sizeof buf);
    uint32_t zero_odds = 2 + below(60);
    for (size_t i = 0; i < n; i++)
        buf[i] = below(zero_odds) == 0 ? 0 : (uint8_t)prng();
    t.random_accepts += feed(rx, buf, n);
    t.random_streams++;
}

/* Flip `bits` distinct bits of buf[0..n), so the error really has that weight. */
static void flip_distinct_bits(uint8_t *buf, size_t n, unsigned bits)
{
    unsigned flipped[4];
    for (unsigned b = 0; b < bits; b++) {
        unsigned bit;
        int again;
        do {
            bit = below((uint32_t)n * 8u);
            again = 0;
            for (unsigned k = 0; k < b; k++)
                again |= flipped[k] == bit;
        } while (again);
        flipped[b] = bit;
        buf[bit / 8] ^= (uint8_t)(1u << (bit % 8));
    }
}

static void raw_flip(pw_rx *rx, unsigned bits)
{
    uint8_t raw[PW_MAX_FRAME], wire[PW_WIRE_MAX];
    size_t n = random_frame(raw);
    uint32_t crc_before = rx->counters.crc_failures;
    flip_distinct_bits(raw, n, bits);
    t.raw_flip_accepts += feed(rx, wire, to_wire(raw, n, wire));
    if (rx->counters.crc_failures != crc_before + 1)
        fail("a frame with 1-3 flipped bits was not counted as a CRC failure");
    t.raw_flipped++;
}

static void wire_flip(pw_rx *rx)
{
    uint8_t raw[PW_MAX_FRAME], wire[PW_WIRE_MAX];
    size_t n = random_frame(raw), w = to_wire(raw, n, wire);
    flip_distinct_bits(wire, w, 1 + below(4));
    t.wire_flip_accepts += feed(rx, wire, w);
    t.wire_flipped++;
}

static void valid_frame(pw_rx *rx)
{
    uint8_t raw[PW_MAX_FRAME], wire[PW_WIRE_MAX];
    if (feed(rx, wire, to_wire(raw, random_frame(raw), wire)) != 1)
        fail("a valid frame was not accepted");
    t.valid_frames++;
}

static void oversize_run(pw_rx *rx)
{
    static uint8_t buf[800 + PW_WIRE_MAX + 1];
    uint8_t raw[PW_MAX_FRAME];
    size_t run = 256 + below(800 - 256 + 1), n;
    uint32_t before = rx->counters.oversize;
    for (size_t i = 0; i < run; i++)
        buf[i] = (uint8_t)(1 + below(255));
    buf[run] = 0;
    n = run + 1 + to_wire(raw, random_frame(raw), buf + run + 1);
    if (feed(rx, buf, n) != 1 || rx->counters.oversize != before + 1)
        fail("an oversize run was not counted once and the frame after it received");
    t.oversize_runs++;
}

int main(int argc, char **argv)
{
    static pw_rx rx;
    unsigned long inputs;
    if (argc != 3) {
        fprintf(stderr, "usage: fuzz_rx <seed> <inputs>\n");
        return 2;
    }
    prng_state = strtoull(argv[1], NULL, 0) | 1u;
    inputs = strtoul(argv[2], NULL, 0);
    make_crc_table();
    for (t.inputs = 0; t.inputs < inputs; t.inputs++) {
        pw_rx_init(&rx); /* a fresh receiver per input keeps each input's accounting exact */
        switch (t.inputs % 7) {
        case 0: random_stream(&rx); break;
        case 1: raw_flip(&rx, 1); break;
        case 2: raw_flip(&rx, 2); break;
        case 3: raw_flip(&rx, 3); break;
        case 4: wire_flip(&rx); break;
        case 5: oversize_run(&rx); break;
        default: valid_frame(&rx); break;
        }
    }
    printf("inputs=%lu random_streams=%lu random_accepts=%lu valid_frames=%lu raw_flipped=%lu"
           " raw_flip_accepts=%lu wire_flipped=%lu wire_flip_accepts=%lu oversize_runs=%lu"
           " checked_accepts=%lu\n",
           t.inputs, t.random_streams, t.random_accepts, t.valid_frames, t.raw_flipped,
           t.raw_flip_accepts, t.wire_flipped, t.wire_flip_accepts, t.oversize_runs,
           t.checked_accepts);
    return 0;
}
