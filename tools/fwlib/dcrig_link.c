/*
 * dcrig_link.c - implementation of dcrig_link.h (dcrig link protocol, version 1).
 * Owns the byte-exact layouts; host/link/frames.py must produce the same bytes.
 * Must never include OS headers or allocate memory.
 */
#include "dcrig_link.h"

#include <string.h>

#define HEADER_LEN 3u
#define CRC_LEN 2u
#define KB(enc, kind) ((uint8_t)((DCRIG_PROTOCOL_VERSION << 4) | ((unsigned)(enc) << 3) | (unsigned)(kind)))

/* Body lengths (after the header) */
#define COMMAND_BODY 14u
#define FEEDBACK_BODY_FIXED 41u
#define FEEDBACK_BODY_F32 43u
#define TRIP_BODY 10u
#define CONTROL_HEAD 6u
#define HELLO_HEAD 12u

const char *dcrig_strerror(int status)
{
    switch (status) {
    case DCRIG_OK: return "ok";
    case DCRIG_E_SPACE: return "output buffer too small";
    case DCRIG_E_COBS: return "invalid COBS";
    case DCRIG_E_CRC: return "CRC mismatch";
    case DCRIG_E_LENGTH: return "frame length does not fit its kind";
    case DCRIG_E_KIND: return "unexpected frame kind";
    case DCRIG_E_VERSION: return "other protocol version";
    case DCRIG_E_ENCODING: return "encoding mismatch";
    case DCRIG_E_SIGNALS: return "signal table differs";
    case DCRIG_E_ROLE: return "HELLO from the wrong role";
    case DCRIG_E_PAYLOAD: return "peer max payload too small";
    default: return "unknown status";
    }
}

/* ---- CRC-16/IBM-3740: poly 0x1021, init 0xFFFF, no reflection, xorout 0 ----------------- */
uint16_t dcrig_crc16_update(uint16_t crc, const uint8_t *data, size_t n)
{
    size_t i;
    for (i = 0; i < n; i++) {
        unsigned b;
        crc = (uint16_t)(crc ^ ((uint16_t)data[i] << 8));
        for (b = 0; b < 8u; b++) {
            crc = (crc & 0x8000u) ? (uint16_t)((crc << 1) ^ 0x1021u) : (uint16_t)(crc << 1);
        }
    }
    return crc;
}

uint16_t dcrig_crc16(const uint8_t *data, size_t n) { return dcrig_crc16_update(0xFFFFu, data, n); }

/* ---- Streaming writer: payload bytes -> CRC + COBS into the caller's buffer ------------- */
typedef struct {
    uint8_t *dst;
    size_t cap, pos, code_pos;
    uint8_t code, just_full, overflow;
    uint16_t crc;
} writer_t;

static void w_begin(writer_t *w, uint8_t *dst, size_t cap)
{
    w->dst = dst;
    w->cap = cap;
    w->code_pos = 0;
    w->pos = 1; /* byte 0 is reserved for the first code */
    w->code = 1;
    w->just_full = 0;
    w->overflow = (uint8_t)(cap < 1u);
    w->crc = 0xFFFFu;
}

static void w_close_block(writer_t *w)
{
    if (w->code_pos < w->cap) w->dst[w->code_pos] = w->code;
    w->code_pos = w->pos++;
    w->code = 1;
}

static void w_cobs(writer_t *w, uint8_t b)
{
    if (b == 0u) {
        w_close_block(w);
        w->just_full = 0;
        return;
    }
    if (w->pos < w->cap) w->dst[w->pos] = b; else w->overflow = 1;
    w->pos++;
    w->code++;
    w->just_full = 0;
    if (w->code == 0xFFu) {
        w_close_block(w);
        w->just_full = 1;
    }
}

