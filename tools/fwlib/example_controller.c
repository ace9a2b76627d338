/*
 * example_controller.c - a toy drive controller speaking the dcrig link, for tests and as a
 * starting point for firmware authors. Owns nothing but its own loop; all protocol work is
 * in dcrig_link.c. Must never be used on a real power stage: its "protection" is a single
 * overcurrent comparison.
 *
 * CAUTION: follow local electrical codes and licensed practice, and leave the wiring,
 * energising and protection of a real drive to a qualified person; nothing in dcrig
 * replaces them.
 *
 * Opens a tty (e.g. the slave side of a dcrig virtual cable, /dev/pts/N) in raw mode,
 * answers the host's HELLO, then answers every FEEDBACK with one COMMAND:
 *
 *   firing angle [0.01 deg] = 9000 - kp * (iref_cA - ia_cA) / 100    (C integer division,
 *                             truncating toward zero), clamped to 1500..15000
 *   bridge forward and contactor closed while op_run && !op_stop, else blocked and open
 *   field: voltage mode, 220.00 V
 *   |ia| > trip level: latch trip code 1 (overcurrent), send one TRIP frame, block the
 *   bridge, open the contactor, angle 15000; CONTROL reset clears the latch.
 *
 * It exits after N feedback frames or on CONTROL bye, printing one summary line:
 *   example_controller: feedback=F commands=C trips=T resets=R crc_errors=E cobs_errors=K
 *   seq_gaps=G bye=0|1
 *
 * Usage: example_controller TTY [-n FRAMES] [-i IREF_A] [-k KP_CDEG_PER_A] [-t TRIP_A]
 *                           [-e fixed|float32] [-w TIMEOUT_MS]
 * Exit: 0 done, 1 link failure or timeout, 2 bad arguments, 3 handshake mismatch.
 */
#define _POSIX_C_SOURCE 200809L

#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/select.h>
#include <termios.h>
#include <unistd.h>

#include "dcrig_link.h"

#define ALPHA_MIN_CDEG 1500
#define ALPHA_MAX_CDEG 15000
#define ALPHA_MID_CDEG 9000
#define FIELD_CMD_CV 22000
#define TRIP_OVERCURRENT 1u

static dcrig_deframer_t rx;
static uint8_t tx[DCRIG_MAX_WIRE];

typedef struct {
    long frames_max, iref_A, kp, trip_A, timeout_ms;
    int encoding;
} options_t;

typedef struct {
    unsigned long feedback, commands, trips, resets, gaps;
    int bye, tripped, have_seq;
    uint16_t last_seq, tx_seq;
    uint32_t period_us;
} state_t;

static int parse_long(const char *key, const char *text, long lo, long hi, long *out)
{
    char *end = NULL;
    long v;
    errno = 0;
    v = strtol(text, &end, 10);
    if (errno != 0 || end == text || *end != '\0' || v < lo || v > hi) {
        fprintf(stderr, "example_controller: %s '%s': must be a whole number from %ld to %ld\n", key,
                text, lo, hi);
        return 0;
    }
    *out = v;
    return 1;
}

static int open_raw(const char *path)
{
    struct termios t;
    int fd = open(path, O_RDWR | O_NOCTTY);
    if (fd < 0) {
        fprintf(stderr, "example_controller: %s: cannot open: %s\n", path, strerror(errno));
        return -1;
    }
    if (tcgetattr(fd, &t) == 0) {
        /* raw: every byte through untouched, no echo, no signals, no flow control */
        t.c_iflag &= (tcflag_t) ~(IGNBRK | BRKINT | PARMRK | ISTRIP | INLCR | IGNCR | ICRNL | IXON | IXOFF | INPCK);
        t.c_oflag &= (tcflag_t) ~OPOST;
        t.c_lflag &= (tcflag_t) ~(ECHO | ECHONL | ICANON | ISIG | IEXTEN);
        t.c_cflag &= (tcflag_t) ~(CSIZE | PARENB | CSTOPB);
        t.c_cflag |= (tcflag_t)(CS8 | CREAD | CLOCAL);
        t.c_cc[VMIN] = 1;
        t.c_cc[VTIME] = 0;
        if (tcsetattr(fd, TCSANOW, &t) != 0) {
            fprintf(stderr, "example_controller: %s: cannot set raw mode: %s\n", path, strerror(errno));
            close(fd);
            return -1;
        }
    }
    return fd;
}

