/* Speed anchor for tools/bench_model.py: one connection of the dcrig model in plain C.
 *
 * Owns nothing the host uses; it is compiled and run by tools/bench_model.py only (cc -O2).
 * It must never be linked into the host or called from the model; it exists so the numba
 * kernel's speed can be read against straight-line compiled code doing the same arithmetic.
 *
 * What it integrates (the same equations as rtmodel/kernel.py, reduced to one case):
 * separately excited machine on an ideal DC source behind a resistance, DC field supply,
 * Heun's method (explicit trapezoidal) with a fixed step:
 *
 *   La dia/dt            = V - Rsrc ia - (Ra(T) ia + E + Vb clip(ia/knee, -1, 1))
 *   (Lfl + Lm(if)) dif/dt = Vf - Rf_hot if
 *   E = E_curve(s if) w / w_curve,  Lm = Lm0 E'(s if) / E'_max,  Te = E_curve(s if)/w_curve * ia
 *   (s = field_sign: -1 for a field connected the other way round)
 *   J dw/dt = Te - B w - passive torques (Coulomb friction Tc and the constant load T_load),
 *   the passive ones by one of two laws, as the kernel version in use has it (mechanics_law):
 *     0: smoothed sign, Tc clip(w/w_s) + T_load clip(w/w_s), inside both Heun stages;
 *     1: projection after each stage: the shaft slows by dt (Tc + |T_load|)/J in its
 *        direction of motion, stops rather than reverse, and stays at rest while the active
 *        change is within that (break-away), the stages carrying only the active torques.
 *   Ra(T) = Ra_ref (235 + T)/(235 + T_ref)                             (IEC 60034-1 copper)
 *   dT/dt = (rise ia^2 (235 + T)/loss_rated - (T - T_amb)) / tau       (one explicit step per
 *           frame of n_sub steps on the frame's mean ia^2, ia taken at each step's predictor)
 *
 * E_curve is the monotone cubic Hermite table of rtmodel/magnetization.py (knot slopes
 * precomputed by the Python side), segment found by binary search, straight line past the
 * last knot, point-mirrored with the residual fading out for negative excitation.
 * No armature reaction (the script only calls this for a machine whose table is empty).
 *
 * Input: a parameter file (argv[1]) of lines "name value" or "name n v1 .. vn" (arrays), as
 * written by tools/bench_model.py. Output on stdout, one "name value" per line: the final
 * state and the best wall and CPU time of `repeats` runs of n_frames x n_sub steps, each run from the
 * same initial state. Exit status 2 with one line on stderr for a bad parameter file.
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
    double j_total, viscous, coulomb, w_smooth, t_load, field_sign;
    int law;
    double v_src, r_src, v_field;
    double rise, tau_th, t_amb, loss_rated;
    int frozen;
    int n;
    double ci[MAX_POINTS], ce[MAX_POINTS], cd[MAX_POINTS];
} Params;

typedef struct {
    double ia, if_, w, angle, temp, t;
} State;

static void curve_pos(const Params *p, double i, double *e, double *de)
{
    int last = p->n - 1;
    if (i >= p->ci[last]) {
        *de = p->cd[last];
        *e = p->ce[last] + p->cd[last] * (i - p->ci[last]);
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
    double x0 = p->ci[lo], h = p->ci[hi] - x0;
    double y0 = p->ce[lo], y1 = p->ce[hi], d0 = p->cd[lo], d1 = p->cd[hi];
    double t = (i - x0) / h, t2 = t * t, t3 = t2 * t;
    *e = (2.0 * t3 - 3.0 * t2 + 1.0) * y0 + (t3 - 2.0 * t2 + t) * h * d0
       + (-2.0 * t3 + 3.0 * t2) * y1 + (t3 - t2) * h * d1;
    *de = (6.0 * t2 - 6.0 * t) / h * y0 + (3.0 * t2 - 4.0 * t + 1.0) * d0
        + (-6.0 * t2 + 6.0 * t) / h * y1 + (3.0 * t2 - 2.0 * t) * d1;
}

static void curve(const Params *p, double i, double *e, double *de)
{
    if (i >= 0.0) {
        curve_pos(p, i, e, de);
        return;
    }
    curve_pos(p, -i, e, de);
    double fade = 1.0 + i / p->ci[1];
    *e = -*e;
    if (fade > 0.0) {
        *e += 2.0 * p->ce[0] * fade;
        *de += 2.0 * p->ce[0] / p->ci[1];
    }
}

static double clip1(double x) { return x > 1.0 ? 1.0 : (x < -1.0 ? -1.0 : x); }

/* law 1: speed after a step whose active change gave w_free, passive torques worth dv */
static double passive(double w0, double w_free, double dv)
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

