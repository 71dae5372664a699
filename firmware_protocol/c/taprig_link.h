/*
 * taprig_link.h - portable C reference of the taprig device link, device side.
 *
 * What it is for
 *   A firmware author drops taprig_link.h and taprig_link.c into a
 *   microcontroller project to speak the byte protocol of PROTOCOL.md
 *   (version 1) to the taprig host: it builds the frames a device sends
 *   (INFO, DATA, STATUS, ACK) into a caller buffer and parses the COMMAND
 *   frames the host sends, one byte at a time, straight from a UART/USB
 *   receive interrupt or a main-loop poll. C99, no heap, no I/O, nothing
 *   beyond <stdint.h>, <stddef.h> and <string.h>; byte order and float layout
 *   of the device do not matter (fields are packed byte by byte, floats are
 *   copied into a uint32_t with memcpy and must be IEEE-754 binary32).
 *
 * How a firmware uses it (one outgoing counter, one parser; names are yours)
 *   static trl_rx_t rx; static trl_seq_t tx; trl_rx_event_t ev; trl_rx_kind_t k;
 *   trl_rx_init(&rx); trl_seq_init(&tx, 0);            // once at power-up
 *   for (k = trl_rx_push(&rx, byte, &ev); k != TRL_RX_NONE; k = trl_rx_poll(&rx, &ev)) {
 *       trl_ack_t a = trl_ack_for(&ev, ev.opcode == TRL_OP_PING ? ev.argument : 0u);
 *       send(f, trl_encode_ack(f, sizeof f, &tx, &a)); if (k == TRL_RX_COMMAND) act(&ev); }
 *   (`byte` is each received byte, `f` a uint8_t buffer of TRL_ACK_FRAME_SIZE or more.)
 *   Every frame encoder returns the frame length, or 0 (nothing to send) when
 *   the arguments break the protocol's limits or the buffer is too small; the
 *   counter `tx` advances only when a frame was produced, so pass the same
 *   trl_seq_t to every encoder of the outgoing direction.
 *
 * Limits
 *   - The parser holds at most TRL_RX_BUFFER_SIZE (32) bytes, so it takes
 *     frames with payloads of up to 18 bytes: every COMMAND (4 or 8 bytes) and
 *     any short frame. A header announcing a longer payload is counted in
 *     `oversize` and passed over like a failed header check (its bytes count
 *     as skipped); those frames are never for a device anyway.
 *   - One pushed byte can complete up to two events (after a failed candidate
 *     the buffered bytes are scanned again, so no later intact frame is lost):
 *     always drain with trl_rx_poll until it returns TRL_RX_NONE.
 *   - A DATA frame carries at most TRL_DATA_MAX_FRAMES(C, B) sample frames
 *     (8192-byte payload), e.g. 681 for 4 channels of int24.
 *   - The parser answers nothing itself: opcode-specific rules (SET_RATE only
 *     while stopped, the allowed rates) are the firmware's, sent as an ACK
 *     with TRL_ACK_BUSY or TRL_ACK_BAD_ARGUMENT.
 *   - CRCs use 16-entry nibble tables (64 + 32 bytes of const data, two table
 *     steps per byte). Define TRL_CRC_BITWISE when compiling taprig_link.c for
 *     the table-free loop (8 shift/xor steps per byte, smallest flash): on an
 *     x86-64 host it was 2 times slower at -O2 and 10 times at -Os; budget for
 *     the CRC-32 of every byte streamed (about 0.6 MB/s for 4 channels of
 *     int24 at 51.2 kHz) before choosing it.
 *   - Not reentrant per object: one trl_rx_t per link, used from one context.
 */
#ifndef TAPRIG_LINK_H
#define TAPRIG_LINK_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ---- envelope and payload sizes (PROTOCOL.md sections 1 to 3) ---------- */

