/*
 * vectors_main.c - host program around taprig_link.c: golden vectors and checks.
 *
 *   vectors_main OUTDIR               write the device -> host golden vectors
 *                                     (the .bin files of firmware_protocol/vectors/)
 *   vectors_main --parse FILE [--chunk N]
 *                                     parse a host -> device COMMAND stream; one line
 *                                     per command or refused command, then the counters.
 *                                     N = 0 (default): the whole file to trl_rx_feed;
 *                                     N = 1: trl_rx_push / trl_rx_poll byte by byte;
 *                                     N > 1: trl_rx_feed in chunks of N bytes.
 *   vectors_main --selftest           CRC check values and encoder edge cases
 *   vectors_main --crc FILE           both CRCs of a file, one-shot and incremental
 *
 * Built and run by tests/firmware_protocol/test_c_reference.py, which compares
 * every byte and line with the Python implementation.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "taprig_link.h"

static uint8_t frame_buf[TRL_MAX_FRAME];

/* ---- golden vectors (values listed in vectors/manifest.json) ------------- */

static int write_file(const char *dir, const char *name, const uint8_t *data, size_t len)
{
    char path[4096];
    FILE *f;
    int ok;
    if (len == 0u) {
        fprintf(stderr, "vectors_main: %s: the encoder refused its arguments\n", name);
        return 0;
    }
    if ((size_t)snprintf(path, sizeof path, "%s/%s", dir, name) >= sizeof path) {
        fprintf(stderr, "vectors_main: output path too long\n");
        return 0;
    }
    f = fopen(path, "wb");
    if (f == NULL) {
        perror(path);
        return 0;
    }
    ok = fwrite(data, 1, len, f) == len;
    ok = (fclose(f) == 0) && ok;
    if (!ok)
        perror(path);
    return ok;
}

static int write_vectors(const char *dir)
{
    /* One device session: every frame takes the next seq, 0 to 6. */
    static const int32_t int16_codes[] = {0, -1, 32767, -32768, 1234, -1234, 100, 200};
    static const int32_t int24_codes[] = {0,        1,      -1,      8388607,
                                          -8388608, 123456, -123456, 42,
                                          7,        -7,     65536,   -65536};
    static const int32_t int32_codes[] = {INT32_MAX, INT32_MIN, 0, -19088744};
    static const float f32_volts[] = {0.5f, -0.25f, 1.0f, -1.0f, 3.0517578125e-05f, 0.0f};
    trl_seq_t tx;
    trl_info_t info;
    trl_status_t status;
    trl_ack_t ack;
    unsigned c;
    size_t cap = sizeof frame_buf;
    int ok = 1;

    trl_seq_init(&tx, 0u);
    memset(&info, 0, sizeof info);
    info.channels = 4u;
    info.format = TRL_FMT_INT24;
    info.rate_milli_hz = 51200000ul;
    info.device_id = "TR-REF-01";
    info.firmware = "1.0.0";
    for (c = 0; c < info.channels; ++c) {
        info.channel[c].full_scale_v = 5.0f;
        info.channel[c].adc_bits = 24u;
    }
    ok = ok && write_file(dir, "info_4ch_int24.bin", frame_buf,
                          trl_encode_info(frame_buf, cap, &tx, &info));
    ok = ok && write_file(dir, "data_int16.bin", frame_buf,
                          trl_encode_data(frame_buf, cap, &tx, 1000u, 2u, TRL_FMT_INT16,
                                          int16_codes, 4u));
    ok = ok && write_file(dir, "data_int24.bin", frame_buf,
                          trl_encode_data(frame_buf, cap, &tx, 4294967296ull, 4u, TRL_FMT_INT24,
                                          int24_codes, 3u));
    ok = ok && write_file(dir, "data_int32.bin", frame_buf,
                          trl_encode_data(frame_buf, cap, &tx, 5u, 1u, TRL_FMT_INT32,
                                          int32_codes, 4u));
    ok = ok && write_file(dir, "data_float32.bin", frame_buf,
                          trl_encode_data_f32(frame_buf, cap, &tx, 7u, 2u, f32_volts, 3u));
    status.sample_index = 123456789u;
    status.overload_mask = 0x0005u;
    status.state = TRL_STATE_STREAMING;
    status.overruns = 3u;
    ok = ok && write_file(dir, "status.bin", frame_buf,
                          trl_encode_status(frame_buf, cap, &tx, &status));
    ack.opcode = (uint8_t)TRL_OP_PING;
    ack.result = (uint8_t)TRL_ACK_OK;
    ack.tag = 0xBEEFu;
    ack.value = 0xDEADBEEFul;
    ok = ok && write_file(dir, "ack.bin", frame_buf, trl_encode_ack(frame_buf, cap, &tx, &ack));
    return ok ? 0 : 1;
}

