/*
 * taprig_link.c - portable C reference of the taprig device link, device side.
 *
 * Frame encoders, CRCs and the byte-at-a-time COMMAND parser declared in
 * taprig_link.h; the wire format is PROTOCOL.md beside the Python package.
 * Every multi-byte field is packed with shifts, so the code gives the same
 * bytes on little- and big-endian devices.
 */
#include "taprig_link.h"

#include <string.h>

/* The float32 format and INFO's full_scale_v need a 32-bit float. */
typedef char trl_float_must_be_32_bits[(sizeof(float) == 4u) ? 1 : -1];

/* ---- little-endian packing ---------------------------------------------- */

void trl_put_le16(uint8_t *p, uint16_t v)
{
    p[0] = (uint8_t)(v & 0xFFu);
    p[1] = (uint8_t)(v >> 8);
}

void trl_put_le32(uint8_t *p, uint32_t v)
{
    p[0] = (uint8_t)(v & 0xFFu);
    p[1] = (uint8_t)((v >> 8) & 0xFFu);
    p[2] = (uint8_t)((v >> 16) & 0xFFu);
    p[3] = (uint8_t)(v >> 24);
}

void trl_put_le64(uint8_t *p, uint64_t v)
{
    trl_put_le32(p, (uint32_t)(v & 0xFFFFFFFFu));
    trl_put_le32(p + 4, (uint32_t)(v >> 32));
}

uint16_t trl_get_le16(const uint8_t *p)
{
    return (uint16_t)((unsigned)p[0] | ((unsigned)p[1] << 8));
}

uint32_t trl_get_le32(const uint8_t *p)
{
    return (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) |
           ((uint32_t)p[3] << 24);
}

size_t trl_format_size(trl_format_t format)
{
    switch (format) {
    case TRL_FMT_INT16:
        return 2u;
    case TRL_FMT_INT24:
        return 3u;
    case TRL_FMT_INT32:
    case TRL_FMT_FLOAT32:
        return 4u;
    default:
        return 0u;
    }
}

/* ---- CRCs --------------------------------------------------------------- */

#ifndef TRL_CRC_BITWISE
/* CRC of one nibble value i, for the two algorithms: CRC-16 shifting left
 * (poly 0x1021), CRC-32 shifting right (reflected poly 0xEDB88320). */
static const uint16_t crc16_nibble[16] = {
    0x0000u, 0x1021u, 0x2042u, 0x3063u, 0x4084u, 0x50A5u, 0x60C6u, 0x70E7u,
    0x8108u, 0x9129u, 0xA14Au, 0xB16Bu, 0xC18Cu, 0xD1ADu, 0xE1CEu, 0xF1EFu,
};
static const uint32_t crc32_nibble[16] = {
    0x00000000ul, 0x1DB71064ul, 0x3B6E20C8ul, 0x26D930ACul,
    0x76DC4190ul, 0x6B6B51F4ul, 0x4DB26158ul, 0x5005713Cul,
    0xEDB88320ul, 0xF00F9344ul, 0xD6D6A3E8ul, 0xCB61B38Cul,
    0x9B64C2B0ul, 0x86D3D2D4ul, 0xA00AE278ul, 0xBDBDF21Cul,
};
#endif

uint16_t trl_crc16_xmodem_update(uint16_t crc, const void *data, size_t len)
{
    const uint8_t *p = (const uint8_t *)data;
    uint32_t c = crc;
    size_t i;
    for (i = 0; i < len; ++i) {
        c ^= (uint32_t)p[i] << 8;
#ifdef TRL_CRC_BITWISE
        {
            int bit;
            for (bit = 0; bit < 8; ++bit)
                c = (c & 0x8000u) ? ((c << 1) ^ 0x1021u) : (c << 1);
        }
#else
        c = (c << 4) ^ crc16_nibble[(c >> 12) & 0xFu];
        c = (c << 4) ^ crc16_nibble[(c >> 12) & 0xFu];
#endif
        c &= 0xFFFFu;
    }
    return (uint16_t)c;
}

uint16_t trl_crc16_xmodem(const void *data, size_t len)
{
    return trl_crc16_xmodem_update(0u, data, len);
}

uint32_t trl_crc32_init(void)
{
    return 0xFFFFFFFFul;
}