static void w_u8(writer_t *w, uint8_t b)
{
    w->crc = dcrig_crc16_update(w->crc, &b, 1u);
    w_cobs(w, b);
}
static void w_u16(writer_t *w, uint16_t v)
{
    w_u8(w, (uint8_t)(v & 0xFFu));
    w_u8(w, (uint8_t)(v >> 8));
}
static void w_u32(writer_t *w, uint32_t v)
{
    w_u16(w, (uint16_t)(v & 0xFFFFu));
    w_u16(w, (uint16_t)(v >> 16));
}
static void w_i32(writer_t *w, int32_t v) { w_u32(w, (uint32_t)v); }
static void w_bytes(writer_t *w, const uint8_t *p, size_t n)
{
    size_t i;
    for (i = 0; i < n; i++) w_u8(w, p[i]);
}

/* Ends the COBS sequence; a last block that is exactly full needs no code byte after it. */
static size_t w_end_cobs(writer_t *w)
{
    if (w->just_full) {
        w->pos--;
    } else if (w->code_pos < w->cap) {
        w->dst[w->code_pos] = w->code;
    } else {
        w->overflow = 1;
    }
    if (w->pos > w->cap) w->overflow = 1;
    return w->overflow ? 0u : w->pos;
}

static size_t w_finish(writer_t *w)
{
    uint16_t crc = w->crc;
    size_t n;
    w_cobs(w, (uint8_t)(crc & 0xFFu));
    w_cobs(w, (uint8_t)(crc >> 8));
    n = w_end_cobs(w);
    if (n == 0u || n >= w->cap) return 0u;
    w->dst[n] = 0u;
    return n + 1u;
}

size_t dcrig_cobs_encode(const uint8_t *src, size_t n, uint8_t *dst, size_t cap)
{
    writer_t w;
    size_t i;
    w_begin(&w, dst, cap);
    for (i = 0; i < n; i++) w_cobs(&w, src[i]);
    return w_end_cobs(&w);
}

int dcrig_cobs_decode(const uint8_t *src, size_t n, uint8_t *dst, size_t cap, size_t *out_n)
{
    size_t i = 0, o = 0;
    while (i < n) {
        uint8_t code = src[i];
        size_t k;
        if (code == 0u || i + code > n) return DCRIG_E_COBS;
        i++;
        for (k = 1; k < code; k++) {
            if (src[i] == 0u) return DCRIG_E_COBS;
            if (o >= cap) return DCRIG_E_SPACE;
            dst[o++] = src[i++];
        }
        if (code != 0xFFu && i < n) {
            if (o >= cap) return DCRIG_E_SPACE;
            dst[o++] = 0u;
        }
    }
    *out_n = o;
    return DCRIG_OK;
}

size_t dcrig_wire_from_frame(const uint8_t *frame, size_t n, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_bytes(&w, frame, n);
    return w_finish(&w);
}

/* ---- Little-endian readers -------------------------------------------------------------- */
static uint16_t r_u16(const uint8_t *p) { return (uint16_t)(p[0] | ((unsigned)p[1] << 8)); }
static uint32_t r_u32(const uint8_t *p)
{
    return (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) | ((uint32_t)p[3] << 24);
}
static int32_t r_i32(const uint8_t *p)
{
    uint32_t u = r_u32(p);
    /* two's complement without implementation-defined conversion */
    return (u & 0x80000000u) ? (int32_t)(-(int32_t)(~u) - 1) : (int32_t)u;
}

/* ---- Signal table: the same rows as host/link/frames.py _LAYOUT --------------------------- */
enum { T_U8 = 1, T_U16 = 2, T_U32 = 3, T_I32 = 4, T_F32 = 5, T_BIT = 6, T_TEXT = 7 };
typedef struct {
    uint8_t kind, t_fix, t_flt;
    int8_t exp10;
    uint8_t bit, ends_byte; /* bits share one flags byte; the last one advances the offset */
    const char *name, *unit;
} row_t;