static int write_all(int fd, const uint8_t *p, size_t n)
{
    while (n > 0u) {
        ssize_t k = write(fd, p, n);
        if (k < 0) {
            if (errno == EINTR) continue;
            return 0;
        }
        p += k;
        n -= (size_t)k;
    }
    return 1;
}

/* Waits for the next valid frame; 1 on success, 0 on timeout, -1 on a read failure. */
static int next_frame(int fd, long timeout_ms)
{
    static uint8_t chunk[256];
    static size_t have = 0, used = 0;
    for (;;) {
        while (used < have) {
            if (dcrig_deframer_push(&rx, chunk[used++])) return 1;
        }
        {
            fd_set set;
            struct timeval tv;
            ssize_t k;
            int r;
            FD_ZERO(&set);
            FD_SET(fd, &set);
            tv.tv_sec = timeout_ms / 1000;
            tv.tv_usec = (timeout_ms % 1000) * 1000;
            r = select(fd + 1, &set, NULL, NULL, &tv);
            if (r < 0 && errno == EINTR) continue;
            if (r < 0) return -1;
            if (r == 0) return 0;
            k = read(fd, chunk, sizeof chunk);
            if (k <= 0) return -1;
            have = (size_t)k;
            used = 0;
        }
    }
}

static long clamp_l(long v, long lo, long hi) { return v < lo ? lo : (v > hi ? hi : v); }

static int on_feedback_fixed(int fd, const options_t *o, state_t *s, const uint8_t *f, size_t n)
{
    dcrig_feedback_t fb;
    dcrig_command_t cmd;
    long ia_cA, err_cA, alpha;
    size_t wn;
    if (dcrig_unpack_feedback(f, n, &fb) != DCRIG_OK) return 1;
    if (s->have_seq && fb.seq != (uint16_t)(s->last_seq + 1u)) s->gaps++;
    s->have_seq = 1;
    s->last_seq = fb.seq;
    s->feedback++;
    ia_cA = fb.armature_current_cA;
    if (!s->tripped && labs(ia_cA) > o->trip_A * 100L) {
        dcrig_trip_t trip;
        s->tripped = 1;
        s->trips++;
        trip.trip_code = TRIP_OVERCURRENT;
        trip.controller_time_us = (uint32_t)(s->feedback * s->period_us);
        trip.detail_c = (int32_t)ia_cA;
        wn = dcrig_pack_trip(&trip, (uint16_t)(s->tx_seq - 1u), tx, sizeof tx);
        if (!write_all(fd, tx, wn)) return 0;
    }
    err_cA = o->iref_A * 100L - ia_cA;
    /* long long: kp * error may pass 2^31 at mill-drive currents */
    alpha = (long)clamp_l((long)(ALPHA_MID_CDEG - ((long long)o->kp * err_cA) / 100), ALPHA_MIN_CDEG, ALPHA_MAX_CDEG);
    memset(&cmd, 0, sizeof cmd);
    cmd.seq = s->tx_seq++;
    cmd.mode = DCRIG_MODE_FIRING_ANGLE;
    cmd.field_mode = DCRIG_FIELD_MODE_VOLTAGE;
    cmd.field_cmd_c = FIELD_CMD_CV;
    if (s->tripped) {
        cmd.trip = 1;
        cmd.trip_code = TRIP_OVERCURRENT;
        cmd.bridge_select = DCRIG_BRIDGE_BLOCKED;
        cmd.armature_cmd_c = ALPHA_MAX_CDEG;
    } else {
        int run = fb.op_run && !fb.op_stop;
        cmd.contactor = (uint8_t)run;
        cmd.bridge_select = run ? DCRIG_BRIDGE_FORWARD : DCRIG_BRIDGE_BLOCKED;
        cmd.armature_cmd_c = (int32_t)alpha;
    }
    wn = dcrig_pack_command(&cmd, tx, sizeof tx);
    if (!write_all(fd, tx, wn)) return 0;
    s->commands++;
    return 1;
}