uint32_t trl_crc32_update(uint32_t state, const void *data, size_t len)
{
    const uint8_t *p = (const uint8_t *)data;
    uint32_t c = state;
    size_t i;
    for (i = 0; i < len; ++i) {
        c ^= p[i];
#ifdef TRL_CRC_BITWISE
        {
            int bit;
            for (bit = 0; bit < 8; ++bit)
                c = (c & 1u) ? ((c >> 1) ^ 0xEDB88320ul) : (c >> 1);
        }
#else
        c = (c >> 4) ^ crc32_nibble[c & 0xFu];
        c = (c >> 4) ^ crc32_nibble[c & 0xFu];
#endif
    }
    return c;
}

uint32_t trl_crc32_final(uint32_t state)
{
    return state ^ 0xFFFFFFFFul;
}

uint32_t trl_crc32(const void *data, size_t len)
{
    return trl_crc32_final(trl_crc32_update(trl_crc32_init(), data, len));
}

/* ---- outgoing frame counter --------------------------------------------- */

void trl_seq_init(trl_seq_t *tx, uint16_t first)
{
    tx->next = first;
}

uint16_t trl_seq_peek(const trl_seq_t *tx)
{
    return tx->next;
}

uint16_t trl_seq_take(trl_seq_t *tx)
{
    uint16_t seq = tx->next;
    tx->next = (uint16_t)((seq + 1u) & 0xFFFFu);
    return seq;
}

/* ---- envelope ------------------------------------------------------------ */

void trl_put_header(uint8_t out[TRL_HEADER_SIZE], uint8_t type, uint16_t seq, uint16_t length)
{
    out[0] = (uint8_t)TRL_MAGIC0;
    out[1] = (uint8_t)TRL_MAGIC1;
    out[2] = (uint8_t)TRL_PROTOCOL_VERSION;
    out[3] = type;
    trl_put_le16(out + 4, seq);
    trl_put_le16(out + 6, length);
    trl_put_le16(out + 8, trl_crc16_xmodem(out, 8u));
}

/* The payload of `len` bytes is already at out + 10: add header and CRC. */
static size_t finish_frame(uint8_t *out, trl_seq_t *tx, uint8_t type, size_t len)
{
    size_t body = TRL_HEADER_SIZE + len;
    trl_put_header(out, type, trl_seq_take(tx), (uint16_t)len);
    trl_put_le32(out + body, trl_crc32(out, body));
    return body + TRL_TRAILER_SIZE;
}

static int fits(size_t cap, size_t len)
{
    return len <= TRL_MAX_PAYLOAD && cap >= len + TRL_OVERHEAD;
}

size_t trl_encode_frame(uint8_t *out, size_t cap, trl_seq_t *tx, uint8_t type,
                        const uint8_t *payload, size_t len)
{
    if (!fits(cap, len) || (len > 0u && payload == NULL))
        return 0u;
    if (len > 0u && payload != out + TRL_HEADER_SIZE)
        memmove(out + TRL_HEADER_SIZE, payload, len);
    return finish_frame(out, tx, type, len);
}

/* ---- payloads ------------------------------------------------------------ */

static uint32_t float_bits(float f)
{
    uint32_t bits;
    memcpy(&bits, &f, sizeof bits);
    return bits;
}

/* True for a finite float32 greater than zero (subnormals included). */
static int positive_finite(float f)
{
    uint32_t bits = float_bits(f);
    return (bits & 0x80000000ul) == 0u && bits != 0u && (bits & 0x7F800000ul) != 0x7F800000ul;
}

/* Bits a channel's adc_bits may reach for a format. float32 allows 24, the
 * significand, as the Python host's validate_info does (PROTOCOL.md reads
 * 1..32 there). */
static unsigned bits_limit(trl_format_t format)
{
    switch (format) {
    case TRL_FMT_INT16:
        return 16u;
    case TRL_FMT_INT24:
    case TRL_FMT_FLOAT32:
        return 24u;
    case TRL_FMT_INT32:
        return 32u;
    default:
        return 0u;
    }
}

/* Copy a NUL-terminated ASCII string into a 16-byte NUL-padded field. */
static int put_text(uint8_t *field, const char *text)
{
    size_t i = 0;
    memset(field, 0, TRL_TEXT_SIZE);
    if (text == NULL)
        return 1;
    for (i = 0; text[i] != '\0'; ++i) {
        unsigned char ch = (unsigned char)text[i];
        if (i >= TRL_TEXT_SIZE || ch > 0x7Fu)
            return 0;
        field[i] = (uint8_t)ch;
    }
    return 1;
}