#define TRL_PROTOCOL_VERSION 1u
#define TRL_MAGIC0 0xE7u
#define TRL_MAGIC1 0x19u
#define TRL_HEADER_SIZE 10u  /* magic, version, type, seq, length, hcheck */
#define TRL_TRAILER_SIZE 4u  /* CRC-32 */
#define TRL_OVERHEAD 14u
#define TRL_MAX_PAYLOAD 8192u
#define TRL_MAX_FRAME (TRL_MAX_PAYLOAD + TRL_OVERHEAD)
#define TRL_MAX_CHANNELS 16u
#define TRL_TEXT_SIZE 16u  /* device_id and firmware fields, NUL-padded */
#define TRL_MIN_RATE_MILLI_HZ 1000ul        /* 1 Hz */
#define TRL_MAX_RATE_MILLI_HZ 1000000000ul  /* 1 MHz */

#define TRL_INFO_FIXED_SIZE 40u
#define TRL_INFO_CHANNEL_SIZE 8u
#define TRL_DATA_HEADER_SIZE 12u
#define TRL_STATUS_SIZE 16u
#define TRL_ACK_SIZE 8u

/* Whole-frame sizes in bytes, for sizing transmit buffers. */
#define TRL_INFO_FRAME_SIZE(c) (TRL_OVERHEAD + TRL_INFO_FIXED_SIZE + TRL_INFO_CHANNEL_SIZE * (c))
#define TRL_DATA_FRAME_SIZE(n, c, b) (TRL_OVERHEAD + TRL_DATA_HEADER_SIZE + (n) * (c) * (b))
#define TRL_STATUS_FRAME_SIZE (TRL_OVERHEAD + TRL_STATUS_SIZE)
#define TRL_ACK_FRAME_SIZE (TRL_OVERHEAD + TRL_ACK_SIZE)
/* Most sample frames of c channels, b bytes per sample, in one DATA frame. */
#define TRL_DATA_MAX_FRAMES(c, b) ((TRL_MAX_PAYLOAD - TRL_DATA_HEADER_SIZE) / ((c) * (b)))

typedef enum {
    TRL_TYPE_INFO = 0x01,
    TRL_TYPE_DATA = 0x02,
    TRL_TYPE_STATUS = 0x03,
    TRL_TYPE_ACK = 0x04,
    TRL_TYPE_COMMAND = 0x81
} trl_frame_type_t;

typedef enum {
    TRL_FMT_INT16 = 1,   /* 2 bytes per sample */
    TRL_FMT_INT24 = 2,   /* 3 bytes, packed */
    TRL_FMT_INT32 = 3,   /* 4 bytes */
    TRL_FMT_FLOAT32 = 4  /* 4 bytes, IEEE-754 binary32, volts */
} trl_format_t;

typedef enum {
    TRL_OP_START = 0x01,
    TRL_OP_STOP = 0x02,
    TRL_OP_SET_RATE = 0x03, /* argument: u32 rate in milli-Hz */
    TRL_OP_PING = 0x04,     /* argument: u32 nonce */
    TRL_OP_IDENTIFY = 0x05
} trl_opcode_t;

typedef enum {
    TRL_ACK_OK = 0,
    TRL_ACK_UNKNOWN_COMMAND = 1,
    TRL_ACK_BAD_ARGUMENT = 2,
    TRL_ACK_BUSY = 3
} trl_ack_result_t;

#define TRL_STATE_IDLE 0u
#define TRL_STATE_STREAMING 1u

/* Bytes per sample of a format; 0 for a value that is not a format. */
size_t trl_format_size(trl_format_t format);

/* ---- CRCs (parameters in PROTOCOL.md section 1) -------------------------- */

/* CRC-16/XMODEM of the 8 header bytes. Incremental: start from crc = 0 and
 * pass each result on; there is no final step. */
uint16_t trl_crc16_xmodem_update(uint16_t crc, const void *data, size_t len);
uint16_t trl_crc16_xmodem(const void *data, size_t len);

/* CRC-32/ISO-HDLC (the zlib / Ethernet CRC-32), incremental so a firmware can
 * CRC a frame while it streams out:
 *   uint32_t s = trl_crc32_init(); s = trl_crc32_update(s, p, n); ...;
 *   crc = trl_crc32_final(s);  */
uint32_t trl_crc32_init(void);
uint32_t trl_crc32_update(uint32_t state, const void *data, size_t len);
uint32_t trl_crc32_final(uint32_t state);
uint32_t trl_crc32(const void *data, size_t len);

/* ---- little-endian byte packing ----------------------------------------- */