#ifdef DCRIG_WITH_FLOAT32
static int on_feedback_float(int fd, const options_t *o, state_t *s, const uint8_t *f, size_t n)
{
    dcrig_feedback_f_t fb;
    dcrig_command_f_t cmd;
    float ia, alpha;
    size_t wn;
    if (dcrig_unpack_feedback_f(f, n, &fb) != DCRIG_OK) return 1;
    if (s->have_seq && fb.seq != (uint16_t)(s->last_seq + 1u)) s->gaps++;
    s->have_seq = 1;
    s->last_seq = fb.seq;
    s->feedback++;
    ia = fb.armature_current_A;
    if (!s->tripped && (ia > (float)o->trip_A || ia < -(float)o->trip_A)) {
        dcrig_trip_f_t trip;
        s->tripped = 1;
        s->trips++;
        trip.trip_code = TRIP_OVERCURRENT;
        trip.controller_time_us = (uint32_t)(s->feedback * s->period_us);
        trip.detail = ia;
        wn = dcrig_pack_trip_f(&trip, (uint16_t)(s->tx_seq - 1u), tx, sizeof tx);
        if (!write_all(fd, tx, wn)) return 0;
    }
    alpha = 90.0f - (float)o->kp / 100.0f * ((float)o->iref_A - ia);
    alpha = alpha < 15.0f ? 15.0f : (alpha > 150.0f ? 150.0f : alpha);
    memset(&cmd, 0, sizeof cmd);
    cmd.seq = s->tx_seq++;
    cmd.mode = DCRIG_MODE_FIRING_ANGLE;
    cmd.field_mode = DCRIG_FIELD_MODE_VOLTAGE;
    cmd.field_cmd = 220.0f;
    if (s->tripped) {
        cmd.trip = 1;
        cmd.trip_code = TRIP_OVERCURRENT;
        cmd.bridge_select = DCRIG_BRIDGE_BLOCKED;
        cmd.armature_cmd = 150.0f;
    } else {
        int run = fb.op_run && !fb.op_stop;
        cmd.contactor = (uint8_t)run;
        cmd.bridge_select = run ? DCRIG_BRIDGE_FORWARD : DCRIG_BRIDGE_BLOCKED;
        cmd.armature_cmd = alpha;
    }
    wn = dcrig_pack_command_f(&cmd, tx, sizeof tx);
    if (!write_all(fd, tx, wn)) return 0;
    s->commands++;
    return 1;
}
#endif

static void on_control(const options_t *o, state_t *s, const uint8_t *f, size_t n)
{
    uint8_t op = 0;
#ifdef DCRIG_WITH_FLOAT32
    if (o->encoding == DCRIG_ENC_FLOAT32) {
        static dcrig_control_f_t m;
        if (dcrig_unpack_control_f(f, n, &m) != DCRIG_OK) return;
        op = m.op;
    } else
#endif
    {
        static dcrig_control_t m;
        (void)o;
        if (dcrig_unpack_control(f, n, &m) != DCRIG_OK) return;
        op = m.op;
    }
    if (op == DCRIG_CTRL_BYE) s->bye = 1;
    if (op == DCRIG_CTRL_RESET && s->tripped) {
        s->tripped = 0;
        s->resets++;
    }
}

static void summary(const state_t *s)
{
    printf("example_controller: feedback=%lu commands=%lu trips=%lu resets=%lu crc_errors=%lu "
           "cobs_errors=%lu seq_gaps=%lu bye=%d\n",
           s->feedback, s->commands, s->trips, s->resets, (unsigned long)rx.crc_errors,
           (unsigned long)rx.cobs_errors, s->gaps, s->bye);
    fflush(stdout);
}