size_t trl_encode_info(uint8_t *out, size_t cap, trl_seq_t *tx, const trl_info_t *info)
{
    uint8_t *p = out + TRL_HEADER_SIZE;
    size_t len;
    unsigned c;
    unsigned limit;
    if (info == NULL || info->channels < 1u || info->channels > TRL_MAX_CHANNELS)
        return 0u;
    len = TRL_INFO_FIXED_SIZE + TRL_INFO_CHANNEL_SIZE * (size_t)info->channels;
    limit = bits_limit(info->format);
    if (!fits(cap, len) || limit == 0u || info->rate_milli_hz < TRL_MIN_RATE_MILLI_HZ ||
        info->rate_milli_hz > TRL_MAX_RATE_MILLI_HZ)
        return 0u;
    p[0] = (uint8_t)TRL_PROTOCOL_VERSION;
    p[1] = info->channels;
    p[2] = (uint8_t)info->format;
    p[3] = 0u; /* flags, reserved */
    trl_put_le32(p + 4, info->rate_milli_hz);
    if (!put_text(p + 8, info->device_id) || !put_text(p + 24, info->firmware))
        return 0u;
    for (c = 0; c < info->channels; ++c) {
        const trl_channel_t *ch = &info->channel[c];
        uint8_t *q = p + TRL_INFO_FIXED_SIZE + TRL_INFO_CHANNEL_SIZE * c;
        if (!positive_finite(ch->full_scale_v) || ch->adc_bits < 1u || ch->adc_bits > limit)
            return 0u;
        trl_put_le32(q, float_bits(ch->full_scale_v));
        q[4] = ch->adc_bits;
        q[5] = q[6] = q[7] = 0u; /* reserved */
    }
    return finish_frame(out, tx, (uint8_t)TRL_TYPE_INFO, len);
}

/* Payload length of a DATA frame, or 0 when it breaks a limit or cap. */
static size_t data_length(size_t cap, uint8_t channels, size_t bytes, size_t frames)
{
    size_t most;
    if (channels < 1u || channels > TRL_MAX_CHANNELS || bytes == 0u)
        return 0u;
    most = (TRL_MAX_PAYLOAD - TRL_DATA_HEADER_SIZE) / (channels * bytes);
    if (frames > most || !fits(cap, TRL_DATA_HEADER_SIZE + frames * channels * bytes))
        return 0u;
    return TRL_DATA_HEADER_SIZE + frames * channels * bytes;
}

static void put_data_header(uint8_t *p, uint64_t first_sample, uint8_t channels,
                            trl_format_t format, size_t frames)
{
    trl_put_le64(p, first_sample);
    p[8] = channels;
    p[9] = (uint8_t)format;
    trl_put_le16(p + 10, (uint16_t)frames);
}

size_t trl_encode_data(uint8_t *out, size_t cap, trl_seq_t *tx, uint64_t first_sample,
                       uint8_t channels, trl_format_t format, const int32_t *codes,
                       size_t frames)
{
    size_t bytes;
    size_t len;
    size_t n;
    size_t i;
    int32_t lo;
    int32_t hi;
    uint8_t *p;
    switch (format) {
    case TRL_FMT_INT16:
        lo = -32768;
        hi = 32767;
        break;
    case TRL_FMT_INT24:
        lo = -8388608;
        hi = 8388607;
        break;
    case TRL_FMT_INT32:
        lo = INT32_MIN;
        hi = INT32_MAX;
        break;
    default:
        return 0u;
    }
    bytes = trl_format_size(format);
    len = data_length(cap, channels, bytes, frames);
    n = frames * channels;
    if (len == 0u || (n > 0u && codes == NULL))
        return 0u;
    put_data_header(out + TRL_HEADER_SIZE, first_sample, channels, format, frames);
    p = out + TRL_HEADER_SIZE + TRL_DATA_HEADER_SIZE;
    for (i = 0; i < n; ++i) {
        int32_t k = codes[i];
        /* Two's complement bits of k; conversion to unsigned is modulo 2^32. */
        uint32_t u = (uint32_t)k;
        if (k < lo || k > hi)
            return 0u;
        p[0] = (uint8_t)(u & 0xFFu);
        p[1] = (uint8_t)((u >> 8) & 0xFFu);
        if (bytes >= 3u)
            p[2] = (uint8_t)((u >> 16) & 0xFFu);
        if (bytes == 4u)
            p[3] = (uint8_t)(u >> 24);
        p += bytes;
    }
    return finish_frame(out, tx, (uint8_t)TRL_TYPE_DATA, len);
}

