/* Tuned speed reference for tools/bench_model.py: the separately excited case, written for speed.
 *
 * Owns nothing the host uses; tools/bench_model.py compiles it with `cc -O3` and runs it. It
 * must never be linked into the host or called from the model. It answers one question: how
 * fast can plain compiled code integrate the same equations as rtmodel/kernel.py for this one
 * case? That figure is the "near the limit" anchor of the kernel's speed target; the plain
 * anchor tools/bench_c/sep_heun.c (cc -O2, written for clarity) shows what straight code
 * without these tricks costs.
 *
 * Same model and method as sep_heun.c (read its header for the equations): separately
 * excited machine on an ideal DC source behind a resistance, DC field supply, Heun's method,
 * passive torques by projection after each stage (the kernel's law 1), armature temperature
 * once per frame on the frame's mean copper loss (ia^2 at each step's predictor). It also
 * keeps the frame sums a kernel call reports (mean terminal voltage over each step's two
 * stages, mean armature current, mean input and shaft power, peak |ia|), because the kernel
 * pays for them too.
 *
 * What makes it fast (each a thing the kernel may do as well):
 *   - the state lives in locals across a frame (stored once at the frame's end);
 *   - everything constant within a frame is computed once per frame: Ra at the frame's
 *     temperature, 1/La, 1/J, 1/w_curve, Lm0/E'_max, 1/knee, dt/2, the passive torque's dv;
 *   - the magnetization segment found in the previous evaluation is tried first (the field
 *     current moves by far less than a segment per step), with a search only on a miss;
 *   - no branch on connection, supply or load: this file is the one case.
 * The Hermite evaluation keeps the kernel's form and order of operations, so the final
 * state matches the kernel's to rounding (a few 1e-15 relative over seconds).
 *
 * Input: the parameter file of sep_heun.c (argv[1]); mechanics_law must be 1. Output on
 * stdout, one "name value" per line: final state, frame sums of the last frame, best wall
 * and CPU time of `repeats` runs. Exit status 2 with one line on stderr for a bad file.
 */
#define _POSIX_C_SOURCE 199309L
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define MAX_POINTS 32
#define COPPER_K 235.0

typedef struct {
    double dt, ra, la, vb, knee, rf_hot, lf_leak, lm0, slope0, w_curve, t_ref;
    double j_total, viscous, coulomb, t_load, field_sign;
    double law, w_smooth;
    double v_src, r_src, v_field;
    double rise, tau_th, t_amb, loss_rated, frozen;
    int n;
    double ci[MAX_POINTS], ce[MAX_POINTS], cd[MAX_POINTS], inv_h[MAX_POINTS];
} Params;

typedef struct {
    double ia, if_, w, angle, temp, t;
} State;

typedef struct {
    double vt, ia, pin, psh, peak;
} Sums;

/* the cached segment of the positive curve: [x0, x1) with its Hermite data */
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

/* one frame of n_sub steps; the state in locals throughout */
static void frame(const Params *p, State *st, Sums *sums, Segment *seg, long n_sub)
{
    double ia = st->ia, if_ = st->if_, w = st->w, angle = st->angle, t = st->t;
    const double dt = p->dt, h2 = 0.5 * dt;
    const double ra = p->ra * (COPPER_K + st->temp) / (COPPER_K + p->t_ref);
    const double inv_la = 1.0 / p->la, inv_j = 1.0 / p->j_total;
    const double inv_wc = 1.0 / p->w_curve, lm_k = p->lm0 / p->slope0, inv_knee = 1.0 / p->knee;
    const double dv = dt * (p->coulomb + fabs(p->t_load)) * inv_j;
    const double v_src = p->v_src, r_src = p->r_src, vb = p->vb, v_f = p->v_field;
    const double rf = p->rf_hot, lfl = p->lf_leak, visc = p->viscous, fs = p->field_sign;
    const double t_set = fabs(p->t_load); /* the passive constant load: its size, sign by motion */
    double s_vt = 0.0, s_ia = 0.0, s_pin = 0.0, s_psh = 0.0, peak = 0.0, s_ia2 = 0.0;
    for (long k = 0; k < n_sub; k++) {
        double e_c, de;
        /* stage 1 at the step's start */
        curve(p, seg, fs * if_, &e_c, &de);
        double kphi = e_c * inv_wc;
        double sa = ra * ia + kphi * w + vb * clip1(ia * inv_knee);
        double d1 = (v_src - r_src * ia - sa) * inv_la;
        double d2 = (v_f - rf * if_) / (lfl + lm_k * de);
        double dw = (kphi * ia - visc * w) * inv_j;
        double vt0 = v_src - r_src * ia;
        double iap = ia + dt * d1, ifp = if_ + dt * d2;
        double wp = passive(w, w + dt * dw, dv);
        /* stage 2 at the Euler predictor */
        curve(p, seg, fs * ifp, &e_c, &de);
        kphi = e_c * inv_wc;
        sa = ra * iap + kphi * wp + vb * clip1(iap * inv_knee);
        double e1 = (v_src - r_src * iap - sa) * inv_la;
        double e2 = (v_f - rf * ifp) / (lfl + lm_k * de);
        double dw2 = (kphi * iap - visc * wp) * inv_j;
        double vt1 = v_src - r_src * iap;
        double wn = passive(w, w + h2 * (dw + dw2), dv);
        angle += h2 * (w + wn);
        double ian = ia + h2 * (d1 + e1);
        if_ += h2 * (d2 + e2);
        double vmean = 0.5 * (vt0 + vt1);
        s_vt += vmean;
        s_ia += iap;
        s_ia2 += iap * iap;
        s_pin += vmean * 0.5 * (ia + ian);
        s_psh += t_set * (wn > 0.0 ? 1.0 : (wn < 0.0 ? -1.0 : 0.0)) * wn;
        if (fabs(iap) > peak)
            peak = fabs(iap);
        ia = ian;
        w = wn;
        t += dt;
    }
    if (!(p->frozen > 0.5)) {
        double loss = s_ia2 / n_sub * (COPPER_K + st->temp) / p->loss_rated;
        st->temp += n_sub * dt * (p->rise * loss - (st->temp - p->t_amb)) / p->tau_th;
    }
    st->ia = ia;
    st->if_ = if_;
    st->w = w;
    st->angle = angle;
    st->t = t;
    sums->vt = s_vt / n_sub;
    sums->ia = s_ia / n_sub;
    sums->pin = s_pin / n_sub;
    sums->psh = s_psh / n_sub;
    sums->peak = peak;
}