static const row_t ROWS[] = {
    {DCRIG_KIND_COMMAND, T_U8, T_U8, 0, 0, 1, "mode", "-"},
    {DCRIG_KIND_COMMAND, T_U8, T_U8, 0, 0, 1, "bridge_select", "-"},
    {DCRIG_KIND_COMMAND, T_U8, T_U8, 0, 0, 1, "field_mode", "-"},
    {DCRIG_KIND_COMMAND, T_BIT, T_BIT, 0, 0, 0, "contactor", "-"},
    {DCRIG_KIND_COMMAND, T_BIT, T_BIT, 0, 1, 1, "trip", "-"},
    {DCRIG_KIND_COMMAND, T_I32, T_F32, -2, 0, 1, "armature_cmd", "deg|V|A"},
    {DCRIG_KIND_COMMAND, T_I32, T_F32, -2, 0, 1, "field_cmd", "deg|V"},
    {DCRIG_KIND_COMMAND, T_U16, T_U16, 0, 0, 1, "trip_code", "-"},
    {DCRIG_KIND_FEEDBACK, T_U16, T_U16, 0, 0, 1, "ack_seq", "-"},
    {DCRIG_KIND_FEEDBACK, T_U32, T_U32, 0, 0, 1, "model_time_us", "us"},
    {DCRIG_KIND_FEEDBACK, T_I32, T_F32, -2, 0, 1, "armature_current_A", "A"},
    {DCRIG_KIND_FEEDBACK, T_I32, T_F32, -3, 0, 1, "field_current_A", "A"},
    {DCRIG_KIND_FEEDBACK, T_I32, T_F32, -2, 0, 1, "armature_voltage_V", "V"},
    {DCRIG_KIND_FEEDBACK, T_I32, T_F32, -3, 0, 1, "tacho_voltage_V", "V"},
    {DCRIG_KIND_FEEDBACK, T_I32, T_I32, 0, 0, 1, "encoder_count", "count"},
    {DCRIG_KIND_FEEDBACK, T_U16, T_F32, -2, 0, 1, "mains_angle_deg", "deg"},
    {DCRIG_KIND_FEEDBACK, T_I32, T_F32, -2, 0, 1, "mains_voltage_V", "V"},
    {DCRIG_KIND_FEEDBACK, T_I32, T_F32, -2, 0, 1, "op_speed_ref_rpm", "rpm"},
    {DCRIG_KIND_FEEDBACK, T_U32, T_U32, 0, 0, 1, "host_status", "-"},
    {DCRIG_KIND_FEEDBACK, T_BIT, T_BIT, 0, 0, 0, "contactor_closed", "-"},
    {DCRIG_KIND_FEEDBACK, T_BIT, T_BIT, 0, 1, 0, "op_run", "-"},
    {DCRIG_KIND_FEEDBACK, T_BIT, T_BIT, 0, 2, 1, "op_stop", "-"},
    {DCRIG_KIND_TRIP, T_U16, T_U16, 0, 0, 1, "trip_code", "-"},
    {DCRIG_KIND_TRIP, T_U32, T_U32, 0, 0, 1, "controller_time_us", "us"},
    {DCRIG_KIND_TRIP, T_I32, T_F32, -2, 0, 1, "detail", "A|rpm|V"},
    {DCRIG_KIND_CONTROL, T_U8, T_U8, 0, 0, 1, "op", "-"},
    {DCRIG_KIND_CONTROL, T_I32, T_F32, -2, 0, 1, "value", "-|rpm"},
    {DCRIG_KIND_CONTROL, T_TEXT, T_TEXT, 0, 0, 1, "text", "utf-8"},
};
#define N_ROWS (sizeof ROWS / sizeof ROWS[0])

static uint8_t type_size(uint8_t t)
{
    switch (t) {
    case T_U16: return 2u;
    case T_U32: case T_I32: case T_F32: return 4u;
    default: return 1u; /* u8, flags byte, text length byte */
    }
}

/* Walks the table for one encoding, yielding (type, exp10, offset) of row i. */
typedef struct {
    uint8_t kind, offset;
} walk_t;