/* derivatives at (ia, if, w); also the electrical torque */
static void deriv(const Params *p, double ra, double ia, double if_, double w,
                  double *dia, double *dif, double *dw, double *te)
{
    double e_c, de;
    curve(p, p->field_sign * if_, &e_c, &de);
    double kphi = e_c / p->w_curve;
    double lm = p->lm0 * de / p->slope0;
    double v_arm = ra * ia + kphi * w + p->vb * clip1(ia / p->knee);
    *dia = (p->v_src - p->r_src * ia - v_arm) / p->la;
    *dif = (p->v_field - p->rf_hot * if_) / (p->lf_leak + lm);
    *te = kphi * ia;
    if (p->law == 0) {
        double xf = clip1(w / p->w_smooth);
        *dw = (*te - p->viscous * w - p->coulomb * xf - p->t_load * xf) / p->j_total;
    } else {
        *dw = (*te - p->viscous * w) / p->j_total;
    }
}

/* one Heun step; returns the predictor's armature current squared (the copper loss term) */
static double step(const Params *p, State *s)
{
    double dt = p->dt;
    double ra = p->ra * (COPPER_K + s->temp) / (COPPER_K + p->t_ref);
    double d1, d2, dw, te, e1, e2, dw2, te2;
    deriv(p, ra, s->ia, s->if_, s->w, &d1, &d2, &dw, &te);
    double dv = p->law == 1 ? dt * (p->coulomb + fabs(p->t_load)) / p->j_total : 0.0;
    double iap = s->ia + dt * d1, ifp = s->if_ + dt * d2, wp = s->w + dt * dw;
    if (p->law == 1)
        wp = passive(s->w, wp, dv);
    deriv(p, ra, iap, ifp, wp, &e1, &e2, &dw2, &te2);
    double h2 = 0.5 * dt;
    double wn = s->w + h2 * (dw + dw2);
    if (p->law == 1)
        wn = passive(s->w, wn, dv);
    s->angle += h2 * (s->w + wn);
    s->ia += h2 * (d1 + e1);
    s->if_ += h2 * (d2 + e2);
    s->w = wn;
    s->t += dt;
    return iap * iap;
}

/* one frame: n_sub steps, then the armature temperature on the frame's mean copper loss */
static void frame(const Params *p, State *s, long n_sub)
{
    double sum_ia2 = 0.0;
    for (long k = 0; k < n_sub; k++)
        sum_ia2 += step(p, s);
    if (!p->frozen) {
        double loss = sum_ia2 / n_sub * (COPPER_K + s->temp) / p->loss_rated;
        s->temp += n_sub * p->dt * (p->rise * loss - (s->temp - p->t_amb)) / p->tau_th;
    }
}

static int fail(const char *path, const char *name, const char *rule)
{
    fprintf(stderr, "%s: %s: %s\n", path, name, rule);
    return 2;
}

int main(int argc, char **argv)
{
    if (argc != 2) {
        fprintf(stderr, "usage: sep_heun PARAMS.txt\n");
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
    long n_frames = 0, n_sub = 0, repeats = 1;
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
        || p.slope0 <= 0.0 || (p.law == 0 && p.w_smooth <= 0.0) || p.tau_th <= 0.0 || p.loss_rated <= 0.0)
        return fail(path, "dt_s, la_H, brush_knee_A, j_total_kgm2, ...", "must be positive");
    if (p.field_sign != 1.0 && p.field_sign != -1.0)
        return fail(path, "field_sign", "must be 1 or -1");
    if (p.law != 0 && p.law != 1)
        return fail(path, "mechanics_law", "must be 0 (smoothed sign) or 1 (passive projection)");
    if (n_frames < 1 || n_sub < 1 || repeats < 1)
        return fail(path, "n_frames/n_sub/repeats", "must be at least 1");

    State s = s0;
    double best_ns = -1.0, best_cpu_ns = -1.0;
    for (long r = 0; r < repeats; r++) {
        s = s0;
        struct timespec a, b, ca, cb;
        clock_gettime(CLOCK_MONOTONIC, &a);
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ca);
        for (long fr = 0; fr < n_frames; fr++)
            frame(&p, &s, n_sub);
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
    printf("best_ns %.17g\nbest_cpu_ns %.17g\nsteps %ld\n", best_ns, best_cpu_ns, n_frames * n_sub);
    return 0;
}
