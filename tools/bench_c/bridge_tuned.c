/* Tuned speed reference for tools/bench_model.py: the switched 6-pulse bridge case.
 *
 * Owns nothing the host uses; tools/bench_model.py compiles it with `cc -O3` and runs it. It
 * must never be linked into the host or called from the model. It is the "near the limit"
 * anchor of the kernel's switched-bridge target: the same circuit, thyristor rules and
 * integration as rtmodel/kernel.py, reduced to the case the benchmark runs, written for speed.
 *
 * The case: separately excited machine, one fully controlled 6-pulse bridge (forward group,
 * bridge select 1), field on the averaged single-phase half-controlled bridge, passive
 * constant load, contactor closed, no fault input (no misfire, shorted device, open phase,
 * blocked pulses, phase reversal, armature short, open field). Inputs held over the run.
 *
 * The model, as rtmodel/kernel.py states it (read its module docstring for the whole text):
 *   - mains phase voltages by rotating (sin, cos) of the phase-a angle by w dt each step;
 *   - every natural commutation instant (30 deg + k 60 deg) latches the firing angle and
 *     schedules thyristor k at that instant + alpha; a firing falls into the step whose
 *     midpoint passes it; double pulsing (T_k and T_k-1) with a gate pulse of fixed width;
 *   - turn-on of a gated or recovering (t_q) device when forward biased against the rail it
 *     joins; a re-conduction without gate is a commutation failure; start of conduction from
 *     zero current by the best forward-biased gated pair against the open-circuit voltage;
 *   - with the conduction pattern frozen within a step, the bridge seen from the DC side is
 *     vth = U+ - U-, lth = Ls (1/kp + 1/kn) (U+/- the mean of v_x - Rs i_x over the phases on
 *     that rail); di_x/dt = (v_x - Rs i_x - v_rail)/Ls for each conducting phase;
 *   - Heun's method for armature and field current, speed (passive torques by projection
 *     after each stage) and the line currents; turn-off at a current zero; an overlap that
 *     ends inside a step gives the rest of the step the new circuit's DC-current slope; KCL
 *     kept exact by spreading what a turn-off clipped over the group's remaining devices;
 *   - the step's mean terminal voltage follows its circuit: after an overlap end inside the
 *     step, the rest of the step gets the new circuit's voltage too; a current zero inside
 *     the step gives the conducting part's trapezoid, then the open-circuit voltage;
 *   - armature temperature once per frame on the mean copper loss; per-pulse mean voltage.
 *
 * What makes it fast (each a thing the kernel may do as well): state in locals across the
 * frame (thyristor arrays in small local arrays), everything constant within a frame computed
 * once (Ra, 1/Ls, 1/(La + lth) for each conduction count, 1/J, the field bridge's mean
 * voltage, the passive torque's dv), the magnetization segment cached from the previous
 * evaluation, no code for other connections, supplies or loads.
 *
 * Input: a parameter file (argv[1]) of lines "name value" or "name n v1 .. vn", written by
 * tools/bench_model.py. Output on stdout, one "name value" (or "name n v1 .. vn") per line:
 * the final state, then the best wall and CPU time of `repeats` runs, each from the same
 * state. Exit status 2 with one line on stderr for a bad parameter file.
 */
#define _POSIX_C_SOURCE 199309L
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define MAX_POINTS 32
#define COPPER_K 235.0
#define PI 3.141592653589793
#define TWO_PI (2.0 * PI)
#define PI_6 (PI / 6.0)
#define PI_3 (PI / 3.0)
#define SQRT2 1.4142135623730951

static const int THY_PHASE[6] = {0, 2, 1, 0, 2, 1};
static const int THY_UPPER[6] = {1, 0, 1, 0, 1, 0};
static const int UPPER_OF[3] = {0, 2, 4};
static const int LOWER_OF[3] = {3, 5, 1};

typedef struct {
    double dt, ra, la, vb, knee, rf_hot, lf_leak, lm0, slope0, w_curve, t_ref;
    double j_total, viscous, coulomb, t_load, field_sign;
    double rise, tau_th, t_amb, loss_rated, frozen;
    double vpk, f_mains, rs, ls, alpha, gate_pulse, tq, field_vac, field_alpha;
    int n;
    double ci[MAX_POINTS], ce[MAX_POINTS], cd[MAX_POINTS], inv_h[MAX_POINTS];
} Params;