static void row_view(const row_t *r, uint8_t encoding, walk_t *wk, uint8_t *type, int8_t *exp10,
                     uint8_t *offset)
{
    if (r->kind != wk->kind) {
        wk->kind = r->kind;
        wk->offset = 0;
    }
    *type = encoding == DCRIG_ENC_FIXED ? r->t_fix : r->t_flt;
    *exp10 = *type == T_F32 ? 0 : r->exp10;
    *offset = wk->offset;
    if (r->ends_byte) wk->offset = (uint8_t)(wk->offset + type_size(*type));
}

size_t dcrig_pack_hello(uint8_t role, uint8_t encoding, uint32_t frame_period_us, uint16_t seq,
                        uint8_t *wire, size_t cap)
{
    writer_t w;
    walk_t wk = {0, 0};
    size_t i;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(0, DCRIG_KIND_HELLO));
    w_u16(&w, seq);
    w_u8(&w, (uint8_t)DCRIG_PROTOCOL_VERSION);
    w_u8(&w, role);
    w_u8(&w, encoding);
    w_u8(&w, (uint8_t)N_ROWS);
    w_u32(&w, frame_period_us);
    w_u16(&w, (uint16_t)DCRIG_MAX_PAYLOAD);
    w_u16(&w, 0u);
    for (i = 0; i < N_ROWS; i++) {
        uint8_t t, off;
        int8_t e;
        size_t ln = strlen(ROWS[i].name), lu = strlen(ROWS[i].unit);
        row_view(&ROWS[i], encoding, &wk, &t, &e, &off);
        w_u8(&w, ROWS[i].kind);
        w_u8(&w, t);
        w_u8(&w, (uint8_t)e);
        w_u8(&w, off);
        w_u8(&w, ROWS[i].bit);
        w_u8(&w, (uint8_t)ln);
        w_bytes(&w, (const uint8_t *)ROWS[i].name, ln);
        w_u8(&w, (uint8_t)lu);
        w_bytes(&w, (const uint8_t *)ROWS[i].unit, lu);
    }
    if (role == DCRIG_ROLE_HOST) { /* the sensor block: a controller never sends one; 0 = not given */
        w_u32(&w, 0u);
        w_u32(&w, 0u);
    }
    return w_finish(&w);
}

int dcrig_check_hello(const uint8_t *frame, size_t n, uint8_t expect_role, uint8_t encoding,
                      dcrig_hello_t *h)
{
    walk_t wk = {0, 0};
    size_t pos = HEADER_LEN + HELLO_HEAD, i;
    if (n < pos) return DCRIG_E_LENGTH;
    if ((frame[0] & 0x07u) != DCRIG_KIND_HELLO) return DCRIG_E_KIND;
    h->protocol_version = frame[3];
    h->role = frame[4];
    h->encoding = frame[5];
    h->n_signals = frame[6];
    h->frame_period_us = r_u32(frame + 7);
    h->max_payload = r_u16(frame + 11);
    h->tacho_uV_per_rpm = 0u;
    h->encoder_counts_per_rev = 0u;
    if ((frame[0] >> 4) != DCRIG_PROTOCOL_VERSION || h->protocol_version != DCRIG_PROTOCOL_VERSION)
        return DCRIG_E_VERSION;
    if (h->role != expect_role) return DCRIG_E_ROLE;
#ifndef DCRIG_WITH_FLOAT32
    if (encoding != DCRIG_ENC_FIXED) return DCRIG_E_ENCODING;
#endif
    if (h->encoding != encoding) return DCRIG_E_ENCODING;
    if (h->max_payload < DCRIG_MIN_PEER_PAYLOAD) return DCRIG_E_PAYLOAD;
    if (h->n_signals != N_ROWS) return DCRIG_E_SIGNALS;
    for (i = 0; i < N_ROWS; i++) {
        uint8_t t, off;
        int8_t e;
        size_t ln = strlen(ROWS[i].name), lu = strlen(ROWS[i].unit);
        row_view(&ROWS[i], encoding, &wk, &t, &e, &off);
        if (pos + 6u > n) return DCRIG_E_SIGNALS;
        if (frame[pos] != ROWS[i].kind || frame[pos + 1] != t || frame[pos + 2] != (uint8_t)e ||
            frame[pos + 3] != off || frame[pos + 4] != ROWS[i].bit || frame[pos + 5] != ln)
            return DCRIG_E_SIGNALS;
        pos += 6u;
        if (pos + ln + 1u > n || memcmp(frame + pos, ROWS[i].name, ln) != 0) return DCRIG_E_SIGNALS;
        pos += ln;
        if (frame[pos] != lu) return DCRIG_E_SIGNALS;
        pos += 1u;
        if (pos + lu > n || memcmp(frame + pos, ROWS[i].unit, lu) != 0) return DCRIG_E_SIGNALS;
        pos += lu;
    }
    if (h->role == DCRIG_ROLE_HOST) {
        if (pos + 8u != n) return DCRIG_E_SIGNALS;
        h->tacho_uV_per_rpm = r_u32(frame + pos);
        h->encoder_counts_per_rev = r_u32(frame + pos + 4u);
        pos += 8u;
    }
    return pos == n ? DCRIG_OK : DCRIG_E_SIGNALS;
}