/* ---- COMMAND stream parsing ---------------------------------------------- */

static uint8_t *read_file(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    uint8_t *data = NULL;
    size_t size = 0u;
    size_t got;
    uint8_t chunk[4096];
    if (f == NULL) {
        perror(path);
        return NULL;
    }
    while ((got = fread(chunk, 1, sizeof chunk, f)) > 0u) {
        uint8_t *grown = (uint8_t *)realloc(data, size + got);
        if (grown == NULL) {
            free(data);
            fclose(f);
            return NULL;
        }
        data = grown;
        memcpy(data + size, chunk, got);
        size += got;
    }
    fclose(f);
    if (data == NULL)
        data = (uint8_t *)malloc(1u); /* an empty file is a valid, empty stream */
    *len = size;
    return data;
}

static void print_event(trl_rx_kind_t kind, const trl_rx_event_t *ev)
{
    if (kind == TRL_RX_COMMAND)
        printf("seq=%u opcode=%u tag=%u arg=%lu\n", (unsigned)ev->seq, (unsigned)ev->opcode,
               (unsigned)ev->tag, (unsigned long)ev->argument);
    else
        printf("refused opcode=%u tag=%u result=%u\n", (unsigned)ev->opcode, (unsigned)ev->tag,
               (unsigned)ev->result);
}

static int parse_stream(const char *path, size_t chunk)
{
    trl_rx_t rx;
    trl_rx_event_t ev;
    trl_rx_kind_t kind;
    size_t len = 0u;
    size_t off = 0u;
    uint8_t *data = read_file(path, &len);
    if (data == NULL)
        return 1;
    trl_rx_init(&rx);
    if (chunk == 1u) {
        /* The interrupt-style loop of the header comment. */
        for (off = 0u; off < len; ++off)
            for (kind = trl_rx_push(&rx, data[off], &ev); kind != TRL_RX_NONE;
                 kind = trl_rx_poll(&rx, &ev))
                print_event(kind, &ev);
    } else {
        size_t step = chunk == 0u ? len : chunk;
        while (off < len) {
            size_t n = len - off < step ? len - off : step;
            const uint8_t *p = data + off;
            size_t used;
            off += n;
            while ((kind = trl_rx_feed(&rx, p, n, &used, &ev)) != TRL_RX_NONE) {
                p += used;
                n -= used;
                print_event(kind, &ev);
            }
        }
    }
    printf("header_crc_errors=%lu frame_crc_errors=%lu skipped=%lu\n",
           (unsigned long)rx.stats.header_crc_errors, (unsigned long)rx.stats.frame_crc_errors,
           (unsigned long)rx.stats.skipped);
    free(data);
    return 0;
}

/* ---- self-test: CRC check values and encoder edge cases ------------------ */

static void print_case(const char *name, size_t cap, size_t len, const uint8_t *data)
{
    size_t i;
    printf("case %s cap=%lu len=%lu ", name, (unsigned long)cap, (unsigned long)len);
    if (len == 0u)
        printf("-");
    for (i = 0; i < len; ++i)
        printf("%02x", (unsigned)data[i]);
    printf("\n");
}

/* An INFO of `channels` channels, int24 at 48 kHz, 2.5 V and 24 bits each. */
static void base_info(trl_info_t *info, uint8_t channels)
{
    unsigned c;
    memset(info, 0, sizeof *info);
    info->channels = channels;
    info->format = TRL_FMT_INT24;
    info->rate_milli_hz = 48000000ul;
    info->device_id = "EDGE";
    info->firmware = "0.1";
    for (c = 0; c < TRL_MAX_CHANNELS; ++c) {
        info->channel[c].full_scale_v = 2.5f;
        info->channel[c].adc_bits = 24u;
    }
}

static void info_case(const char *name, const trl_info_t *info)
{
    trl_seq_t tx;
    trl_seq_init(&tx, 20u);
    print_case(name, sizeof frame_buf, trl_encode_info(frame_buf, sizeof frame_buf, &tx, info),
               frame_buf);
}

static void data_case(const char *name, size_t cap, uint8_t channels, trl_format_t format,
                      const int32_t *codes, size_t frames)
{
    trl_seq_t tx;
    trl_seq_init(&tx, 30u);
    print_case(name, cap,
               trl_encode_data(frame_buf, cap, &tx, 77u, channels, format, codes, frames),
               frame_buf);
}