void trl_put_le16(uint8_t *p, uint16_t v);
void trl_put_le32(uint8_t *p, uint32_t v);
void trl_put_le64(uint8_t *p, uint64_t v);
uint16_t trl_get_le16(const uint8_t *p);
uint32_t trl_get_le32(const uint8_t *p);

/* ---- outgoing frame counter --------------------------------------------- */

/* seq of the next frame sent in the device -> host direction; +1 per frame,
 * wrapping 65535 -> 0. The frame encoders take it and advance it. */
typedef struct {
    uint16_t next;
} trl_seq_t;

void trl_seq_init(trl_seq_t *tx, uint16_t first);
uint16_t trl_seq_peek(const trl_seq_t *tx);
/* Return the current value and advance (for frames built by hand). */
uint16_t trl_seq_take(trl_seq_t *tx);

/* ---- frame encoders ------------------------------------------------------ */
/* All write a complete frame to out[0 .. cap) and return its length in bytes,
 * or 0 when it does not fit in cap or an argument is outside the protocol's
 * limits; after a 0 the contents of out are unspecified and tx is unchanged. */

/* Envelope header for a frame built by hand (e.g. a DATA frame streamed by
 * DMA): magic, version 1, type, seq, length and its CRC-16, 10 bytes. */
void trl_put_header(uint8_t out[TRL_HEADER_SIZE], uint8_t type, uint16_t seq, uint16_t length);

/* Any frame type: copies `payload` (which may already sit at out + 10) and
 * adds header and CRC-32. len <= TRL_MAX_PAYLOAD. */
size_t trl_encode_frame(uint8_t *out, size_t cap, trl_seq_t *tx, uint8_t type,
                        const uint8_t *payload, size_t len);

typedef struct {
    float full_scale_v; /* volts at the positive full-scale code, finite and > 0 */
    uint8_t adc_bits;   /* 1 .. bits of the format (16, 24, 32; 24 for float32) */
} trl_channel_t;

typedef struct {
    uint8_t channels;       /* C, 1 .. 16 */
    trl_format_t format;
    uint32_t rate_milli_hz; /* sample rate x 1000, TRL_MIN_RATE_MILLI_HZ .. TRL_MAX_RATE_MILLI_HZ */
    const char *device_id;  /* NUL-terminated ASCII, at most 16 characters; NULL = empty */
    const char *firmware;   /* likewise */
    trl_channel_t channel[TRL_MAX_CHANNELS]; /* the first `channels` entries are sent */
} trl_info_t;

/* INFO frame: TRL_INFO_FRAME_SIZE(channels) bytes; protocol_version is 1. */
size_t trl_encode_info(uint8_t *out, size_t cap, trl_seq_t *tx, const trl_info_t *info);

/* DATA frame of integer codes: `codes` holds frames x channels int32 values,
 * sample frame major (frame 0 channel 0, frame 0 channel 1, ...). format is
 * TRL_FMT_INT16, _INT24 or _INT32; a code outside the container's range
 * (-32768..32767, -8388608..8388607) makes it return 0. first_sample is the
 * index of the first sample frame since START. */
size_t trl_encode_data(uint8_t *out, size_t cap, trl_seq_t *tx, uint64_t first_sample,
                       uint8_t channels, trl_format_t format, const int32_t *codes,
                       size_t frames);

/* DATA frame of float32 samples in volts, same layout as trl_encode_data. */
size_t trl_encode_data_f32(uint8_t *out, size_t cap, trl_seq_t *tx, uint64_t first_sample,
                           uint8_t channels, const float *volts, size_t frames);

typedef struct {
    uint64_t sample_index;  /* index of the next sample frame to be sent */
    uint16_t overload_mask; /* bit c: channel c reached full scale since the last STATUS */
    uint8_t state;          /* TRL_STATE_IDLE or TRL_STATE_STREAMING */
    uint32_t overruns;      /* cumulative device-side buffer overruns since power-up */
} trl_status_t;

size_t trl_encode_status(uint8_t *out, size_t cap, trl_seq_t *tx, const trl_status_t *status);

