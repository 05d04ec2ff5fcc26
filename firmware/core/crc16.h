/* CRC-16/CCITT-FALSE (PROTOCOL.md section 4). */
#ifndef POISE_CRC16_H
#define POISE_CRC16_H

#include <stddef.h>
#include <stdint.h>

/* Width 16, poly 0x1021, init 0xFFFF, not reflected, xorout 0 (G. Cook's catalogue,
 * CRC-16/IBM-3740). Check value: crc16_ccitt_false("123456789", 9) == 0x29B1. */
uint16_t crc16_ccitt_false(const uint8_t *p, size_t n);

#endif