typedef struct {
    double i1, i2, w, angle, temp, t, th, vt;
    double ph[3], on[6], off_s[6], fire_at[6], gate[6];
    double active, zero_s, vint, pulse_t, pulse_vavg, last_up, last_low, latched;
} State;

typedef struct {
    int lo; /* -1: past the last knot (straight line) */
    double x0, x1, h, inv_h, y0, y1, d0, d1;
} Segment;

static void seg_find(const Params *p, Segment *s, double i)
{
    int last = p->n - 1;
    if (i >= p->ci[last]) {
        s->lo = -1;
        s->x0 = p->ci[last];
        s->x1 = INFINITY;
        s->y0 = p->ce[last];
        s->d0 = p->cd[last];
        return;
    }
    int lo = 0, hi = last;
    while (hi - lo > 1) {
        int mid = (lo + hi) >> 1;
        if (p->ci[mid] <= i)
            lo = mid;
        else
            hi = mid;
    }
    s->lo = lo;
    s->x0 = p->ci[lo];
    s->x1 = p->ci[hi];
    s->h = p->ci[hi] - s->x0;
    s->inv_h = p->inv_h[lo];
    s->y0 = p->ce[lo];
    s->y1 = p->ce[hi];
    s->d0 = p->cd[lo];
    s->d1 = p->cd[hi];
}

static inline void curve_pos(const Params *p, Segment *s, double i, double *e, double *de)
{
    if (!(i >= s->x0 && i < s->x1))
        seg_find(p, s, i);
    if (s->lo < 0) {
        *de = s->d0;
        *e = s->y0 + s->d0 * (i - s->x0);
        return;
    }
    double t = (i - s->x0) * s->inv_h, t2 = t * t, t3 = t2 * t;
    double h = s->h, ih = s->inv_h;
    *e = (2.0 * t3 - 3.0 * t2 + 1.0) * s->y0 + (t3 - 2.0 * t2 + t) * h * s->d0
       + (-2.0 * t3 + 3.0 * t2) * s->y1 + (t3 - t2) * h * s->d1;
    *de = (6.0 * t2 - 6.0 * t) * ih * s->y0 + (3.0 * t2 - 4.0 * t + 1.0) * s->d0
        + (-6.0 * t2 + 6.0 * t) * ih * s->y1 + (3.0 * t2 - 2.0 * t) * s->d1;
}

static inline void curve(const Params *p, Segment *s, double i, double *e, double *de)
{
    if (i >= 0.0) {
        curve_pos(p, s, i, e, de);
        return;
    }
    curve_pos(p, s, -i, e, de);
    double fade = 1.0 + i / p->ci[1];
    *e = -*e;
    if (fade > 0.0) {
        *e += 2.0 * p->ce[0] * fade;
        *de += 2.0 * p->ce[0] / p->ci[1];
    }
}

static inline double clip1(double x) { return x > 1.0 ? 1.0 : (x < -1.0 ? -1.0 : x); }

static inline double passive(double w0, double w_free, double dv)
{
    if (dv <= 0.0)
        return w_free;
    if (w0 > 0.0 || (w0 == 0.0 && w_free > dv)) {
        double w = w_free - dv;
        return w > 0.0 ? w : 0.0;
    }
    if (w0 < 0.0 || (w0 == 0.0 && w_free < -dv)) {
        double w = w_free + dv;
        return w < 0.0 ? w : 0.0;
    }
    return 0.0;
}

/* mean source-side voltage of the phases on each rail; counts in *kp, *kn */
static inline void thevenin(const int *rail, const double *v, const double *i, double rs,
                            const double *inv_k, double *up, double *un, int *kp, int *kn)
{
    double a = 0.0, b = 0.0;
    int np = 0, nn = 0;
    for (int ph = 0; ph < 3; ph++) {
        if (rail[ph] > 0) {
            a += v[ph] - rs * i[ph];
            np++;
        } else if (rail[ph] < 0) {
            b += v[ph] - rs * i[ph];
            nn++;
        }
    }
    *up = np > 0 ? a * inv_k[np] : 0.0;
    *un = nn > 0 ? b * inv_k[nn] : 0.0;
    *kp = np;
    *kn = nn;
}

