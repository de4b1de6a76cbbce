/*
 * livestep_frame.h - build livestep binary frames on the device (header-only, C99).
 *
 * A frame on the wire is COBS(payload) followed by one 0x00 delimiter byte. Payload
 * fields are little-endian:
 *
 *   samples (type 0x01): u8 n (1..16), u16 seq, u32 timestamp, n x float32, u16 crc
 *   log     (type 0x02): u8 0,         u16 seq, UTF-8 text (<= 200 bytes),  u16 crc
 *
 * seq increments by one per frame of any type (wraps at 65536); timestamp is the
 * device's counter (microseconds by default); crc is CRC-16/CCITT-FALSE (poly 0x1021,
 * init 0xFFFF, no reflection, xorout 0) over all payload bytes before it, low byte
 * first. See README.md next to this file.
 *
 * No dependencies beyond <stddef.h> and <stdint.h>; no dynamic allocation; the frame
 * builders use at most LIVESTEP_MAX_PAYLOAD bytes of stack. Not reentrant per link:
 * give each link (UART) its own livestep_link and build its frames from one context.
 */
#ifndef LIVESTEP_FRAME_H
#define LIVESTEP_FRAME_H

#include <stddef.h>
#include <stdint.h>

#define LIVESTEP_FRAME_SAMPLES 0x01u
#define LIVESTEP_FRAME_LOG 0x02u
#define LIVESTEP_MAX_CHANNELS 16u
#define LIVESTEP_MAX_LOG_TEXT 200u

/* payload bytes of a sample frame with n channels: header 4, timestamp 4, values, crc 2 */
#define LIVESTEP_SAMPLE_PAYLOAD(n) (10u + 4u * (unsigned)(n))
/* bytes on the wire for any payload under 254 bytes: one COBS code byte + delimiter */
#define LIVESTEP_WIRE_SIZE(payload) ((size_t)(payload) + 2u)
/* largest payload (a log frame with 200 bytes of text) and largest frame on the wire */
#define LIVESTEP_MAX_PAYLOAD (4u + LIVESTEP_MAX_LOG_TEXT + 2u)
#define LIVESTEP_MAX_WIRE LIVESTEP_WIRE_SIZE(LIVESTEP_MAX_PAYLOAD)

/* Per-link state: the sequence number of the next frame. Zero-initialise it. */
typedef struct {
    uint16_t seq;
} livestep_link;

/* CRC-16/CCITT-FALSE of len bytes, continuing from crc (start with 0xFFFF).
 * Check value: livestep_crc16(0xFFFF, "123456789", 9) == 0x29B1. */
static inline uint16_t livestep_crc16(uint16_t crc, const uint8_t *data, size_t len)
{
    size_t i;
    int bit;
    for (i = 0; i < len; ++i) {
        crc ^= (uint16_t)((uint16_t)data[i] << 8);
        for (bit = 0; bit < 8; ++bit) {
            crc = (crc & 0x8000u) ? (uint16_t)((crc << 1) ^ 0x1021u) : (uint16_t)(crc << 1);
        }
    }
    return crc;
}

/* COBS-encode len bytes from in into out (no delimiter); returns the encoded length,
 * at most len + len / 254 + 1 bytes. in and out must not overlap. */
static inline size_t livestep_cobs_encode(const uint8_t *in, size_t len, uint8_t *out)
{
    size_t code_at = 0; /* where the current block's code byte goes */
    size_t o = 1;
    uint8_t code = 1;
    size_t i;
    for (i = 0; i < len; ++i) {
        if (in[i] == 0) {
            out[code_at] = code;
            code_at = o++;
            code = 1;
        } else {
            out[o++] = in[i];
            if (++code == 0xFFu) {
                out[code_at] = code;
                code_at = o++;
                code = 1;
            }
        }
    }
    out[code_at] = code;
    return o;
}

static inline void livestep__put_u16(uint8_t *p, uint16_t v)
{
    p[0] = (uint8_t)(v & 0xFFu);
    p[1] = (uint8_t)(v >> 8);
}

static inline void livestep__put_u32(uint8_t *p, uint32_t v)
{
    p[0] = (uint8_t)(v & 0xFFu);
    p[1] = (uint8_t)((v >> 8) & 0xFFu);
    p[2] = (uint8_t)((v >> 16) & 0xFFu);
    p[3] = (uint8_t)(v >> 24);
}

