#include "cobs.h"

size_t cobs_encode(const uint8_t *in, size_t n, uint8_t *out, size_t cap)
{
    size_t code_at = 0, o = 1;
    uint8_t code = 1;
    if (cap < 1)
        return 0;
    for (size_t i = 0; i < n; i++) {
        if (in[i] != 0) {
            if (o >= cap)
                return 0;
            out[o++] = in[i];
            code++;
        }
        if (in[i] == 0 || code == 0xFF) {
            out[code_at] = code;
            code = 1;
            /* a full block of 254 ending the input needs no further code byte */
            if (in[i] != 0 && i + 1 == n)
                return o;
            if (o >= cap)
                return 0;
            code_at = o++;
        }
    }
    out[code_at] = code;
    return o;
}

size_t cobs_decode(const uint8_t *in, size_t n, uint8_t *out, size_t cap)
{
    size_t i = 0, o = 0;
    while (i < n) {
        uint8_t code = in[i++];
        if (code == 0 || i + (size_t)code - 1 > n)
            return COBS_ERROR;
        for (uint8_t k = 1; k < code; k++) {
            if (in[i] == 0 || o >= cap)
                return COBS_ERROR;
            out[o++] = in[i++];
        }
        if (code != 0xFF && i < n) {
            if (o >= cap)
                return COBS_ERROR;
            out[o++] = 0;
        }
    }
    return o;
}