int dcrig_answer_hello(const uint8_t *frame, size_t n, uint8_t encoding, uint16_t seq,
                       dcrig_hello_t *host, uint8_t *wire, size_t cap, size_t *wire_n)
{
    int st = dcrig_check_hello(frame, n, DCRIG_ROLE_HOST, encoding, host);
    *wire_n = 0;
    if (st == DCRIG_E_LENGTH || st == DCRIG_E_KIND || st == DCRIG_E_ROLE) return st;
    *wire_n = dcrig_pack_hello(DCRIG_ROLE_CONTROLLER, encoding, host->frame_period_us, seq, wire, cap);
    if (*wire_n == 0u) return DCRIG_E_SPACE;
    return st;
}

/* ---- Fixed-point frames ----------------------------------------------------------------- */
static uint8_t bit01(uint8_t v) { return v ? 1u : 0u; }

size_t dcrig_pack_command(const dcrig_command_t *c, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(DCRIG_ENC_FIXED, DCRIG_KIND_COMMAND));
    w_u16(&w, c->seq);
    w_u8(&w, c->mode);
    w_u8(&w, c->bridge_select);
    w_u8(&w, c->field_mode);
    w_u8(&w, (uint8_t)(bit01(c->contactor) | (bit01(c->trip) << 1)));
    w_i32(&w, c->armature_cmd_c);
    w_i32(&w, c->field_cmd_c);
    w_u16(&w, c->trip_code);
    return w_finish(&w);
}

size_t dcrig_pack_feedback(const dcrig_feedback_t *f, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(DCRIG_ENC_FIXED, DCRIG_KIND_FEEDBACK));
    w_u16(&w, f->seq);
    w_u16(&w, f->ack_seq);
    w_u32(&w, f->model_time_us);
    w_i32(&w, f->armature_current_cA);
    w_i32(&w, f->field_current_mA);
    w_i32(&w, f->armature_voltage_cV);
    w_i32(&w, f->tacho_voltage_mV);
    w_i32(&w, f->encoder_count);
    w_u16(&w, f->mains_angle_cdeg);
    w_i32(&w, f->mains_voltage_cV);
    w_i32(&w, f->op_speed_ref_crpm);
    w_u32(&w, f->host_status);
    w_u8(&w, (uint8_t)(bit01(f->contactor_closed) | (bit01(f->op_run) << 1) | (bit01(f->op_stop) << 2)));
    return w_finish(&w);
}