size_t trl_encode_data_f32(uint8_t *out, size_t cap, trl_seq_t *tx, uint64_t first_sample,
                           uint8_t channels, const float *volts, size_t frames)
{
    size_t len = data_length(cap, channels, 4u, frames);
    size_t n = frames * channels;
    size_t i;
    uint8_t *p;
    if (len == 0u || (n > 0u && volts == NULL))
        return 0u;
    put_data_header(out + TRL_HEADER_SIZE, first_sample, channels, TRL_FMT_FLOAT32, frames);
    p = out + TRL_HEADER_SIZE + TRL_DATA_HEADER_SIZE;
    for (i = 0; i < n; ++i)
        trl_put_le32(p + 4u * i, float_bits(volts[i]));
    return finish_frame(out, tx, (uint8_t)TRL_TYPE_DATA, len);
}

size_t trl_encode_status(uint8_t *out, size_t cap, trl_seq_t *tx, const trl_status_t *status)
{
    uint8_t *p = out + TRL_HEADER_SIZE;
    if (status == NULL || status->state > TRL_STATE_STREAMING || !fits(cap, TRL_STATUS_SIZE))
        return 0u;
    trl_put_le64(p, status->sample_index);
    trl_put_le16(p + 8, status->overload_mask);
    p[10] = status->state;
    p[11] = 0u; /* reserved */
    trl_put_le32(p + 12, status->overruns);
    return finish_frame(out, tx, (uint8_t)TRL_TYPE_STATUS, TRL_STATUS_SIZE);
}

size_t trl_encode_ack(uint8_t *out, size_t cap, trl_seq_t *tx, const trl_ack_t *ack)
{
    uint8_t *p = out + TRL_HEADER_SIZE;
    if (ack == NULL || ack->result > TRL_ACK_BUSY || !fits(cap, TRL_ACK_SIZE))
        return 0u;
    p[0] = ack->opcode;
    p[1] = ack->result;
    trl_put_le16(p + 2, ack->tag);
    trl_put_le32(p + 4, ack->value);
    return finish_frame(out, tx, (uint8_t)TRL_TYPE_ACK, TRL_ACK_SIZE);
}

trl_ack_t trl_ack_for(const trl_rx_event_t *ev, uint32_t value)
{
    trl_ack_t ack;
    ack.opcode = ev->opcode;
    ack.result = ev->result;
    ack.tag = ev->tag;
    ack.value = ev->result == (uint8_t)TRL_ACK_OK ? value : 0u;
    return ack;
}

/* ---- COMMAND parser ------------------------------------------------------ */
/*
 * buf[0 .. len) holds the bytes of the current candidate frame: buf[0] is a
 * magic byte (or the buffer is empty) and bytes buf[0 .. scanned) are known to
 * be consistent with a frame. On any failure the first byte is dropped and
 * the rest is examined again from the start, so a frame that began inside a
 * failed candidate (a half frame followed by a whole one, a corrupted length)
 * is still found: that is the "advance by one byte" of the receiver rules
 * applied to a sliding window instead of a whole-stream buffer. A candidate
 * never needs more than TRL_RX_BUFFER_SIZE bytes, because longer lengths are
 * refused when the header is examined.
 */

void trl_rx_reset(trl_rx_t *rx)
{
    rx->len = 0u;
    rx->scanned = 0u;
    rx->need = 0u;
    rx->aligned = 0u;
    rx->have_seq = 0u;
    rx->last_seq = 0u;
}

void trl_rx_init(trl_rx_t *rx)
{
    memset(rx, 0, sizeof *rx);
    trl_rx_reset(rx);
}

/* Pass over the candidate's first byte and examine the rest again. */
static void rx_drop(trl_rx_t *rx)
{
    rx->len = (uint8_t)(rx->len - 1u);
    memmove(rx->buf, rx->buf + 1, rx->len);
    rx->scanned = 0u;
    rx->need = 0u;
    rx->aligned = 0u;
    rx->stats.skipped++;
}

/* Remove an intact frame of rx->need bytes from the front of the buffer. */
static void rx_consume(trl_rx_t *rx)
{
    uint8_t n = rx->need;
    rx->len = (uint8_t)(rx->len - n);
    memmove(rx->buf, rx->buf + n, rx->len);
    rx->scanned = 0u;
    rx->need = 0u;
}

/* Header of the candidate, with its 10 bytes held: 1 to go on, 0 to drop. */
static int rx_header(trl_rx_t *rx)
{
    uint16_t length = trl_get_le16(rx->buf + 6);
    if (trl_crc16_xmodem(rx->buf, 8u) != trl_get_le16(rx->buf + 8) || length > TRL_MAX_PAYLOAD) {
        /* Only where the previous good frame said the next one starts is this
         * a header error; anywhere else it is part of the resync. */
        if (rx->aligned)
            rx->stats.header_crc_errors++;
        return 0;
    }
    if (length > TRL_RX_MAX_PAYLOAD) {
        rx->stats.oversize++;
        return 0;
    }
    rx->need = (uint8_t)(length + TRL_OVERHEAD);
    return 1;
}

