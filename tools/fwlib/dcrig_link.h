/*
 * dcrig_link.h - the controller (firmware) side of the dcrig link protocol, version 1.
 *
 * Owns: COBS framing, CRC-16/IBM-3740, encode/decode of every frame kind in the
 * fixed-point encoding (float32 behind DCRIG_WITH_FLOAT32), the HELLO handshake and a
 * byte-at-a-time deframer. docs/protocol.md is the normative description; host/link/ is
 * the Python twin. Plain C99: no malloc, no floating point in the fixed-point path, no OS
 * calls, every buffer is the caller's (declare them static on a small MCU).
 * Must never include OS headers: the UART and its timing belong to the application.
 *
 * Frame on the wire:  COBS( header | body | CRC16 little-endian ) | 0x00
 *   header byte 0 = (version << 4) | (encoding << 3) | kind,  bytes 1-2 = seq (u16 LE)
 *
 * Fixed-point units are in the field names: _cA = 0.01 A, _mA = 0.001 A, _cV = 0.01 V,
 * _mV = 0.001 V, _cdeg = 0.01 deg, _crpm = 0.01 rpm, _c = 0.01 of the unit the mode says.
 *
 * CAUTION: these frames fire thyristors once a controller drives a real converter. Test
 * against the host model first; keep the hardware interlocks independent of this code.
 * Follow local electrical codes and licensed practice, and leave the wiring, energising and
 * protection of a real drive to a qualified person; nothing in dcrig replaces them.
 *
 * Usage example (controller answering each FEEDBACK with a COMMAND):
 *
 *     static dcrig_deframer_t rx;
 *     static uint8_t tx[DCRIG_MAX_WIRE];
 *     dcrig_deframer_init(&rx);
 *     int ready = 0;
 *     uint16_t seq = 0;
 *     for (;;) {
 *         uint8_t b = uart_getc();                     // your byte source
 *         if (!dcrig_deframer_push(&rx, b)) continue;  // no complete valid frame yet
 *         const uint8_t *f = dcrig_deframer_frame(&rx);
 *         size_t n = rx.frame_len, wn = 0;
 *         switch (dcrig_frame_kind(f, n)) {
 *         case DCRIG_KIND_HELLO: {
 *             dcrig_hello_t host;
 *             int st = dcrig_answer_hello(f, n, DCRIG_ENC_FIXED, (uint16_t)(seq - 1u),
 *                                         &host, tx, sizeof tx, &wn);
 *             uart_write(tx, wn);                       // always answer, even on mismatch
 *             ready = (st == DCRIG_OK);
 *             break;
 *         }
 *         case DCRIG_KIND_FEEDBACK: {
 *             dcrig_feedback_t fb;
 *             dcrig_command_t cmd = {0};
 *             if (!ready || dcrig_unpack_feedback(f, n, &fb) != DCRIG_OK) break;
 *             cmd.seq = seq++;
 *             cmd.mode = DCRIG_MODE_FIRING_ANGLE;
 *             cmd.bridge_select = DCRIG_BRIDGE_FORWARD;
 *             cmd.armature_cmd_c = 9000;                // 90.00 deg
 *             cmd.field_mode = DCRIG_FIELD_MODE_VOLTAGE;
 *             cmd.field_cmd_c = 22000;                  // 220.00 V
 *             wn = dcrig_pack_command(&cmd, tx, sizeof tx);
 *             uart_write(tx, wn);
 *             break;
 *         }
 *         default: break;
 *         }
 *     }
 */
#ifndef DCRIG_LINK_H
#define DCRIG_LINK_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#define DCRIG_PROTOCOL_VERSION 1u
#define DCRIG_MAX_PAYLOAD 1024u /* decoded bytes incl. header and CRC */
#define DCRIG_MAX_ENCODED (DCRIG_MAX_PAYLOAD + (DCRIG_MAX_PAYLOAD + 253u) / 254u)
#define DCRIG_MAX_WIRE (DCRIG_MAX_ENCODED + 1u) /* with the 0x00 delimiter */
#define DCRIG_CONTROL_TEXT_MAX 200u
#define DCRIG_MIN_PEER_PAYLOAD 211u /* largest CONTROL frame incl. CRC */