size_t dcrig_pack_trip(const dcrig_trip_t *t, uint16_t seq, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(DCRIG_ENC_FIXED, DCRIG_KIND_TRIP));
    w_u16(&w, seq);
    w_u16(&w, t->trip_code);
    w_u32(&w, t->controller_time_us);
    w_i32(&w, t->detail_c);
    return w_finish(&w);
}

static void w_text(writer_t *w, uint8_t len, const char *text)
{
    uint8_t n = len > DCRIG_CONTROL_TEXT_MAX ? (uint8_t)DCRIG_CONTROL_TEXT_MAX : len;
    w_u8(w, n);
    w_bytes(w, (const uint8_t *)text, n);
}

size_t dcrig_pack_control(const dcrig_control_t *m, uint16_t seq, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(DCRIG_ENC_FIXED, DCRIG_KIND_CONTROL));
    w_u16(&w, seq);
    w_u8(&w, m->op);
    w_i32(&w, m->value_c);
    w_text(&w, m->text_len, m->text);
    return w_finish(&w);
}

int dcrig_frame_kind(const uint8_t *frame, size_t n)
{
    if (n < HEADER_LEN) return DCRIG_E_LENGTH;
    if ((frame[0] >> 4) != DCRIG_PROTOCOL_VERSION) return DCRIG_E_VERSION;
    return frame[0] & 0x07;
}

int dcrig_frame_encoding(const uint8_t *frame) { return (frame[0] >> 3) & 1; }
uint16_t dcrig_frame_seq(const uint8_t *frame) { return r_u16(frame + 1); }

static int check_head(const uint8_t *frame, size_t n, uint8_t enc, uint8_t kind, size_t want)
{
    if (n < HEADER_LEN) return DCRIG_E_LENGTH;
    if ((frame[0] >> 4) != DCRIG_PROTOCOL_VERSION) return DCRIG_E_VERSION;
    if ((frame[0] & 0x07u) != kind) return DCRIG_E_KIND;
    if (((frame[0] >> 3) & 1u) != enc) return DCRIG_E_ENCODING;
    if (want && n != want) return DCRIG_E_LENGTH;
    return DCRIG_OK;
}

int dcrig_unpack_command(const uint8_t *frame, size_t n, dcrig_command_t *c)
{
    const uint8_t *b = frame + HEADER_LEN;
    int st = check_head(frame, n, DCRIG_ENC_FIXED, DCRIG_KIND_COMMAND, HEADER_LEN + COMMAND_BODY);
    if (st != DCRIG_OK) return st;
    c->seq = dcrig_frame_seq(frame);
    c->mode = b[0];
    c->bridge_select = b[1];
    c->field_mode = b[2];
    c->contactor = b[3] & 1u;
    c->trip = (b[3] >> 1) & 1u;
    c->armature_cmd_c = r_i32(b + 4);
    c->field_cmd_c = r_i32(b + 8);
    c->trip_code = r_u16(b + 12);
    return DCRIG_OK;
}

int dcrig_unpack_feedback(const uint8_t *frame, size_t n, dcrig_feedback_t *f)
{
    const uint8_t *b = frame + HEADER_LEN;
    int st = check_head(frame, n, DCRIG_ENC_FIXED, DCRIG_KIND_FEEDBACK, HEADER_LEN + FEEDBACK_BODY_FIXED);
    if (st != DCRIG_OK) return st;
    f->seq = dcrig_frame_seq(frame);
    f->ack_seq = r_u16(b + 0);
    f->model_time_us = r_u32(b + 2);
    f->armature_current_cA = r_i32(b + 6);
    f->field_current_mA = r_i32(b + 10);
    f->armature_voltage_cV = r_i32(b + 14);
    f->tacho_voltage_mV = r_i32(b + 18);
    f->encoder_count = r_i32(b + 22);
    f->mains_angle_cdeg = r_u16(b + 26);
    f->mains_voltage_cV = r_i32(b + 28);
    f->op_speed_ref_crpm = r_i32(b + 32);
    f->host_status = r_u32(b + 36);
    f->contactor_closed = b[40] & 1u;
    f->op_run = (b[40] >> 1) & 1u;
    f->op_stop = (b[40] >> 2) & 1u;
    return DCRIG_OK;
}

