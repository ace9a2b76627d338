/*
 * dcrig_vectors.c - line-oriented test driver for dcrig_link.c, so tests can compare the C
 * library byte for byte with reference implementations. Owns no protocol logic.
 *
 * stdin, one command per line, data in hex (empty data is "-"):
 *   crc HEX       -> CRC-16/IBM-3740 as 4 hex digits
 *   cobs HEX      -> COBS encoding
 *   uncobs HEX    -> decoded bytes, or "error"
 *   wire HEX      -> CRC + COBS + delimiter of a frame (header + body)
 *   deframe HEX   -> one line per valid frame "frame HEX", then
 *                    "stats frames=.. crc_errors=.. cobs_errors=.. oversize=.. runts=.. garbage_bytes=.."
 *   hello ROLE ENC PERIOD_US -> wire bytes of a HELLO
 */
#define _POSIX_C_SOURCE 200809L
#include <stdio.h>
#include <string.h>

#include "dcrig_link.h"

static uint8_t in[8192], out[8192];
static dcrig_deframer_t d;

static size_t from_hex(const char *s, uint8_t *dst, size_t cap)
{
    size_t n = 0;
    if (strcmp(s, "-") == 0) return 0;
    while (s[0] && s[1] && n < cap) {
        unsigned v;
        if (sscanf(s, "%2x", &v) != 1) break;
        dst[n++] = (uint8_t)v;
        s += 2;
    }
    return n;
}

static void put_hex(const uint8_t *p, size_t n)
{
    size_t i;
    if (n == 0) fputs("-", stdout);
    for (i = 0; i < n; i++) printf("%02x", p[i]);
    putchar('\n');
}

int main(void)
{
    static char line[20000];
    char cmd[16], arg[17000];
    while (fgets(line, sizeof line, stdin)) {
        unsigned role, enc;
        unsigned long period;
        size_t n, m = 0;
        if (sscanf(line, "hello %u %u %lu", &role, &enc, &period) == 3) {
            put_hex(out, dcrig_pack_hello((uint8_t)role, (uint8_t)enc, (uint32_t)period, 0xFFFFu, out, sizeof out));
            continue;
        }
        if (sscanf(line, "%15s %16999s", cmd, arg) != 2) continue;
        n = from_hex(arg, in, sizeof in);
        if (strcmp(cmd, "crc") == 0) {
            printf("%04x\n", dcrig_crc16(in, n));
        } else if (strcmp(cmd, "cobs") == 0) {
            put_hex(out, dcrig_cobs_encode(in, n, out, sizeof out));
        } else if (strcmp(cmd, "uncobs") == 0) {
            if (dcrig_cobs_decode(in, n, out, sizeof out, &m) == DCRIG_OK) put_hex(out, m);
            else puts("error");
        } else if (strcmp(cmd, "wire") == 0) {
            put_hex(out, dcrig_wire_from_frame(in, n, out, sizeof out));
        } else if (strcmp(cmd, "deframe") == 0) {
            size_t i;
            dcrig_deframer_init(&d);
            for (i = 0; i < n; i++) {
                if (dcrig_deframer_push(&d, in[i])) {
                    fputs("frame ", stdout);
                    put_hex(dcrig_deframer_frame(&d), d.frame_len);
                }
            }
            printf("stats frames=%lu crc_errors=%lu cobs_errors=%lu oversize=%lu runts=%lu garbage_bytes=%lu\n",
                   (unsigned long)d.frames, (unsigned long)d.crc_errors, (unsigned long)d.cobs_errors,
                   (unsigned long)d.oversize, (unsigned long)d.runts, (unsigned long)d.garbage_bytes);
        }
        fflush(stdout);
    }
    return 0;
}