enum { DCRIG_KIND_HELLO = 1, DCRIG_KIND_COMMAND = 2, DCRIG_KIND_FEEDBACK = 3, DCRIG_KIND_TRIP = 4, DCRIG_KIND_CONTROL = 5 };
enum { DCRIG_ENC_FIXED = 0, DCRIG_ENC_FLOAT32 = 1 };
enum { DCRIG_ROLE_HOST = 0, DCRIG_ROLE_CONTROLLER = 1 };

/* Status codes: 0 is success, every failure is negative (kernels return codes, not jumps) */
#define DCRIG_OK 0
#define DCRIG_E_SPACE (-1)    /* output buffer too small */
#define DCRIG_E_COBS (-2)     /* not a valid COBS sequence */
#define DCRIG_E_CRC (-3)      /* CRC mismatch */
#define DCRIG_E_LENGTH (-4)   /* frame length does not fit its kind */
#define DCRIG_E_KIND (-5)     /* not the kind the call decodes */
#define DCRIG_E_VERSION (-6)  /* other protocol version */
#define DCRIG_E_ENCODING (-7) /* other encoding (or float32 not compiled in) */
#define DCRIG_E_SIGNALS (-8)  /* HELLO signal table differs from ours */
#define DCRIG_E_ROLE (-9)     /* HELLO from the wrong role (e.g. our own echo) */
#define DCRIG_E_PAYLOAD (-10) /* peer's max payload too small */
const char *dcrig_strerror(int status);

/* Mirrors of host/signals.py */
#define DCRIG_MODE_FIRING_ANGLE 0u
#define DCRIG_MODE_VOLTAGE 1u
#define DCRIG_MODE_CURRENT 2u
#define DCRIG_FIELD_MODE_FIRING_ANGLE 0u
#define DCRIG_FIELD_MODE_VOLTAGE 1u
#define DCRIG_BRIDGE_BLOCKED 0u
#define DCRIG_BRIDGE_FORWARD 1u
#define DCRIG_BRIDGE_REVERSE 2u
#define DCRIG_HOST_RUNNING (1u << 0)
#define DCRIG_HOST_WATCHDOG_TRIPPED (1u << 1)
#define DCRIG_HOST_FAULT_ACTIVE (1u << 2)
#define DCRIG_HOST_LOCKSTEP (1u << 3)
#define DCRIG_HOST_MODEL_ALARM (1u << 4)
#define DCRIG_CTRL_RESET 1u
#define DCRIG_CTRL_SCENARIO_START 2u
#define DCRIG_CTRL_SCENARIO_STOP 3u
#define DCRIG_CTRL_SET_RUN 4u
#define DCRIG_CTRL_SET_STOP 5u
#define DCRIG_CTRL_SET_SPEED_REF_RPM 6u
#define DCRIG_CTRL_BYE 7u
#define DCRIG_CTRL_SET_FIELD_ECONOMY 8u /* operator field economy input, value 0/1 */
#define DCRIG_CTRL_SET_QUICK_STOP 9u    /* operator quick-stop input, value 0/1 */

/* COMMAND, controller -> host (fixed point) */
typedef struct {
    uint16_t seq;
    uint8_t mode;           /* DCRIG_MODE_* */
    uint8_t bridge_select;  /* DCRIG_BRIDGE_* */
    uint8_t field_mode;     /* DCRIG_FIELD_MODE_* */
    uint8_t contactor;      /* nonzero: close the main contactor */
    uint8_t trip;           /* nonzero: the controller has tripped */
    int32_t armature_cmd_c; /* 0.01 deg, V or A according to mode */
    int32_t field_cmd_c;    /* 0.01 deg or V according to field_mode */
    uint16_t trip_code;
} dcrig_command_t;