static int known_opcode(uint8_t op)
{
    return op >= (uint8_t)TRL_OP_START && op <= (uint8_t)TRL_OP_IDENTIFY;
}

/* An intact frame sits at buf[0 .. need): account for it and read a command. */
static trl_rx_kind_t rx_frame(trl_rx_t *rx, trl_rx_event_t *ev)
{
    const uint8_t *p = rx->buf + TRL_HEADER_SIZE;
    uint16_t seq = trl_get_le16(rx->buf + 4);
    size_t len = (size_t)rx->need - TRL_OVERHEAD;
    uint8_t opcode;
    int with_arg;
    rx->stats.frames_ok++;
    if (rx->have_seq)
        rx->stats.frames_lost += (uint16_t)((seq - rx->last_seq - 1u) & 0xFFFFu);
    rx->have_seq = 1u;
    rx->last_seq = seq;
    rx->aligned = 1u;
    if (rx->buf[2] != TRL_PROTOCOL_VERSION || rx->buf[3] != TRL_TYPE_COMMAND) {
        rx->stats.ignored++;
        return TRL_RX_NONE;
    }
    opcode = len >= 1u ? p[0] : 0u;
    with_arg = opcode == (uint8_t)TRL_OP_SET_RATE || opcode == (uint8_t)TRL_OP_PING;
    ev->seq = seq;
    ev->opcode = opcode;
    ev->tag = len >= 4u ? trl_get_le16(p + 2) : 0u;
    ev->argument = 0u;
    if (!known_opcode(opcode)) {
        ev->result = (uint8_t)TRL_ACK_UNKNOWN_COMMAND;
        return TRL_RX_REFUSED;
    }
    if (len != (with_arg ? 8u : 4u)) {
        ev->result = (uint8_t)TRL_ACK_BAD_ARGUMENT;
        return TRL_RX_REFUSED;
    }
    ev->result = (uint8_t)TRL_ACK_OK;
    if (with_arg)
        ev->argument = trl_get_le32(p + 4);
    return TRL_RX_COMMAND;
}

trl_rx_kind_t trl_rx_poll(trl_rx_t *rx, trl_rx_event_t *ev)
{
    while (rx->scanned < rx->len) {
        uint8_t k = rx->scanned;
        if ((k == 0u && rx->buf[0] != TRL_MAGIC0) || (k == 1u && rx->buf[1] != TRL_MAGIC1)) {
            rx_drop(rx);
            continue;
        }
        rx->scanned = (uint8_t)(k + 1u);
        if (rx->scanned == TRL_HEADER_SIZE && !rx_header(rx)) {
            rx_drop(rx);
            continue;
        }
        if (rx->need != 0u && rx->scanned == rx->need) {
            size_t body = (size_t)rx->need - TRL_TRAILER_SIZE;
            trl_rx_kind_t kind;
            if (trl_crc32(rx->buf, body) != trl_get_le32(rx->buf + body)) {
                rx->stats.frame_crc_errors++;
                rx_drop(rx);
                continue;
            }
            kind = rx_frame(rx, ev);
            rx_consume(rx);
            if (kind != TRL_RX_NONE)
                return kind;
        }
    }
    return TRL_RX_NONE;
}

trl_rx_kind_t trl_rx_push(trl_rx_t *rx, uint8_t byte, trl_rx_event_t *ev)
{
    /* Cannot happen while events are drained (a held candidate is always
     * shorter than the buffer); kept so that ignoring them loses no memory. */
    if (rx->len >= TRL_RX_BUFFER_SIZE)
        rx_drop(rx);
    rx->buf[rx->len] = byte;
    rx->len = (uint8_t)(rx->len + 1u);
    return trl_rx_poll(rx, ev);
}

trl_rx_kind_t trl_rx_feed(trl_rx_t *rx, const uint8_t *data, size_t len, size_t *used,
                          trl_rx_event_t *ev)
{
    size_t i = 0;
    trl_rx_kind_t kind = trl_rx_poll(rx, ev);
    while (kind == TRL_RX_NONE && i < len)
        kind = trl_rx_push(rx, data[i++], ev);
    *used = i;
    return kind;
}