/* frame-constant quantities */
typedef struct {
    double dt, h2, ra, inv_wc, lm_k, inv_knee, inv_j, dv, vf, inv_ls, w_mains, dtheta, cr, sr;
    double inv_k[4];
    double inv_m11[4][4]; /* 1/(La + Ls (1/kp + 1/kn)) */
    double lth[4][4];
} Frame;

/* derivatives of the armature loop (open or fed by the bridge) and the field loop;
 * returns the terminal voltage, the armature current's derivative in *d1, the field's in *d2 */
static inline double machine(const Params *p, const Frame *fr, Segment *seg, int feeds, double vth,
                             double inv_m11, double i1, double i2, double w, double *d1, double *d2,
                             double *te, double *emf_out)
{
    double e_c, de;
    curve(p, seg, p->field_sign * i2, &e_c, &de);
    double kphi = e_c * fr->inv_wc;
    double emf = kphi * w;
    double sa = fr->ra * i1 + emf + p->vb * clip1(i1 * fr->inv_knee);
    *d2 = (fr->vf - p->rf_hot * i2) / (p->lf_leak + fr->lm_k * de);
    *te = kphi * i1;
    *emf_out = emf;
    if (feeds) {
        *d1 = (vth - sa) * inv_m11;
        return sa + p->la * *d1;
    }
    *d1 = 0.0;
    return sa;
}