int main(int argc, char **argv)
{
    options_t o = {1000, 100, 50, 4000, 5000, DCRIG_ENC_FIXED};
    state_t s;
    const char *path;
    int fd, i, ready = 0;
    if (argc < 2 || argv[1][0] == '-') {
        fprintf(stderr, "usage: example_controller TTY [-n FRAMES] [-i IREF_A] [-k KP_CDEG_PER_A] "
                        "[-t TRIP_A] [-e fixed|float32] [-w TIMEOUT_MS]\n");
        return 2;
    }
    path = argv[1];
    for (i = 2; i < argc; i += 2) {
        const char *key = argv[i], *val = i + 1 < argc ? argv[i + 1] : NULL;
        int ok = val != NULL;
        if (ok && strcmp(key, "-n") == 0) ok = parse_long("-n", val, 1, 100000000L, &o.frames_max);
        else if (ok && strcmp(key, "-i") == 0) ok = parse_long("-i", val, -20000, 20000, &o.iref_A);
        else if (ok && strcmp(key, "-k") == 0) ok = parse_long("-k", val, 0, 100000, &o.kp);
        else if (ok && strcmp(key, "-t") == 0) ok = parse_long("-t", val, 1, 20000, &o.trip_A);
        else if (ok && strcmp(key, "-w") == 0) ok = parse_long("-w", val, 1, 3600000L, &o.timeout_ms);
        else if (ok && strcmp(key, "-e") == 0) {
            if (strcmp(val, "fixed") == 0) o.encoding = DCRIG_ENC_FIXED;
#ifdef DCRIG_WITH_FLOAT32
            else if (strcmp(val, "float32") == 0) o.encoding = DCRIG_ENC_FLOAT32;
#endif
            else {
                fprintf(stderr, "example_controller: -e '%s': must be fixed"
#ifdef DCRIG_WITH_FLOAT32
                                " or float32"
#endif
                                "\n", val);
                return 2;
            }
        } else {
            if (ok) fprintf(stderr, "example_controller: %s: unknown option\n", key);
            else fprintf(stderr, "example_controller: %s: needs a value\n", key);
            return 2;
        }
        if (!ok) return 2;
    }
    memset(&s, 0, sizeof s);
    fd = open_raw(path);
    if (fd < 0) return 1;
    dcrig_deframer_init(&rx);
    {
        static const uint8_t flush = 0u; /* ends any garbage the host's deframer holds */
        if (!write_all(fd, &flush, 1u)) return 1;
    }
    while (!s.bye && s.feedback < (unsigned long)o.frames_max) {
        const uint8_t *f;
        size_t n, wn = 0;
        int r = next_frame(fd, o.timeout_ms);
        if (r <= 0) {
            fprintf(stderr, "example_controller: %s: %s\n", path,
                    r == 0 ? "no frame before the timeout" : "read failed (host gone?)");
            summary(&s);
            close(fd);
            return 1;
        }
        f = dcrig_deframer_frame(&rx);
        n = rx.frame_len;
        switch (dcrig_frame_kind(f, n)) {
        case DCRIG_KIND_HELLO: {
            dcrig_hello_t host;
            int st = dcrig_answer_hello(f, n, (uint8_t)o.encoding, (uint16_t)(s.tx_seq - 1u), &host, tx,
                                        sizeof tx, &wn);
            if (wn > 0u && !write_all(fd, tx, wn)) return 1;
            if (st == DCRIG_E_ROLE) break; /* not from a host */
            if (st != DCRIG_OK) {
                fprintf(stderr, "example_controller: %s: handshake: %s\n", path, dcrig_strerror(st));
                summary(&s);
                close(fd);
                return 3;
            }
            ready = 1;
            s.period_us = host.frame_period_us;
            s.have_seq = 0;
            break;
        }
        case DCRIG_KIND_FEEDBACK:
            if (!ready) break;
#ifdef DCRIG_WITH_FLOAT32
            if (o.encoding == DCRIG_ENC_FLOAT32) {
                if (!on_feedback_float(fd, &o, &s, f, n)) return 1;
                break;
            }
#endif
            if (!on_feedback_fixed(fd, &o, &s, f, n)) return 1;
            break;
        case DCRIG_KIND_CONTROL:
            if (ready) on_control(&o, &s, f, n);
            break;
        default:
            break;
        }
    }
    summary(&s);
    close(fd);
    return 0;
}
