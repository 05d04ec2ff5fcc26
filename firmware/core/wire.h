/* Little-endian field access for frame buffers (PROTOCOL.md conventions). f32 values are
 * copied bit for bit, so a NaN's payload survives decode and re-encode unchanged. */
#ifndef POISE_WIRE_H
#define POISE_WIRE_H

#include <stdint.h>
#include <string.h>

static inline void put_u16(uint8_t *p, uint16_t v) { p[0] = (uint8_t)v; p[1] = (uint8_t)(v >> 8); }
static inline void put_u32(uint8_t *p, uint32_t v) { put_u16(p, (uint16_t)v); put_u16(p + 2, (uint16_t)(v >> 16)); }
static inline void put_u64(uint8_t *p, uint64_t v) { put_u32(p, (uint32_t)v); put_u32(p + 4, (uint32_t)(v >> 32)); }
static inline void put_f32(uint8_t *p, float v) { uint32_t u; memcpy(&u, &v, 4); put_u32(p, u); }

static inline uint16_t get_u16(const uint8_t *p) { return (uint16_t)(p[0] | (uint16_t)p[1] << 8); }
static inline uint32_t get_u32(const uint8_t *p) { return get_u16(p) | (uint32_t)get_u16(p + 2) << 16; }
static inline uint64_t get_u64(const uint8_t *p) { return get_u32(p) | (uint64_t)get_u32(p + 4) << 32; }
static inline float get_f32(const uint8_t *p) { uint32_t u = get_u32(p); float v; memcpy(&v, &u, 4); return v; }

#endif