static void frame(const Params *p, State *st, Segment *seg, long n_sub)
{
    Frame fr;
    fr.dt = p->dt;
    fr.h2 = 0.5 * p->dt;
    fr.ra = p->ra * (COPPER_K + st->temp) / (COPPER_K + p->t_ref);
    fr.inv_wc = 1.0 / p->w_curve;
    fr.lm_k = p->lm0 / p->slope0;
    fr.inv_knee = 1.0 / p->knee;
    fr.inv_j = 1.0 / p->j_total;
    double t_set = fabs(p->t_load);
    double t_passive = p->coulomb + t_set;
    fr.dv = p->dt * t_passive * fr.inv_j;
    fr.vf = SQRT2 / PI * p->field_vac * (1.0 + cos(p->field_alpha));
    fr.inv_ls = 1.0 / p->ls;
    fr.w_mains = TWO_PI * p->f_mains;
    fr.dtheta = fr.w_mains * p->dt;
    fr.cr = cos(fr.dtheta);
    fr.sr = sin(fr.dtheta);
    fr.inv_k[0] = 0.0;
    for (int k = 1; k < 4; k++)
        fr.inv_k[k] = 1.0 / k;
    for (int a = 0; a < 4; a++)
        for (int b = 0; b < 4; b++) {
            fr.lth[a][b] = (a > 0 && b > 0) ? p->ls * (fr.inv_k[a] + fr.inv_k[b]) : 0.0;
            fr.inv_m11[a][b] = 1.0 / (p->la + fr.lth[a][b]);
        }
    const double dt = fr.dt, h2 = fr.h2, rs = p->rs, ls = p->ls, inv_ls = fr.inv_ls, tq = p->tq;
    const double alpha = p->alpha, gate_w = p->gate_pulse, vpk = p->vpk, dtheta = fr.dtheta;
    const double cr = fr.cr, sr = fr.sr;

    double i1 = st->i1, i2 = st->i2, w = st->w, angle = st->angle, t = st->t, th = st->th;
    double vt = st->vt, pa[3] = {st->ph[0], st->ph[1], st->ph[2]};
    double on[6], off_s[6], fire_at[6], gate[6];
    for (int k = 0; k < 6; k++) {
        on[k] = st->on[k];
        off_s[k] = st->off_s[k];
        fire_at[k] = st->fire_at[k];
        gate[k] = st->gate[k];
    }
    double active = st->active, zero_s = st->zero_s, vint = st->vint, pulse_t = st->pulse_t;
    double pulse_vavg = st->pulse_vavg, last_up = st->last_up, last_low = st->last_low;
    double latched = st->latched;
    const double select = 1.0;
    double s0 = sin(th), c0 = cos(th);
    double sec_prev = floor((th - PI_6) / PI_3);
    double sum_ia2 = 0.0;
    int feeds = 0, kp = 0, kn = 0;
    double vth1 = 0.0;

    for (long step = 0; step < n_sub; step++) {
        double s1 = s0 * cr + c0 * sr, c1 = c0 * cr - s0 * sr;
        double v0[3] = {vpk * s0, vpk * (-0.5 * s0 - 0.8660254037844386 * c0), vpk * (-0.5 * s0 + 0.8660254037844386 * c0)};
        double v1[3] = {vpk * s1, vpk * (-0.5 * s1 - 0.8660254037844386 * c1), vpk * (-0.5 * s1 + 0.8660254037844386 * c1)};
        double th0 = th, t_now = t;
        /* changeover to the selected group (only at the very start: one bridge) */
        if (select != active) {
            int conducting = 0;
            for (int k = 0; k < 6; k++)
                conducting |= on[k] > 0.5;
            if (!conducting)
                active = select;
        }
        int fire_ok = select == active;
        double sec1 = floor((th0 + dtheta - PI_6) / PI_3);
        if (sec1 > sec_prev) {
            int k = (int)fmod(sec1, 6.0);
            if (k < 0)
                k += 6;
            double nat = PI_6 + sec1 * PI_3;
            if (pulse_t > 0.0)
                pulse_vavg = vint / pulse_t;
            vint = 0.0;
            pulse_t = 0.0;
            latched = alpha;
            fire_at[k] = fire_ok ? nat + alpha : -1.0;
        }
        sec_prev = sec1;
        double th_mid = th0 + 0.5 * dtheta;
        for (int k = 0; k < 6; k++) {
            double fa = fire_at[k];
            if (fa >= 0.0 && th_mid >= fa) {
                fire_at[k] = -1.0;
                if (fire_ok) {
                    int km1 = (k + 5) % 6;
                    double g_end = fa + gate_w;
                    gate[k] = g_end;
                    if (gate[km1] < g_end)
                        gate[km1] = g_end;
                }
            }
        }
        int rail[3];
        for (int ph = 0; ph < 3; ph++)
            rail[ph] = on[UPPER_OF[ph]] > 0.5 ? 1 : (on[LOWER_OF[ph]] > 0.5 ? -1 : 0);
        double up, un;
        thevenin(rail, v0, pa, rs, fr.inv_k, &up, &un, &kp, &kn);
        if (kp > 0 && kn > 0) {
            for (int k = 0; k < 6; k++) {
                if (on[k] > 0.5)
                    continue;
                int gated = gate[k] > th0;
                int recovering = t_now - off_s[k] < tq;
                if (!(gated || recovering))
                    continue;
                int ph = THY_PHASE[k];
                double fwd;
                int partner;
                if (THY_UPPER[k]) {
                    fwd = v0[ph] - up;
                    partner = LOWER_OF[ph];
                } else {
                    fwd = un - v0[ph];
                    partner = UPPER_OF[ph];
                }
                if (fwd <= 0.0 || on[partner] > 0.5)
                    continue;
                on[k] = 1.0;
                if (THY_UPPER[k])
                    last_up = k;
                else
                    last_low = k;
            }
        } else {
            double best = 0.0;
            int bu = -1, bl = -1;
            for (int ku = 0; ku < 6; ku += 2) {
                if (gate[ku] <= th0 && on[ku] < 0.5)
                    continue;
                int phu = THY_PHASE[ku];
                for (int kl = 1; kl < 6; kl += 2) {
                    if (gate[kl] <= th0 && on[kl] < 0.5)
                        continue;
                    int phl = THY_PHASE[kl];
                    if (phl == phu)
                        continue;
                    double margin = v0[phu] - v0[phl] - vt;
                    if (margin > best) {
                        best = margin;
                        bu = ku;
                        bl = kl;
                    }
                }
            }
            if (bu >= 0) {
                for (int k = 0; k < 6; k++)
                    on[k] = 0.0;
                on[bu] = 1.0;
                on[bl] = 1.0;
                last_up = bu;
                last_low = bl;
            }
        }
        for (int ph = 0; ph < 3; ph++)
            rail[ph] = on[UPPER_OF[ph]] > 0.5 ? 1 : (on[LOWER_OF[ph]] > 0.5 ? -1 : 0);
        thevenin(rail, v0, pa, rs, fr.inv_k, &up, &un, &kp, &kn);
        feeds = kp > 0 && kn > 0;
        if (!feeds && i1 != 0.0) {
            i1 = 0.0; /* the terminal circuit is open */
        }
        int kp0 = kp, kn0 = kn;
        double inv_m11 = fr.inv_m11[kp0][kn0];
        double ls_kp = kp0 > 0 ? ls * fr.inv_k[kp0] : 0.0, ls_kn = kn0 > 0 ? ls * fr.inv_k[kn0] : 0.0;

        /* Heun stage 1 */
        double d1, d2, te, emf, dp[3] = {0.0, 0.0, 0.0};
        double vth0 = up - un;
        double vt_start = machine(p, &fr, seg, feeds, vth0, inv_m11, i1, i2, w, &d1, &d2, &te, &emf);
        if (feeds) {
            double vpr = up - ls_kp * d1, vnr = un + ls_kn * d1;
            for (int ph = 0; ph < 3; ph++)
                if (rail[ph] != 0)
                    dp[ph] = (v0[ph] - rs * pa[ph] - (rail[ph] > 0 ? vpr : vnr)) * inv_ls;
        }
        double dw = (te - p->viscous * w) * fr.inv_j;
        double i1p = i1 + dt * d1, i2p = i2 + dt * d2;
        double wp = passive(w, w + dt * dw, fr.dv);
        double pp[3] = {pa[0] + dt * dp[0], pa[1] + dt * dp[1], pa[2] + dt * dp[2]};
        /* stage 2 at the predictor */
        double e1, e2, te2, emf2, ep[3] = {0.0, 0.0, 0.0};
        if (feeds) {
            thevenin(rail, v1, pp, rs, fr.inv_k, &up, &un, &kp, &kn);
            vth1 = up - un;
        }
        vt = machine(p, &fr, seg, feeds, vth1, inv_m11, i1p, i2p, wp, &e1, &e2, &te2, &emf2);
        double vt2 = vt;
        if (feeds) {
            double vpr = up - ls_kp * e1, vnr = un + ls_kn * e1;
            for (int ph = 0; ph < 3; ph++)
                if (rail[ph] != 0)
                    ep[ph] = (v1[ph] - rs * pp[ph] - (rail[ph] > 0 ? vpr : vnr)) * inv_ls;
        }
        double dw2 = (te2 - p->viscous * wp) * fr.inv_j;
        double ia_pred = i1p;
        double i1n = i1 + h2 * (d1 + e1);
        double i2n = i2 + h2 * (d2 + e2);
        double wn = passive(w, w + h2 * (dw + dw2), fr.dv);
        angle += h2 * (w + wn);
        double pn[3];
        for (int ph = 0; ph < 3; ph++)
            pn[ph] = pa[ph] + h2 * (dp[ph] + ep[ph]);

        /* after the step: turn-off at current zero, overlap end inside the step, KCL */
        int nr[3];
        int np = 0, nn = 0, failed_up = 0, failed_low = 0;
        double f_off = 1.0;
        double dv_rest = 0.0, f_cond = 1.0; /* the step's voltage after an overlap end, conducting part */
        for (int ph = 0; ph < 3; ph++) {
            int r = rail[ph];
            double cur = pn[ph];
            if (r > 0 && cur <= 0.0) {
                int ku = UPPER_OF[ph];
                on[ku] = 0.0;
                off_s[ku] = t_now + dt;
                r = 0;
                if (pa[ph] > 0.0)
                    f_off = fmin(f_off, pa[ph] / (pa[ph] - cur));
                failed_up |= (int)last_up == ku;
            } else if (r < 0 && cur >= 0.0) {
                int kl = LOWER_OF[ph];
                on[kl] = 0.0;
                off_s[kl] = t_now + dt;
                r = 0;
                if (pa[ph] < 0.0)
                    f_off = fmin(f_off, pa[ph] / (pa[ph] - cur));
                failed_low |= (int)last_low == kl;
            }
            np += r > 0;
            nn += r < 0;
            nr[ph] = r;
            if (r == 0)
                pn[ph] = 0.0;
        }
        (void)failed_up;
        (void)failed_low;
        if (np == 0 || nn == 0) {
            for (int k = 0; k < 6; k++)
                if (on[k] > 0.5) {
                    on[k] = 0.0;
                    off_s[k] = t_now + dt;
                }
            pn[0] = pn[1] = pn[2] = 0.0;
            last_up = -1.0;
            last_low = -1.0;
            if (feeds) {
                if (i1 != 0.0) /* the DC current reached zero inside the step */
                    f_cond = i1 * i1n < 0.0 ? i1 / (i1 - i1n) : f_off;
                i1n = 0.0;
            }
        } else {
            if (feeds && f_off < 1.0) {
                double uo, uno, un2, up2, g1, g2, h1, hh2, tt, ee;
                int a, b, c, d;
                thevenin(rail, v1, pn, rs, fr.inv_k, &uo, &uno, &a, &b);
                thevenin(nr, v1, pn, rs, fr.inv_k, &up2, &un2, &c, &d);
                double vt_o = machine(p, &fr, seg, 1, uo - uno, fr.inv_m11[a][b], i1n, i2n, wn, &g1, &g2, &tt, &ee);
                double vt_n = machine(p, &fr, seg, 1, up2 - un2, fr.inv_m11[c][d], i1n, i2n, wn, &h1, &hh2, &tt, &ee);
                double rest = (1.0 - f_off) * dt;
                i1n += rest * (h1 - g1);
                i2n += rest * (hh2 - g2);
                /* the same sub-step in the terminal voltage; the step ends in the new circuit */
                dv_rest = (1.0 - f_off) * (vt_n - vt_o);
                vth1 = up2 - un2;
                kp = c;
                kn = d;
            }
            double s_p = 0.0, s_n = 0.0;
            for (int ph = 0; ph < 3; ph++) {
                if (nr[ph] > 0)
                    s_p += pn[ph];
                else if (nr[ph] < 0)
                    s_n -= pn[ph];
            }
            double i_d = feeds ? i1n : s_p;
            double dpp = (i_d - s_p) * fr.inv_k[np], dnn = (s_n - i_d) * fr.inv_k[nn];
            for (int ph = 0; ph < 3; ph++) {
                if (nr[ph] > 0)
                    pn[ph] += dpp;
                else if (nr[ph] < 0)
                    pn[ph] += dnn;
            }
        }
        pa[0] = pn[0];
        pa[1] = pn[1];
        pa[2] = pn[2];
        if (!feeds)
            i1n = 0.0;
        if (i2n < 0.0)
            i2n = 0.0; /* the field converter carries no negative current */
        zero_s = i1n == 0.0 ? zero_s + dt : 0.0;
        i1 = i1n;
        i2 = i2n;
        w = wn;
        double ia_sq = ia_pred;
        if (i1n == 0.0 && feeds) {
            /* the current stopped in this step: the open-circuit voltage follows */
            feeds = 0;
            double tt, ee, g1, g2;
            vt = machine(p, &fr, seg, 0, 0.0, 1.0, 0.0, i2n, wn, &g1, &g2, &tt, &ee);
            ia_sq = 0.0;
        }
        sum_ia2 += ia_sq * ia_sq;
        th = th0 + dtheta;
        s0 = s1;
        c0 = c1;
        t += dt;
        double vmean;
        if (f_cond < 1.0) {
            /* conducting part up to the current zero, then the open-circuit voltage */
            double v_cond = vt_start + 0.5 * f_cond * (vt2 - vt_start);
            vmean = f_cond * v_cond + (1.0 - f_cond) * vt;
        } else {
            vmean = 0.5 * (vt_start + vt) + dv_rest;
        }
        vint += vmean * dt;
        pulse_t += dt;
    }
    /* terminal voltage at the end state, as the kernel reports it and keeps it */
    {
        double g1, g2, tt, ee;
        vt = machine(p, &fr, seg, feeds, vth1, fr.inv_m11[kp][kn], i1, i2, w, &g1, &g2, &tt, &ee);
    }
    if (!(p->frozen > 0.5)) {
        double loss = sum_ia2 / n_sub * (COPPER_K + st->temp) / p->loss_rated;
        st->temp += n_sub * dt * (p->rise * loss - (st->temp - p->t_amb)) / p->tau_th;
    }
    st->i1 = i1;
    st->i2 = i2;
    st->w = w;
    st->angle = angle;
    st->t = t;
    st->th = th;
    st->vt = vt;
    for (int ph = 0; ph < 3; ph++)
        st->ph[ph] = pa[ph];
    for (int k = 0; k < 6; k++) {
        st->on[k] = on[k];
        st->off_s[k] = off_s[k];
        st->fire_at[k] = fire_at[k];
        st->gate[k] = gate[k];
    }
    st->active = active;
    st->zero_s = zero_s;
    st->vint = vint;
    st->pulse_t = pulse_t;
    st->pulse_vavg = pulse_vavg;
    st->last_up = last_up;
    st->last_low = last_low;
    st->latched = latched;
}