static void selftest(void)
{
    static const char check[] = "123456789";
    static int32_t many[4u * 4091u];
    /* Infinities, negative zero, the smallest and largest subnormal, the largest
     * finite value: the bits must come through unchanged. */
    static const float specials[] = {INFINITY, -INFINITY, -0.0f, 0x1p-149f,
                                     3.4028234663852886e38f, -0x1.fffffcp-127f};
    uint32_t s;
    size_t i;
    trl_info_t info;
    trl_ack_t ack;
    trl_seq_t tx;
    size_t n1;
    size_t n2;
    static const int32_t over16[] = {32768};
    static const int32_t under16[] = {-32769};
    static const int32_t over24[] = {8388608};
    static const int32_t under24[] = {-8388609};
    static const int32_t edges16[] = {32767, -32768};

    printf("crc16_xmodem_check=0x%04X\n", (unsigned)trl_crc16_xmodem(check, 9u));
    printf("crc32_iso_hdlc_check=0x%08lX\n", (unsigned long)trl_crc32(check, 9u));
    s = trl_crc32_init();
    s = trl_crc32_update(s, check, 4u);
    s = trl_crc32_update(s, check + 4, 0u);
    s = trl_crc32_update(s, check + 4, 5u);
    printf("crc32_incremental_check=0x%08lX\n", (unsigned long)trl_crc32_final(s));
    printf("crc16_incremental_check=0x%04X\n",
           (unsigned)trl_crc16_xmodem_update(trl_crc16_xmodem_update(0u, check, 2u), check + 2,
                                             7u));

    /* Sample codes: a deterministic spread over the int16 range. */
    for (i = 0; i < sizeof many / sizeof many[0]; ++i)
        many[i] = (int32_t)((i * 7919u) % 65536u) - 32768;

    data_case("int16_edges", 64u, 1u, TRL_FMT_INT16, edges16, 2u);
    data_case("int16_over", 64u, 1u, TRL_FMT_INT16, over16, 1u);
    data_case("int16_under", 64u, 1u, TRL_FMT_INT16, under16, 1u);
    data_case("int24_over", 64u, 1u, TRL_FMT_INT24, over24, 1u);
    data_case("int24_under", 64u, 1u, TRL_FMT_INT24, under24, 1u);
    data_case("int16_1ch_4090", sizeof frame_buf, 1u, TRL_FMT_INT16, many, 4090u);
    data_case("int16_1ch_4091", sizeof frame_buf, 1u, TRL_FMT_INT16, many, 4091u);
    data_case("int24_4ch_681", sizeof frame_buf, 4u, TRL_FMT_INT24, many, 681u);
    data_case("int24_4ch_682", sizeof frame_buf, 4u, TRL_FMT_INT24, many, 682u);
    data_case("int24_2ch_0", 64u, 2u, TRL_FMT_INT24, many, 0u);
    data_case("int16_2ch_cap_exact", TRL_DATA_FRAME_SIZE(3u, 2u, 2u), 2u, TRL_FMT_INT16, many,
              3u);
    data_case("int16_2ch_cap_short", TRL_DATA_FRAME_SIZE(3u, 2u, 2u) - 1u, 2u, TRL_FMT_INT16,
              many, 3u);

    trl_seq_init(&tx, 40u);
    print_case("f32_specials", 64u,
               trl_encode_data_f32(frame_buf, 64u, &tx, 0u, 3u, specials, 2u), frame_buf);

    base_info(&info, 16u);
    info_case("info_16ch", &info);
    base_info(&info, 17u);
    info_case("info_17ch", &info);
    base_info(&info, 1u);
    info.rate_milli_hz = 999ul;
    info_case("info_rate_999", &info);
    info.rate_milli_hz = 1000ul;
    info_case("info_rate_1000", &info);
    info.rate_milli_hz = 1000000000ul;
    info_case("info_rate_1e9", &info);
    info.rate_milli_hz = 1000000001ul;
    info_case("info_rate_1e9_plus_1", &info);
    base_info(&info, 1u);
    info.device_id = "ABCDEFGHIJKLMNOP";
    info_case("info_id_16", &info);
    info.device_id = "ABCDEFGHIJKLMNOPQ";
    info_case("info_id_17", &info);
    info.device_id = "caf\xC3\xA9";
    info_case("info_id_non_ascii", &info);
    base_info(&info, 2u);
    info.format = TRL_FMT_INT16;
    info.channel[0].adc_bits = 12u; /* a 12-bit converter sent as int16 */
    info.channel[1].adc_bits = 16u;
    info_case("info_int16_bits_16", &info);
    info.channel[1].adc_bits = 17u;
    info_case("info_int16_bits_17", &info);
    info.channel[1].adc_bits = 0u;
    info_case("info_int16_bits_0", &info);
    info.format = TRL_FMT_INT32;
    info.channel[1].adc_bits = 32u;
    info_case("info_int32_bits_32", &info);
    info.format = TRL_FMT_FLOAT32;
    info.channel[1].adc_bits = 24u;
    info_case("info_float32_bits_24", &info);
    info.channel[1].adc_bits = 25u;
    info_case("info_float32_bits_25", &info);
    base_info(&info, 2u);
    info.channel[1].full_scale_v = 0.0f;
    info_case("info_fs_zero", &info);
    info.channel[1].full_scale_v = -1.0f;
    info_case("info_fs_negative", &info);
    info.channel[1].full_scale_v = INFINITY;
    info_case("info_fs_inf", &info);
    info.channel[1].full_scale_v = 0x1p-149f;
    info_case("info_fs_subnormal", &info);

    /* The counter wraps 65535 -> 0, and a refused frame does not use a seq. */
    ack.opcode = (uint8_t)TRL_OP_STOP;
    ack.result = (uint8_t)TRL_ACK_BUSY;
    ack.tag = 0x0102u;
    ack.value = 0u;
    trl_seq_init(&tx, 65535u);
    n1 = trl_encode_ack(frame_buf, sizeof frame_buf, &tx, &ack);
    n2 = trl_encode_ack(frame_buf + n1, sizeof frame_buf - n1, &tx, &ack);
    print_case("ack_wrap", sizeof frame_buf, n1 != 0u && n2 != 0u ? n1 + n2 : 0u, frame_buf);
    trl_seq_init(&tx, 7u);
    n1 = trl_encode_data(frame_buf, 64u, &tx, 0u, 1u, TRL_FMT_INT16, over16, 1u);
    n2 = trl_encode_ack(frame_buf, TRL_ACK_FRAME_SIZE - 1u, &tx, &ack);
    print_case("ack_after_refusals", TRL_ACK_FRAME_SIZE, n1 == 0u && n2 == 0u
               ? trl_encode_ack(frame_buf, TRL_ACK_FRAME_SIZE, &tx, &ack) : 0u, frame_buf);
}