typedef struct {
    uint8_t opcode; /* opcode of the command answered */
    uint8_t result; /* trl_ack_result_t */
    uint16_t tag;   /* tag of the command answered */
    uint32_t value; /* PING: the nonce; SET_RATE: the rate set (milli-Hz); otherwise 0 */
} trl_ack_t;

size_t trl_encode_ack(uint8_t *out, size_t cap, trl_seq_t *tx, const trl_ack_t *ack);

/* ---- COMMAND parser (receiver rules of PROTOCOL.md section 1) ------------ */

#define TRL_RX_BUFFER_SIZE 32u
#define TRL_RX_MAX_PAYLOAD (TRL_RX_BUFFER_SIZE - TRL_OVERHEAD) /* 18 */

typedef enum {
    TRL_RX_NONE = 0,    /* nothing ready: feed more bytes */
    TRL_RX_COMMAND = 1, /* an intact, well-formed command: act on it, ACK with result OK */
    TRL_RX_REFUSED = 2  /* an intact COMMAND frame to refuse: ACK with ev.result */
} trl_rx_kind_t;

typedef struct {
    uint16_t seq;      /* frame counter of the COMMAND frame */
    uint8_t opcode;    /* as received (may be an unknown value when refused) */
    uint8_t result;    /* ACK result to send: TRL_ACK_OK, _UNKNOWN_COMMAND or _BAD_ARGUMENT */
    uint16_t tag;      /* to echo in the ACK (0 when the payload is too short to hold one) */
    uint32_t argument; /* SET_RATE: rate in milli-Hz, PING: nonce; otherwise 0 */
} trl_rx_event_t;

typedef struct {
    uint32_t header_crc_errors; /* header check failed where the last good frame said one starts */
    uint32_t frame_crc_errors;  /* header good, CRC-32 failed */
    uint32_t skipped;           /* bytes passed over while looking for a frame */
    uint32_t frames_ok;         /* intact frames of any type */
    uint32_t frames_lost;       /* jumps of the frame counter between intact frames */
    uint32_t ignored;           /* intact frames not for a device: other type or version */
    uint32_t oversize;          /* good headers announcing more than TRL_RX_MAX_PAYLOAD */
} trl_rx_stats_t;

typedef struct {
    uint8_t buf[TRL_RX_BUFFER_SIZE]; /* candidate frame, starting at a magic */
    uint8_t len;                     /* bytes held in buf */
    uint8_t scanned;                 /* bytes of buf already examined */
    uint8_t need;                    /* frame length once the header passed, else 0 */
    uint8_t aligned;                 /* buf[0] is where the last good frame said the next starts */
    uint8_t have_seq;
    uint16_t last_seq;
    trl_rx_stats_t stats;
} trl_rx_t;

void trl_rx_init(trl_rx_t *rx);
/* Forget the framing state (after a reconnect); counters are kept. */
void trl_rx_reset(trl_rx_t *rx);
/* Hand the parser one received byte. Returns the first event it completes
 * (filled into *ev), or TRL_RX_NONE. Then call trl_rx_poll until TRL_RX_NONE. */
trl_rx_kind_t trl_rx_push(trl_rx_t *rx, uint8_t byte, trl_rx_event_t *ev);
/* Next event from bytes already held, or TRL_RX_NONE. */
trl_rx_kind_t trl_rx_poll(trl_rx_t *rx, trl_rx_event_t *ev);
/* Buffer form: takes bytes of data[0 .. len) until an event is ready, sets
 * *used to the bytes taken and returns the event; returns TRL_RX_NONE (with
 * *used == len) only when everything was taken and nothing is pending:
 *   while ((k = trl_rx_feed(&rx, p, n, &used, &ev)) != TRL_RX_NONE) {
 *       p += used; n -= used; handle(k, &ev); }  */
trl_rx_kind_t trl_rx_feed(trl_rx_t *rx, const uint8_t *data, size_t len, size_t *used,
                          trl_rx_event_t *ev);

/* The ACK answering ev: its opcode, tag and result; value as given for a
 * command, 0 for a refused one. */
trl_ack_t trl_ack_for(const trl_rx_event_t *ev, uint32_t value);

#ifdef __cplusplus
}
#endif

#endif /* TAPRIG_LINK_H */