static int fail(const char *path, const char *name, const char *rule)
{
    fprintf(stderr, "%s: %s: %s\n", path, name, rule);
    return 2;
}

int main(int argc, char **argv)
{
    if (argc != 2) {
        fprintf(stderr, "usage: sep_tuned PARAMS.txt\n");
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
        if (!strcmp(name, "curve_i") || !strcmp(name, "curve_e") || !strcmp(name, "curve_d")) {
            int n;
            if (fscanf(f, "%d", &n) != 1 || n < 2 || n > MAX_POINTS)
                return fail(path, name, "needs a length from 2 to 32");
            double *dst = name[6] == 'i' ? p.ci : (name[6] == 'e' ? p.ce : p.cd);
            for (int k = 0; k < n; k++)
                if (fscanf(f, "%lf", &dst[k]) != 1)
                    return fail(path, name, "needs n numbers");
            p.n = n;
            seen_curve++;
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
        KEY("coulomb_Nm", p.coulomb); KEY("w_smooth_rad_s", p.w_smooth);
        KEY("load_torque_Nm", p.t_load); KEY("v_source_V", p.v_src); KEY("r_source_ohm", p.r_src);
        KEY("v_field_V", p.v_field); KEY("thermal_rise_K", p.rise); KEY("thermal_tau_s", p.tau_th);
        KEY("ambient_C", p.t_amb); KEY("loss_rated", p.loss_rated); KEY("thermal_frozen", p.frozen);
        KEY("ia0_A", s0.ia); KEY("if0_A", s0.if_); KEY("w0_rad_s", s0.w); KEY("angle0_rad", s0.angle);
        KEY("temp0_C", s0.temp); KEY("n_frames", n_frames); KEY("n_sub", n_sub);
        KEY("repeats", repeats); KEY("field_sign", p.field_sign); KEY("mechanics_law", p.law);
        else
            return fail(path, name, "unknown parameter");
#undef KEY
    }
    fclose(f);
    if (seen_curve != 3)
        return fail(path, "curve_i/curve_e/curve_d", "all three tables are required");
    if (p.dt <= 0.0 || p.la <= 0.0 || p.knee <= 0.0 || p.j_total <= 0.0 || p.w_curve <= 0.0
        || p.slope0 <= 0.0 || p.tau_th <= 0.0 || p.loss_rated <= 0.0)
        return fail(path, "dt_s, la_H, brush_knee_A, j_total_kgm2, ...", "must be positive");
    if (p.field_sign != 1.0 && p.field_sign != -1.0)
        return fail(path, "field_sign", "must be 1 or -1");
    if (p.law != 1.0)
        return fail(path, "mechanics_law", "must be 1 (passive projection): the tuned file has only that law");
    if (n_frames < 1 || n_sub < 1 || repeats < 1)
        return fail(path, "n_frames/n_sub/repeats", "must be at least 1");
    for (int k = 0; k + 1 < p.n; k++)
        p.inv_h[k] = 1.0 / (p.ci[k + 1] - p.ci[k]); /* as rtmodel.magnetization.pack_curve */

    State s = s0;
    Sums sums = {0.0, 0.0, 0.0, 0.0, 0.0};
    Segment seg;
    double best_ns = -1.0, best_cpu_ns = -1.0;
    for (long r = 0; r < (long)repeats; r++) {
        s = s0;
        seg.lo = -2;
        seg.x0 = INFINITY; /* forces a search at the first evaluation */
        seg.x1 = -INFINITY;
        struct timespec a, b, ca, cb;
        clock_gettime(CLOCK_MONOTONIC, &a);
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ca);
        for (long fr = 0; fr < (long)n_frames; fr++)
            frame(&p, &s, &sums, &seg, (long)n_sub);
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &cb);
        clock_gettime(CLOCK_MONOTONIC, &b);
        double ns = (b.tv_sec - a.tv_sec) * 1e9 + (b.tv_nsec - a.tv_nsec);
        double cpu = (cb.tv_sec - ca.tv_sec) * 1e9 + (cb.tv_nsec - ca.tv_nsec);
        if (best_ns < 0.0 || ns < best_ns)
            best_ns = ns;
        if (best_cpu_ns < 0.0 || cpu < best_cpu_ns)
            best_cpu_ns = cpu;
    }
    printf("ia_A %.17g\nif_A %.17g\nw_rad_s %.17g\nangle_rad %.17g\ntemp_C %.17g\nt_s %.17g\n",
           s.ia, s.if_, s.w, s.angle, s.temp, s.t);
    printf("vt_mean_V %.17g\nia_mean_A %.17g\ninput_power_W %.17g\nshaft_power_W %.17g\nia_peak_A %.17g\n",
           sums.vt, sums.ia, sums.pin, sums.psh, sums.peak);
    printf("best_ns %.17g\nbest_cpu_ns %.17g\nsteps %ld\n", best_ns, best_cpu_ns, (long)(n_frames * n_sub));
    return 0;
}