/* FEEDBACK, host -> controller (fixed point) */
typedef struct {
    uint16_t seq;
    uint16_t ack_seq;          /* seq of the last valid command the host applied; 0xFFFF: none yet */
    uint32_t model_time_us;    /* wraps at 2^32 */
    int32_t armature_current_cA;
    int32_t field_current_mA;
    int32_t armature_voltage_cV;
    int32_t tacho_voltage_mV;
    int32_t encoder_count;
    uint16_t mains_angle_cdeg; /* 0..35999 */
    int32_t mains_voltage_cV;
    int32_t op_speed_ref_crpm;
    uint32_t host_status;      /* DCRIG_HOST_* | model status bits << 8 */
    uint8_t contactor_closed, op_run, op_stop;
} dcrig_feedback_t;

/* TRIP, controller -> host */
typedef struct {
    uint16_t trip_code;
    uint32_t controller_time_us;
    int32_t detail_c; /* 0.01 of the tripping quantity (A, rpm, V) */
} dcrig_trip_t;

/* CONTROL, either direction */
typedef struct {
    uint8_t op;      /* DCRIG_CTRL_* */
    int32_t value_c; /* 0.01 (0/1 flags are 100, rpm in 0.01 rpm) */
    uint8_t text_len;
    char text[DCRIG_CONTROL_TEXT_MAX + 1]; /* UTF-8, NUL-terminated after decoding */
} dcrig_control_t;

/* HELLO head (the signal table is checked, not stored) */
typedef struct {
    uint8_t protocol_version, role, encoding, n_signals;
    uint32_t frame_period_us;
    uint16_t max_payload;
    /* host HELLO only (its sensor block, docs/protocol.md 6.5); 0 = not given */
    uint32_t tacho_uV_per_rpm;
    uint32_t encoder_counts_per_rev;
} dcrig_hello_t;

/* ---- CRC and COBS ----------------------------------------------------------------------- */
uint16_t dcrig_crc16_update(uint16_t crc, const uint8_t *data, size_t n);
uint16_t dcrig_crc16(const uint8_t *data, size_t n); /* init 0xFFFF: CRC-16/IBM-3740 */
/* Encoded length, 0 when cap is too small (a valid encoding is never empty). No delimiter. */
size_t dcrig_cobs_encode(const uint8_t *src, size_t n, uint8_t *dst, size_t cap);
/* dst may equal src (decoding in place is safe). */
int dcrig_cobs_decode(const uint8_t *src, size_t n, uint8_t *dst, size_t cap, size_t *out_n);
/* Whole wire frame from header+body: CRC, COBS, delimiter. Returns length or 0. */
size_t dcrig_wire_from_frame(const uint8_t *frame, size_t n, uint8_t *wire, size_t cap);

/* ---- Packing: each returns the wire length (delimiter included) or 0 if cap is too small */
size_t dcrig_pack_command(const dcrig_command_t *c, uint8_t *wire, size_t cap);
size_t dcrig_pack_feedback(const dcrig_feedback_t *f, uint8_t *wire, size_t cap);
size_t dcrig_pack_trip(const dcrig_trip_t *t, uint16_t seq, uint8_t *wire, size_t cap);
size_t dcrig_pack_control(const dcrig_control_t *m, uint16_t seq, uint8_t *wire, size_t cap);
size_t dcrig_pack_hello(uint8_t role, uint8_t encoding, uint32_t frame_period_us, uint16_t seq,
                        uint8_t *wire, size_t cap);