int dcrig_unpack_trip(const uint8_t *frame, size_t n, dcrig_trip_t *t)
{
    const uint8_t *b = frame + HEADER_LEN;
    int st = check_head(frame, n, DCRIG_ENC_FIXED, DCRIG_KIND_TRIP, HEADER_LEN + TRIP_BODY);
    if (st != DCRIG_OK) return st;
    t->trip_code = r_u16(b);
    t->controller_time_us = r_u32(b + 2);
    t->detail_c = r_i32(b + 6);
    return DCRIG_OK;
}

static int read_text(const uint8_t *frame, size_t n, uint8_t *len, char *text)
{
    const uint8_t *b = frame + HEADER_LEN;
    if (n < HEADER_LEN + CONTROL_HEAD) return DCRIG_E_LENGTH;
    *len = b[5];
    if (*len > DCRIG_CONTROL_TEXT_MAX || n != HEADER_LEN + CONTROL_HEAD + *len) return DCRIG_E_LENGTH;
    memcpy(text, b + CONTROL_HEAD, *len);
    text[*len] = '\0';
    return DCRIG_OK;
}

int dcrig_unpack_control(const uint8_t *frame, size_t n, dcrig_control_t *m)
{
    int st = check_head(frame, n, DCRIG_ENC_FIXED, DCRIG_KIND_CONTROL, 0u);
    if (st != DCRIG_OK) return st;
    st = read_text(frame, n, &m->text_len, m->text);
    if (st != DCRIG_OK) return st;
    m->op = frame[HEADER_LEN];
    m->value_c = r_i32(frame + HEADER_LEN + 1u);
    return DCRIG_OK;
}

/* ---- Deframer --------------------------------------------------------------------------- */
void dcrig_deframer_init(dcrig_deframer_t *d) { memset(d, 0, sizeof *d); }

const uint8_t *dcrig_deframer_frame(const dcrig_deframer_t *d) { return d->buf; }

int dcrig_deframer_push(dcrig_deframer_t *d, uint8_t byte)
{
    size_t enc_n, dec_n = 0;
    int st;
    if (byte != 0u) {
        if (d->discarding) {
            d->garbage_bytes++;
            return 0;
        }
        if (d->len >= sizeof d->buf) {
            /* no delimiter where one must have come: drop until the next one */
            d->oversize++;
            d->garbage_bytes += (uint32_t)d->len + 1u;
            d->len = 0;
            d->discarding = 1;
            return 0;
        }
        d->buf[d->len++] = byte;
        return 0;
    }
    if (d->discarding) {
        d->discarding = 0;
        return 0;
    }
    enc_n = d->len;
    d->len = 0;
    if (enc_n == 0u) return 0; /* a lone delimiter flushes, it is not an error */
    st = dcrig_cobs_decode(d->buf, enc_n, d->buf, sizeof d->buf, &dec_n);
    if (st != DCRIG_OK) {
        d->cobs_errors++;
        d->garbage_bytes += (uint32_t)enc_n;
        return 0;
    }
    if (dec_n < HEADER_LEN + CRC_LEN) {
        d->runts++;
        d->garbage_bytes += (uint32_t)enc_n;
        return 0;
    }
    if (dec_n > DCRIG_MAX_PAYLOAD) {
        d->oversize++;
        d->garbage_bytes += (uint32_t)enc_n;
        return 0;
    }
    if (dcrig_crc16(d->buf, dec_n - CRC_LEN) != r_u16(d->buf + dec_n - CRC_LEN)) {
        d->crc_errors++;
        d->garbage_bytes += (uint32_t)enc_n;
        return 0;
    }
    d->frame_len = dec_n - CRC_LEN;
    d->frames++;
    return 1;
}