static int crc_file(const char *path)
{
    size_t len = 0u;
    size_t off = 0u;
    size_t step = 1u;
    uint16_t c16 = 0u;
    uint32_t s = trl_crc32_init();
    uint8_t *data = read_file(path, &len);
    if (data == NULL)
        return 1;
    /* Incremental: pieces of 1, 2, ... 13 bytes, over and over. */
    while (off < len) {
        size_t n = len - off < step ? len - off : step;
        s = trl_crc32_update(s, data + off, n);
        c16 = trl_crc16_xmodem_update(c16, data + off, n);
        off += n;
        step = step % 13u + 1u;
    }
    printf("crc16_xmodem=0x%04X crc32_iso_hdlc=0x%08lX crc16_pieces=0x%04X crc32_pieces=0x%08lX\n",
           (unsigned)trl_crc16_xmodem(data, len), (unsigned long)trl_crc32(data, len),
           (unsigned)c16, (unsigned long)trl_crc32_final(s));
    free(data);
    return 0;
}

static void usage(void)
{
    fprintf(stderr, "usage: vectors_main OUTDIR\n"
                    "       vectors_main --parse FILE [--chunk N]\n"
                    "       vectors_main --selftest\n"
                    "       vectors_main --crc FILE\n");
}

int main(int argc, char **argv)
{
    if (argc == 2 && strcmp(argv[1], "--selftest") == 0) {
        selftest();
        return 0;
    }
    if (argc == 3 && strcmp(argv[1], "--crc") == 0)
        return crc_file(argv[2]);
    if ((argc == 3 || argc == 5) && strcmp(argv[1], "--parse") == 0) {
        size_t chunk = 0u;
        if (argc == 5) {
            char *end = NULL;
            unsigned long v;
            if (strcmp(argv[3], "--chunk") != 0) {
                usage();
                return 2;
            }
            v = strtoul(argv[4], &end, 10);
            if (end == argv[4] || *end != '\0') {
                usage();
                return 2;
            }
            chunk = (size_t)v;
        }
        return parse_stream(argv[2], chunk);
    }
    if (argc == 2 && argv[1][0] != '-')
        return write_vectors(argv[1]);
    usage();
    return 2;
}