/* ---- Unpacking a frame from the deframer (header+body, CRC already removed) ------------- */
int dcrig_frame_kind(const uint8_t *frame, size_t n); /* kind, or DCRIG_E_VERSION/E_LENGTH */
int dcrig_frame_encoding(const uint8_t *frame);
uint16_t dcrig_frame_seq(const uint8_t *frame);
int dcrig_unpack_command(const uint8_t *frame, size_t n, dcrig_command_t *c);
int dcrig_unpack_feedback(const uint8_t *frame, size_t n, dcrig_feedback_t *f);
int dcrig_unpack_trip(const uint8_t *frame, size_t n, dcrig_trip_t *t);
int dcrig_unpack_control(const uint8_t *frame, size_t n, dcrig_control_t *m);

/* ---- Handshake -------------------------------------------------------------------------- */
/* Parse a HELLO and check it against our own view for `encoding`: protocol version, the
 * role we expect, encoding, max payload and every entry of the signal table. */
int dcrig_check_hello(const uint8_t *frame, size_t n, uint8_t expect_role, uint8_t encoding,
                      dcrig_hello_t *h);
/* Controller side: check the host's HELLO and build our answer (role controller, `encoding`,
 * the host's frame period) into wire. The answer is built whenever the frame was a readable
 * host HELLO, also on mismatch, so the host can name the difference; *wire_n is 0 otherwise. */
int dcrig_answer_hello(const uint8_t *frame, size_t n, uint8_t encoding, uint16_t seq,
                       dcrig_hello_t *host, uint8_t *wire, size_t cap, size_t *wire_n);

/* ---- Deframer --------------------------------------------------------------------------- */
typedef struct {
    uint8_t buf[DCRIG_MAX_ENCODED]; /* frame in progress; a valid frame is decoded in place */
    size_t len;
    size_t frame_len; /* valid after push() returned 1, until the next push() */
    uint8_t discarding;
    uint32_t frames, crc_errors, cobs_errors, oversize, runts, garbage_bytes;
} dcrig_deframer_t;
void dcrig_deframer_init(dcrig_deframer_t *d);
/* Feed one received byte; 1 when a complete CRC-valid frame is ready, else 0. */
int dcrig_deframer_push(dcrig_deframer_t *d, uint8_t byte);
const uint8_t *dcrig_deframer_frame(const dcrig_deframer_t *d);

#ifdef DCRIG_WITH_FLOAT32
/* float32 encoding: same frames, scaled fields carried as IEEE-754 binary32 values */
typedef struct {
    uint16_t seq;
    uint8_t mode, bridge_select, field_mode, contactor, trip;
    float armature_cmd; /* deg, V or A */
    float field_cmd;    /* deg or V */
    uint16_t trip_code;
} dcrig_command_f_t;
typedef struct {
    uint16_t seq, ack_seq;
    uint32_t model_time_us;
    float armature_current_A, field_current_A, armature_voltage_V, tacho_voltage_V;
    int32_t encoder_count;
    float mains_angle_deg, mains_voltage_V, op_speed_ref_rpm;
    uint32_t host_status;
    uint8_t contactor_closed, op_run, op_stop;
} dcrig_feedback_f_t;
typedef struct {
    uint16_t trip_code;
    uint32_t controller_time_us;
    float detail;
} dcrig_trip_f_t;
typedef struct {
    uint8_t op;
    float value;
    uint8_t text_len;
    char text[DCRIG_CONTROL_TEXT_MAX + 1];
} dcrig_control_f_t;
size_t dcrig_pack_command_f(const dcrig_command_f_t *c, uint8_t *wire, size_t cap);
size_t dcrig_pack_trip_f(const dcrig_trip_f_t *t, uint16_t seq, uint8_t *wire, size_t cap);
size_t dcrig_pack_control_f(const dcrig_control_f_t *m, uint16_t seq, uint8_t *wire, size_t cap);
int dcrig_unpack_feedback_f(const uint8_t *frame, size_t n, dcrig_feedback_f_t *f);
int dcrig_unpack_control_f(const uint8_t *frame, size_t n, dcrig_control_f_t *m);
#endif

#ifdef __cplusplus
}
#endif
#endif /* DCRIG_LINK_H */