static int fail(const char *path, const char *name, const char *rule)
{
    fprintf(stderr, "%s: %s: %s\n", path, name, rule);
    return 2;
}

static void print_arr(const char *name, const double *v, int n)
{
    printf("%s %d", name, n);
    for (int k = 0; k < n; k++)
        printf(" %.17g", v[k]);
    printf("\n");
}

int main(int argc, char **argv)
{
    if (argc != 2) {
        fprintf(stderr, "usage: bridge_tuned PARAMS.txt\n");
        return 2;
    }
    const char *path = argv[1];
    FILE *f = fopen(path, "r");
    if (!f)
        return fail(path, "file", "cannot be opened");
    Params p;
    memset(&p, 0, sizeof p);
    State s0;
    memset(&s0, 0, sizeof s0);
    double n_frames = 0, n_sub = 0, repeats = 1;
    char name[64];
    int seen_curve = 0;
    while (fscanf(f, "%63s", name) == 1) {
        double *arr = NULL;
        int want = 0;
        if (!strcmp(name, "curve_i")) arr = p.ci, want = -1;
        else if (!strcmp(name, "curve_e")) arr = p.ce, want = -1;
        else if (!strcmp(name, "curve_d")) arr = p.cd, want = -1;
        else if (!strcmp(name, "ph_i_A")) arr = s0.ph, want = 3;
        else if (!strcmp(name, "thy_on")) arr = s0.on, want = 6;
        else if (!strcmp(name, "thy_off_s")) arr = s0.off_s, want = 6;
        else if (!strcmp(name, "thy_fire_at_rad")) arr = s0.fire_at, want = 6;
        else if (!strcmp(name, "thy_gate_rad")) arr = s0.gate, want = 6;
        if (arr) {
            int n;
            if (fscanf(f, "%d", &n) != 1 || n < 2 || n > MAX_POINTS || (want > 0 && n != want))
                return fail(path, name, "wrong length");
            for (int k = 0; k < n; k++)
                if (fscanf(f, "%lf", &arr[k]) != 1)
                    return fail(path, name, "needs n numbers");
            if (want < 0) {
                p.n = n;
                seen_curve++;
            }
            continue;
        }
        double v;
        if (fscanf(f, "%lf", &v) != 1)
            return fail(path, name, "needs a number");
#define KEY(k, dst) else if (!strcmp(name, k)) dst = v
        if (0) {}
        KEY("dt_s", p.dt); KEY("ra_ohm", p.ra); KEY("la_H", p.la); KEY("brush_drop_V", p.vb);
        KEY("brush_knee_A", p.knee); KEY("rf_hot_ohm", p.rf_hot); KEY("lf_leak_H", p.lf_leak);
        KEY("lm0_H", p.lm0); KEY("slope0_V_per_A", p.slope0); KEY("w_curve_rad_s", p.w_curve);
        KEY("t_ref_C", p.t_ref); KEY("j_total_kgm2", p.j_total); KEY("viscous_Nm_s", p.viscous);
        KEY("coulomb_Nm", p.coulomb); KEY("load_torque_Nm", p.t_load); KEY("field_sign", p.field_sign);
        KEY("thermal_rise_K", p.rise); KEY("thermal_tau_s", p.tau_th); KEY("ambient_C", p.t_amb);
        KEY("loss_rated", p.loss_rated); KEY("thermal_frozen", p.frozen);
        KEY("phase_peak_V", p.vpk); KEY("mains_Hz", p.f_mains); KEY("rs_ohm", p.rs); KEY("ls_H", p.ls);
        KEY("alpha_rad", p.alpha); KEY("gate_pulse_rad", p.gate_pulse); KEY("turn_off_s", p.tq);
        KEY("field_vac_V", p.field_vac); KEY("field_alpha_rad", p.field_alpha);
        KEY("i_line_A", s0.i1); KEY("i_field_A", s0.i2); KEY("w_rad_s", s0.w); KEY("angle_rad", s0.angle);
        KEY("temp_C", s0.temp); KEY("t_s", s0.t); KEY("mains_angle_rad", s0.th); KEY("vt_V", s0.vt);
        KEY("bridge_active", s0.active); KEY("zero_current_s", s0.zero_s); KEY("pulse_vint", s0.vint);
        KEY("pulse_t_s", s0.pulse_t); KEY("pulse_vavg_V", s0.pulse_vavg); KEY("last_fired_up", s0.last_up);
        KEY("last_fired_low", s0.last_low); KEY("latched_alpha_rad", s0.latched);
        KEY("n_frames", n_frames); KEY("n_sub", n_sub); KEY("repeats", repeats);
        else
            return fail(path, name, "unknown parameter");
#undef KEY
    }
    fclose(f);
    if (seen_curve != 3)
        return fail(path, "curve_i/curve_e/curve_d", "all three tables are required");
    if (p.dt <= 0.0 || p.la <= 0.0 || p.ls <= 0.0 || p.knee <= 0.0 || p.j_total <= 0.0 || p.w_curve <= 0.0
        || p.slope0 <= 0.0 || p.tau_th <= 0.0 || p.loss_rated <= 0.0)
        return fail(path, "dt_s, la_H, ls_H, brush_knee_A, j_total_kgm2, ...", "must be positive");
    if (p.field_sign != 1.0 && p.field_sign != -1.0)
        return fail(path, "field_sign", "must be 1 or -1");
    if (s0.active == 2.0)
        return fail(path, "bridge_active", "the reverse group is not in this reference");
    if (n_frames < 1 || n_sub < 1 || repeats < 1)
        return fail(path, "n_frames/n_sub/repeats", "must be at least 1");
    for (int k = 0; k + 1 < p.n; k++)
        p.inv_h[k] = 1.0 / (p.ci[k + 1] - p.ci[k]);

    State s = s0;
    Segment seg;
    double best_ns = -1.0, best_cpu_ns = -1.0;
    for (long r = 0; r < (long)repeats; r++) {
        s = s0;
        seg.lo = -2;
        seg.x0 = INFINITY;
        seg.x1 = -INFINITY;
        struct timespec a, b, ca, cb;
        clock_gettime(CLOCK_MONOTONIC, &a);
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ca);
        for (long fr = 0; fr < (long)n_frames; fr++)
            frame(&p, &s, &seg, (long)n_sub);
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &cb);
        clock_gettime(CLOCK_MONOTONIC, &b);
        double ns = (b.tv_sec - a.tv_sec) * 1e9 + (b.tv_nsec - a.tv_nsec);
        double cpu = (cb.tv_sec - ca.tv_sec) * 1e9 + (cb.tv_nsec - ca.tv_nsec);
        if (best_ns < 0.0 || ns < best_ns)
            best_ns = ns;
        if (best_cpu_ns < 0.0 || cpu < best_cpu_ns)
            best_cpu_ns = cpu;
    }
    printf("i_line_A %.17g\ni_field_A %.17g\nw_rad_s %.17g\nangle_rad %.17g\ntemp_C %.17g\nt_s %.17g\n",
           s.i1, s.i2, s.w, s.angle, s.temp, s.t);
    printf("mains_angle_rad %.17g\nvt_V %.17g\npulse_vavg_V %.17g\npulse_vint %.17g\nzero_current_s %.17g\n", s.th,
           s.vt, s.pulse_vavg, s.vint, s.zero_s);
    print_arr("ph_i_A", s.ph, 3);
    print_arr("thy_on", s.on, 6);
    print_arr("thy_off_s", s.off_s, 6);
    printf("best_ns %.17g\nbest_cpu_ns %.17g\nsteps %ld\n", best_ns, best_cpu_ns, (long)(n_frames * n_sub));
    return 0;
}