/* IEEE 754 single: the float's bits, written little-endian whatever the CPU's order
 * (assumes float and uint32_t share a byte order, as on all common MCUs). */
static inline void livestep__put_f32(uint8_t *p, float f)
{
    uint32_t bits = 0;
    const unsigned char *src = (const unsigned char *)&f;
    unsigned char *dst = (unsigned char *)&bits;
    size_t i;
    for (i = 0; i < sizeof bits; ++i) {
        dst[i] = src[i];
    }
    livestep__put_u32(p, bits);
}

/* Append the CRC to payload[0..len), COBS-encode into out and add the delimiter.
 * Returns bytes written, or 0 if out_size is too small. */
static inline size_t livestep__finish(uint8_t *payload, size_t len, uint8_t *out,
                                      size_t out_size)
{
    size_t n;
    livestep__put_u16(payload + len, livestep_crc16(0xFFFFu, payload, len));
    len += 2u;
    if (out_size < LIVESTEP_WIRE_SIZE(len)) {
        return 0;
    }
    n = livestep_cobs_encode(payload, len, out);
    out[n++] = 0x00u;
    return n;
}

/* Build a sample frame: device time timestamp (counter ticks), n channel values
 * (channel 0 setpoint, 1 feedback, then extras, unless the receiver is told otherwise).
 * Writes LIVESTEP_WIRE_SIZE(LIVESTEP_SAMPLE_PAYLOAD(n)) bytes (20 for n = 2) into out
 * and returns that count, or 0 (nothing written, seq unchanged) if n is not in 1..16
 * or out_size is too small. */
static inline size_t livestep_sample_frame(livestep_link *link, uint32_t timestamp,
                                           const float *values, unsigned n, uint8_t *out,
                                           size_t out_size)
{
    uint8_t payload[LIVESTEP_SAMPLE_PAYLOAD(LIVESTEP_MAX_CHANNELS)];
    size_t len = 0;
    size_t written;
    unsigned i;
    if (n < 1u || n > LIVESTEP_MAX_CHANNELS) {
        return 0;
    }
    payload[len++] = (uint8_t)LIVESTEP_FRAME_SAMPLES;
    payload[len++] = (uint8_t)n;
    livestep__put_u16(payload + len, link->seq);
    len += 2u;
    livestep__put_u32(payload + len, timestamp);
    len += 4u;
    for (i = 0; i < n; ++i) {
        livestep__put_f32(payload + len, values[i]);
        len += 4u;
    }
    written = livestep__finish(payload, len, out, out_size);
    if (written) {
        link->seq = (uint16_t)(link->seq + 1u);
    }
    return written;
}

/* Build a log frame from the NUL-terminated UTF-8 string text, cut to 200 bytes (at a
 * character boundary). Returns bytes written (at most LIVESTEP_MAX_WIRE), or 0 if
 * out_size is too small (seq unchanged). */
static inline size_t livestep_log_frame(livestep_link *link, const char *text, uint8_t *out,
                                        size_t out_size)
{
    uint8_t payload[LIVESTEP_MAX_PAYLOAD];
    size_t len = 0;
    size_t n = 0;
    size_t written;
    while (n < LIVESTEP_MAX_LOG_TEXT + 1u && text[n] != '\0') {
        ++n;
    }
    if (n > LIVESTEP_MAX_LOG_TEXT) {
        n = LIVESTEP_MAX_LOG_TEXT;
        /* don't split a multi-byte character: back off over continuation bytes */
        while (n > 0 && ((unsigned char)text[n] & 0xC0u) == 0x80u) {
            --n;
        }
    }
    payload[len++] = (uint8_t)LIVESTEP_FRAME_LOG;
    payload[len++] = 0u;
    livestep__put_u16(payload + len, link->seq);
    len += 2u;
    while (len < 4u + n) {
        payload[len] = (uint8_t)text[len - 4u];
        ++len;
    }
    written = livestep__finish(payload, len, out, out_size);
    if (written) {
        link->seq = (uint16_t)(link->seq + 1u);
    }
    return written;
}

#endif /* LIVESTEP_FRAME_H */