/* ---- float32 encoding ------------------------------------------------------------------- */
#ifdef DCRIG_WITH_FLOAT32
typedef char dcrig_float_is_32_bits[(sizeof(float) == 4u) ? 1 : -1];

static void w_f32(writer_t *w, float v)
{
    uint32_t u;
    memcpy(&u, &v, sizeof u);
    w_u32(w, u);
}
static float r_f32(const uint8_t *p)
{
    uint32_t u = r_u32(p);
    float v;
    memcpy(&v, &u, sizeof v);
    return v;
}

size_t dcrig_pack_command_f(const dcrig_command_f_t *c, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(DCRIG_ENC_FLOAT32, DCRIG_KIND_COMMAND));
    w_u16(&w, c->seq);
    w_u8(&w, c->mode);
    w_u8(&w, c->bridge_select);
    w_u8(&w, c->field_mode);
    w_u8(&w, (uint8_t)(bit01(c->contactor) | (bit01(c->trip) << 1)));
    w_f32(&w, c->armature_cmd);
    w_f32(&w, c->field_cmd);
    w_u16(&w, c->trip_code);
    return w_finish(&w);
}

size_t dcrig_pack_trip_f(const dcrig_trip_f_t *t, uint16_t seq, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(DCRIG_ENC_FLOAT32, DCRIG_KIND_TRIP));
    w_u16(&w, seq);
    w_u16(&w, t->trip_code);
    w_u32(&w, t->controller_time_us);
    w_f32(&w, t->detail);
    return w_finish(&w);
}

size_t dcrig_pack_control_f(const dcrig_control_f_t *m, uint16_t seq, uint8_t *wire, size_t cap)
{
    writer_t w;
    w_begin(&w, wire, cap);
    w_u8(&w, KB(DCRIG_ENC_FLOAT32, DCRIG_KIND_CONTROL));
    w_u16(&w, seq);
    w_u8(&w, m->op);
    w_f32(&w, m->value);
    w_text(&w, m->text_len, m->text);
    return w_finish(&w);
}

int dcrig_unpack_feedback_f(const uint8_t *frame, size_t n, dcrig_feedback_f_t *f)
{
    const uint8_t *b = frame + HEADER_LEN;
    int st = check_head(frame, n, DCRIG_ENC_FLOAT32, DCRIG_KIND_FEEDBACK, HEADER_LEN + FEEDBACK_BODY_F32);
    if (st != DCRIG_OK) return st;
    f->seq = dcrig_frame_seq(frame);
    f->ack_seq = r_u16(b + 0);
    f->model_time_us = r_u32(b + 2);
    f->armature_current_A = r_f32(b + 6);
    f->field_current_A = r_f32(b + 10);
    f->armature_voltage_V = r_f32(b + 14);
    f->tacho_voltage_V = r_f32(b + 18);
    f->encoder_count = r_i32(b + 22);
    f->mains_angle_deg = r_f32(b + 26);
    f->mains_voltage_V = r_f32(b + 30);
    f->op_speed_ref_rpm = r_f32(b + 34);
    f->host_status = r_u32(b + 38);
    f->contactor_closed = b[42] & 1u;
    f->op_run = (b[42] >> 1) & 1u;
    f->op_stop = (b[42] >> 2) & 1u;
    return DCRIG_OK;
}

int dcrig_unpack_control_f(const uint8_t *frame, size_t n, dcrig_control_f_t *m)
{
    int st = check_head(frame, n, DCRIG_ENC_FLOAT32, DCRIG_KIND_CONTROL, 0u);
    if (st != DCRIG_OK) return st;
    st = read_text(frame, n, &m->text_len, m->text);
    if (st != DCRIG_OK) return st;
    m->op = frame[HEADER_LEN];
    m->value = r_f32(frame + HEADER_LEN + 1u);
    return DCRIG_OK;
}
#endif
