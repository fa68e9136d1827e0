/*
 * Compiled transmission kernel: the reflection-ratio recursion of
 * physics/transmission.py in real arithmetic, vectorised across energies.
 *
 * The recursion, its stability argument and its references are documented
 * in physics/transmission.py; this file computes the same numbers (tested
 * against the numpy implementation to 1e-10 relative). Per slice the wave
 * number is either real (propagating) or imaginary (evanescent), so the
 * ratio eta of k/m across an interface is real or purely imaginary and the
 * phase factor exp(2 i k d) is either (cos, sin) or a real decay: no complex
 * square roots or exponentials are needed; the rotation comes from one tangent of
 * the half angle, cos = (1 - t^2)/(1 + t^2) and sin = 2t/(1 + t^2). Lanes of LANES (energy, profile)
 * items (WIDE_LANES on the long grids of grid_states: two vectors whose recursions overlap)
 * advance through the slices together; on x86-64 glibc the loops compile to SIMD
 * with the vector math library (libmvec), in clones for AVX-512, AVX2 and
 * baseline SSE2 picked at load time.
 *
 * Python interface (physics._slices):
 *   transmission(n_slices, n_energy, energy, edge, mass, alpha, width, inv_hb2, t_out,
 *                r_out, rows)
 * energy: float64 buffer of n_groups * n_energy values; edge, mass, alpha, width:
 * float64 buffers of n_profiles * n_slices values; t_out like energy (written);
 * r_out like energy or None; rows: int64 buffer giving each energy group's profile,
 * or None (then n_groups = n_profiles, group g on profile g).
 * inv_hb2 = 1 / (hbar^2 / 2 m0) in 1/(eV nm^2).
 *   refine_brackets(n_slices, edge, mass, alpha, width, inv_hb2, rows, x, y, iterations,
 *                   extra_rounds, loose_bracket, loose_fit)
 * the bracketing rounds of physics/resonances.py (refine_bracketed) on n brackets: x, y
 * float64 buffers of 3 n values (energies and 1/T, updated in place), rows int64 (n), each
 * bracket's profile. Each round evaluates the probes of every open bracket in one call of
 * the kernel above, so the rounds cost no Python overhead.
 *   refine_peaks(..., exact_peak, out): the same, then the end of refine_bracketed (centre,
 *                width and peak T of each line into out, 3 n values).
 *   grid_states(n_slices, n_energy, energy, edge, mass, alpha, width, inv_hb2, n_max,
 *               n_first, iterations, extra_rounds, loose_bracket, loose_fit, exact_peak, out)
 * find_resonances of physics/resonances.py after its grid is made: T on each profile's
 * grid, the n_max highest local maxima and the n_first first ones, each refined as
 * refine_peaks does (one call per well-charge step of the self-consistent model instead of a
 * dozen numpy steps).
 *   charge_arguments(n_slots, states, edge, mu, kt, em1_arg, exp_arg),
 *   charge_sums(n_slots, states, mu, kt, n2d, em1_val, log1p_val, charge)
 * the well-sheet charge of each well-charge step from grid_states' out (physics/
 * electrostatics.py, _WellChargeStep) around numpy's expm1, exp and log1p.
 *   well_root_step(state, well, residual, target, done, has_previous, mixing, tolerance,
 *                  abs_cm2)
 * one step of the well-charge root search of physics/electrostatics.py (_WellChargeRoot).
 *   poisson_newton(n_nodes, rows, u, g, w, donors, offset, mu, mask, fixed, nc, kt, coef,
 *                  eta_lo, eta_step, eta_hi, tolerance, max_step, max_iterations, q, electrons)
 * the damped Newton iteration of physics/electrostatics.py (solve_poisson_1d), entry by entry.
 *   barrier_action(n_slices, lo, hi, hb2, z, edge, mass, width, run, out)
 * int kappa dz over one barrier at many energies per profile (physics/scattering.py,
 * _barrier_action: the WKB couplings of the scattering-assisted channel).
 *   node_arguments(...), node_fluxes(...)
 * the scattering channel's couplings and reservoir fluxes at its energy nodes
 * (physics/scattering.py: _couplings, _reservoir_fluxes) around numpy's exp, arctan, tanh.
 *   well_shots(n_slices, n_states, hb2, energy, par, edge, mass, width, out)
 * psi shot through the well at each state's energy: the slopes -dE_n/dz at the well's
 * interfaces and the kinetic energy in the well (physics/scattering.py, _well_shots).
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>
#include <stdint.h>

#define LANES 8
#define WIDE_LANES 16
#define MIN_MASS_FACTOR 0.5
#define K2_FLOOR 1e-12 /* K2_FLOOR_PER_NM2 of transmission.py */
#define RENORM_EVERY 8
#define LN2 0.69314718055994530942

#if defined(WW_HAVE_LIBMVEC) && defined(__GNUC__) && defined(__x86_64__) && !defined(__clang__)
#define WW_VECTOR_MATH 1
/* libmvec variants exist for these; const lets the vectoriser call them. */
double exp(double) __attribute__((simd("notinbranch"), const, nothrow));
double log(double) __attribute__((simd("notinbranch"), const, nothrow));
double tan(double) __attribute__((simd("notinbranch"), const, nothrow));
#define WW_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define WW_CLONES
#endif

#if defined(_OPENMP) || defined(WW_VECTOR_MATH)
#define WW_SIMD _Pragma("omp simd")
#else
#define WW_SIMD
#endif

static inline double floor_k2(double k2) { return fabs(k2) < K2_FLOOR ? K2_FLOOR : k2; }
static inline double mass_factor(double x) { return x > MIN_MASS_FACTOR ? x : MIN_MASS_FACTOR; }

/* k^2 (1/nm^2, floored) and the energy-dependent mass (m0) at energy e in slice o. */
static inline double slice_k2(double e, Py_ssize_t o, const double *edge, const double *mass,
                              const double *alpha, double inv_hb2, double *m_out)
{
    const double kin = e - edge[o];
    const double m = mass_factor(1.0 + alpha[o] * kin) * mass[o];
    *m_out = m;
    return floor_k2(m * kin * inv_hb2);
}

/* One chunk of `lanes` (lanes or WIDE_LANES) (energy, profile) items from item e0 on. Item i belongs to energy
   group i / ne, which runs on profile rows[group] (the group itself without rows).
   Lanes run over items, not over one profile's energies, so that short energy lists
   (two probes per resonance in the refinement) fill the vectors too; each lane then
   gathers its own profile's slice parameters. With `shared` (the chunk inside one
   energy group: every chunk when ne is a multiple of lanes, all but the straddling ones
   otherwise) all lanes read one profile: plain loads instead of gathers, and padding
   slices are skipped. Inlined once per case and width. */
static inline __attribute__((always_inline)) void chunk(
    const int shared, const int lanes, int n, const double *edge, const double *mass, const double *alpha,
    const double *width, const int64_t *rows, Py_ssize_t n_items, Py_ssize_t ne,
    const double *energy, double inv_hb2, double *t_out, double *r_out, Py_ssize_t e0)
{
    double en[WIDE_LANES], rr[WIDE_LANES], ri[WIDE_LANES], lg[WIDE_LANES], pm[WIDE_LANES];
    double q_next[WIDE_LANES], p_next[WIDE_LANES], q_coll[WIDE_LANES], arg[WIDE_LANES];
    Py_ssize_t base[WIDE_LANES]; /* offset of the lane's profile in the slice arrays */
    const int used = (n_items - e0) < lanes ? (int)(n_items - e0) : lanes;
    Py_ssize_t group = e0 / ne, within = e0 % ne; /* of lane 0; the others count on */
    for (int l = 0; l < lanes; l++) {
        en[l] = energy[e0 + (l < used ? l : used - 1)];
        base[l] = (rows ? (Py_ssize_t)rows[group] : group) * n;
        if (l + 1 < used && ++within == ne) {
            within = 0;
            group++;
        }
    }
    const Py_ssize_t base0 = base[0];
    {
        const int j = n - 1;
        WW_SIMD
        for (int l = 0; l < lanes; l++) {
            double m;
            const double k2 = slice_k2(en[l], (shared ? base0 : base[l]) + j, edge, mass, alpha,
                                       inv_hb2, &m);
            const double p = k2 > 0.0 ? 1.0 : 0.0;
            q_next[l] = sqrt(fabs(k2)) / m;
            p_next[l] = p;
            q_coll[l] = p * q_next[l];
            rr[l] = 0.0;
            ri[l] = 0.0;
            lg[l] = 0.0;
            pm[l] = 1.0;
        }
    }
    for (int j = n - 2; j >= 0; j--) {
        if (shared && j > 0) {
            const Py_ssize_t o = base0 + j;
            if (width[o] == 0.0 && edge[o] == edge[o + 1] && mass[o] == mass[o + 1] &&
                alpha[o] == alpha[o + 1]) {
                /* a zero-width copy of the next slice (padding): an exact identity, whose
                   den = 2 is what the final normalisation by 2^(n-1) expects */
                for (int l = 0; l < lanes; l++) pm[l] *= 4.0;
                continue;
            }
        }
        WW_SIMD
        for (int l = 0; l < lanes; l++) {
            const Py_ssize_t o = (shared ? base0 : base[l]) + j;
            double m;
            const double k2 = slice_k2(en[l], o, edge, mass, alpha, inv_hb2, &m);
            const double p = k2 > 0.0 ? 1.0 : 0.0; /* 1 propagating, 0 evanescent */
            const double s = sqrt(fabs(k2));
            const double t = 1.0 / (s * m); /* one division for q = s/m and 1/q = m/s */
            const double q = s * s * t;
            /* eta = (q_next / q) times 1, -i or +i as the two slices' kinds differ */
            const double r = q_next[l] * m * m * t;
            const double dp = p - p_next[l];
            const double er = (1.0 - dp * dp) * r, ei = dp * r;
            /* rho' = (u - v) / (u + v), u = 1 + rho, v = eta (1 - rho) */
            const double ar = 1.0 - rr[l], ai = -ri[l];
            const double vr = er * ar - ei * ai, vi = er * ai + ei * ar;
            const double ur = 1.0 + rr[l], ui = ri[l];
            const double dr = ur + vr, di = ui + vi;
            const double nr = ur - vr, ni = ui - vi;
            const double d2 = dr * dr + di * di;
            const double inv = 1.0 / d2;
            const double xr = (nr * dr + ni * di) * inv, xi = (ni * dr - nr * di) * inv;
            pm[l] *= d2;
            rr[l] = xr;
            ri[l] = xi;
            arg[l] = 2.0 * width[o] * s;
            q_next[l] = q;
            p_next[l] = p;
        }
        /* rho_j = rho' exp(2 i k d): a rotation where propagating, a decay where
           evanescent; none at the emitter (j = 0, where only rho' is needed). Lanes
           of one kind only (the common case: inside a barrier or a well) skip the
           other kind's functions. */
        double n_prop = 0.0;
        for (int l = 0; l < lanes; l++) n_prop += p_next[l];
        if (j == 0) {
            /* the emitter: rho' is its reflection ratio */
        } else if (n_prop == lanes) {
            WW_SIMD
            for (int l = 0; l < lanes; l++) {
                const double th = tan(0.5 * arg[l]), den = 1.0 / (1.0 + th * th);
                const double c = (1.0 - th * th) * den, si = 2.0 * th * den;
                const double xr = rr[l], xi = ri[l];
                rr[l] = xr * c - xi * si;
                ri[l] = xr * si + xi * c;
            }
        } else if (n_prop == 0.0) {
            WW_SIMD
            for (int l = 0; l < lanes; l++) {
                const double c = exp(-arg[l]);
                rr[l] *= c;
                ri[l] *= c;
                lg[l] += arg[l];
            }
        } else {
            WW_SIMD
            for (int l = 0; l < lanes; l++) {
                const double p = p_next[l];
                const double th = tan(0.5 * arg[l]), den = 1.0 / (1.0 + th * th);
                const double cs = (1.0 - th * th) * den, sn = 2.0 * th * den, ex = exp(-arg[l]);
                const double c = p * cs + (1.0 - p) * ex, si = p * sn;
                const double xr = rr[l], xi = ri[l];
                rr[l] = xr * c - xi * si;
                ri[l] = xr * si + xi * c;
                lg[l] += (1.0 - p) * arg[l];
            }
        }
        if ((n - j) % RENORM_EVERY == 0) { /* keep the product of |den|^2 in range */
            WW_SIMD
            for (int l = 0; l < lanes; l++) {
                lg[l] += log(pm[l]);
                pm[l] = 1.0;
            }
        }
    }
    double t[WIDE_LANES], refl[WIDE_LANES];
    WW_SIMD
    for (int l = 0; l < lanes; l++) {
        const double flux_in = p_next[l] * q_next[l];
        const double log_amp = lg[l] + log(pm[l]) - 2.0 * (n - 1) * LN2;
        const double ok = flux_in > 0.0 ? 1.0 : 0.0;
        double tl = ok * (q_coll[l] / (flux_in + (1.0 - ok))) * exp(-log_amp);
        tl = tl < 0.0 ? 0.0 : (tl > 1.0 ? 1.0 : tl);
        double rl = ok * (rr[l] * rr[l] + ri[l] * ri[l]) + (1.0 - ok);
        rl = rl > 1.0 ? 1.0 : rl;
        t[l] = tl;
        refl[l] = rl;
    }
    for (int l = 0; l < used; l++) {
        t_out[e0 + l] = t[l];
        if (r_out) r_out[e0 + l] = refl[l];
    }
}

/* T (and R) of n_items (energy, profile) items in chunks of LANES; with `wide`, two such
   chunks at a time where they share a kind (both inside one energy group, or neither): one
   chunk of WIDE_LANES, two vectors' worth whose recursions (a chain of dependent operations
   per slice) overlap. Each item is computed as in its chunk of LANES (in one group: plain
   loads, padding slices skipped; else gathered), so its numbers are the same either way. */
WW_CLONES
static void kernel(int n, const double *edge, const double *mass, const double *alpha,
                   const double *width, const int64_t *rows, Py_ssize_t n_items, Py_ssize_t ne,
                   const double *energy, double inv_hb2, double *t_out, double *r_out, int wide)
{
    Py_ssize_t e0 = 0;
    while (e0 < n_items) {
        const Py_ssize_t end = e0 + LANES < n_items ? e0 + LANES : n_items;
        const int one = e0 / ne == (end - 1) / ne; /* the chunk in one energy group */
        if (wide && end < n_items) {
            const Py_ssize_t end2 = end + LANES < n_items ? end + LANES : n_items;
            if (one == (end / ne == (end2 - 1) / ne) && (!one || e0 / ne == end / ne)) {
                if (one)
                    chunk(1, WIDE_LANES, n, edge, mass, alpha, width, rows, n_items, ne, energy,
                          inv_hb2, t_out, r_out, e0);
                else
                    chunk(0, WIDE_LANES, n, edge, mass, alpha, width, rows, n_items, ne, energy,
                          inv_hb2, t_out, r_out, e0);
                e0 = end2;
                continue;
            }
        }
        if (one)
            chunk(1, LANES, n, edge, mass, alpha, width, rows, n_items, ne, energy, inv_hb2,
                  t_out, r_out, e0);
        else
            chunk(0, LANES, n, edge, mass, alpha, width, rows, n_items, ne, energy, inv_hb2,
                  t_out, r_out, e0);
        e0 = end;
    }
}

static int need_double(Py_buffer *b, const char *name);
static Py_ssize_t slice_profiles(int n, Py_buffer *bv, Py_buffer *bm, Py_buffer *ba,
                                 Py_buffer *bw);

/* ---- resonance bracketing (physics/resonances.py: refine_bracketed, _bracket_round) ----
   The rounds that shrink a bracket of three energies around a transmission peak, the same
   arithmetic as the numpy statement in resonances.py (which stays the reference and the
   fallback; tests compare the two). NaN propagates as numpy's maximum/minimum/argmin do. */

static inline double max_nan(double a, double b) { return (a != a || b != b) ? NAN : (a > b ? a : b); }
static inline double min_nan(double a, double b) { return (a != a || b != b) ? NAN : (a < b ? a : b); }

/* parabola_through: vertex offset u from x[1], curvature a and the parabola's minimum */
static inline void parabola3(const double *x, const double *y, double *u_out, double *a_out,
                             double *ymin_out)
{
    const double d0 = x[0] - x[1], d2 = x[2] - x[1];
    const double s0 = (y[0] - y[1]) / d0, s2 = (y[2] - y[1]) / d2;
    const double a = (s2 - s0) / (d2 - d0);
    const double b = s0 - a * d0;
    double u = a > 0.0 ? -b / (2.0 * a) : 0.0;
    u = min_nan(max_nan(u, d0), d2);
    *u_out = u;
    *a_out = a;
    *ymin_out = y[1] + b * u + a * (u * u);
}

static inline double half_width(double a, double ymin)
{
    return (a > 0.0 && ymin > 0.0) ? sqrt(fabs(ymin / a)) : NAN;
}

/* ordering of numpy's sort: NaN last */
static inline int less_nan_last(double a, double b) { return a < b || (b != b && a == a); }

static void refine_kernel(int n, const double *edge, const double *mass, const double *alpha,
                          const double *width, const int64_t *peak_rows, Py_ssize_t n_peaks,
                          double *x, double *y, int iterations, int extra_rounds,
                          double loose_bracket, double loose_fit, double inv_hb2,
                          Py_ssize_t *active, double *h_buf, double *u_buf, double *energy,
                          int64_t *rows, double *t, int *n_probe, int wide)
{
    Py_ssize_t n_active = n_peaks;
    for (Py_ssize_t i = 0; i < n_peaks; i++) active[i] = i;
    for (int round = 0; round < iterations + extra_rounds; round++) {
        if (round >= iterations) { /* extra rounds: lines not yet fitted or still loose */
            Py_ssize_t kept = 0;
            for (Py_ssize_t k = 0; k < n_active; k++) {
                const Py_ssize_t i = active[k];
                double u, a, ymin;
                parabola3(x + 3 * i, y + 3 * i, &u, &a, &ymin);
                const double half = half_width(a, ymin);
                const int loose = (x[3 * i + 2] - x[3 * i]) > loose_fit * half;
                if (!isfinite(half) || loose) active[kept++] = i;
            }
            n_active = kept;
            if (n_active == 0) break;
        }
        /* probes of every active bracket: vertex -+ h, and the bisection of a loose one */
        Py_ssize_t n_items = 0;
        for (Py_ssize_t k = 0; k < n_active; k++) {
            const Py_ssize_t i = active[k];
            const double *xi = x + 3 * i, *yi = y + 3 * i;
            double u, a, ymin;
            parabola3(xi, yi, &u, &a, &ymin);
            const double left = xi[1] - xi[0], right = xi[2] - xi[1];
            const double vertex = xi[1] + u;
            const double half = half_width(a, ymin);
            const double room = min_nan(vertex - xi[0], xi[2] - vertex);
            double h = isfinite(half) ? half : (a > 0.0 ? 0.05 : 0.25) * min_nan(left, right);
            h = min_nan(max_nan(h, 1e-3 * room), 0.9 * room);
            h_buf[k] = h;
            u_buf[k] = u;
            energy[n_items] = vertex - h;
            rows[n_items++] = peak_rows[i];
            energy[n_items] = vertex + h;
            rows[n_items++] = peak_rows[i];
            n_probe[k] = 2;
            if (max_nan(left, right) > loose_bracket * h) {
                const int go_left = u == 0.0 ? left > right : u > 0.0;
                energy[n_items] = xi[1] + (go_left ? -0.5 * left : 0.5 * right);
                rows[n_items++] = peak_rows[i];
                n_probe[k] = 3;
            }
        }
        kernel(n, edge, mass, alpha, width, rows, n_items, 1, energy, inv_hb2, t, NULL, wide);
        Py_ssize_t item = 0;
        for (Py_ssize_t k = 0; k < n_active; k++) {
            const Py_ssize_t i = active[k];
            double xs[6], ys[6];
            for (int c = 0; c < 3; c++) {
                xs[c] = x[3 * i + c];
                ys[c] = y[3 * i + c];
            }
            xs[3] = energy[item];
            ys[3] = 1.0 / max_nan(t[item], 1e-150);
            xs[4] = energy[item + 1];
            ys[4] = 1.0 / max_nan(t[item + 1], 1e-150);
            if (n_probe[k] == 3) {
                xs[5] = energy[item + 2];
                ys[5] = 1.0 / max_nan(t[item + 2], 1e-150);
            } else { /* a repeat of the left end: never the best */
                xs[5] = xs[0];
                ys[5] = ys[0];
            }
            item += n_probe[k];
            /* stable insertion sort by energy (numpy's stable argsort, NaN last) */
            for (int p = 1; p < 6; p++) {
                const double kx = xs[p], ky = ys[p];
                int q = p;
                while (q > 0 && less_nan_last(kx, xs[q - 1])) {
                    xs[q] = xs[q - 1];
                    ys[q] = ys[q - 1];
                    q--;
                }
                xs[q] = kx;
                ys[q] = ky;
            }
            /* the best interior sample (numpy's argmin: the first minimum, a NaN first) */
            int best = 1;
            for (int p = 2; p < 5; p++) {
                if (ys[best] != ys[best]) break;
                if (ys[p] != ys[p] || ys[p] < ys[best]) best = p;
            }
            for (int c = 0; c < 3; c++) {
                x[3 * i + c] = xs[best - 1 + c];
                y[3 * i + c] = ys[best - 1 + c];
            }
        }
    }
}

/* The end of refine_bracketed (_final_vertex): centre, width and peak T of each bracket's
   parabola, T computed at the centre (exact_peak) or read off the parabola. out: 3 n. */
static void final_vertex(int n, const double *edge, const double *mass, const double *alpha,
                         const double *width, const int64_t *peak_rows, Py_ssize_t n_peaks,
                         const double *x, const double *y, int exact_peak, double inv_hb2,
                         double *energy, double *t, double *out, int wide)
{
    for (Py_ssize_t i = 0; i < n_peaks; i++) {
        double u, a, ymin;
        parabola3(x + 3 * i, y + 3 * i, &u, &a, &ymin);
        const double half = half_width(a, ymin);
        energy[i] = x[3 * i + 1] + u;
        out[3 * i] = energy[i];
        out[3 * i + 1] = 2.0 * half;
        t[i] = isfinite(half) ? 1.0 / ymin : 0.0;
    }
    if (exact_peak)
        kernel(n, edge, mass, alpha, width, peak_rows, n_peaks, 1, energy, inv_hb2, t, NULL, wide);
    for (Py_ssize_t i = 0; i < n_peaks; i++)
        out[3 * i + 2] = min_nan(max_nan(max_nan(t[i], 1.0 / y[3 * i + 1]), 0.0), 1.0);
}

static PyObject *py_refine_peaks(PyObject *self, PyObject *args)
{
    int n, iterations, extra_rounds, exact_peak;
    double inv_hb2, loose_bracket, loose_fit;
    Py_buffer bv = {0}, bm = {0}, ba = {0}, bw = {0}, bi = {0}, bx = {0}, by = {0}, bo = {0};
    PyObject *result = NULL;
    void *work = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "iy*y*y*y*dy*w*w*iiddiw*", &n, &bv, &bm, &ba, &bw, &inv_hb2, &bi,
                          &bx, &by, &iterations, &extra_rounds, &loose_bracket, &loose_fit,
                          &exact_peak, &bo))
        return NULL;
    if (!(need_double(&bx, "x") && need_double(&by, "y") && need_double(&bo, "out")))
        goto done;
    const Py_ssize_t n_profiles = slice_profiles(n, &bv, &bm, &ba, &bw);
    if (n_profiles < 0) goto done;
    const Py_ssize_t n_peaks = bi.len / (Py_ssize_t)sizeof(int64_t);
    if (bi.len != n_peaks * (Py_ssize_t)sizeof(int64_t) || bx.len != 3 * n_peaks * 8 ||
        by.len != bx.len || bo.len != bx.len || iterations < 0 || extra_rounds < 0) {
        PyErr_SetString(PyExc_ValueError, "rows: one int64 per bracket; x, y, out: 3 float64 each");
        goto done;
    }
    const int64_t *peak_rows = bi.buf;
    for (Py_ssize_t g = 0; g < n_peaks; g++) {
        if (peak_rows[g] < 0 || peak_rows[g] >= n_profiles) {
            PyErr_SetString(PyExc_IndexError, "rows: profile index out of range");
            goto done;
        }
    }
    if (n_peaks > 0) {
        const size_t bytes = (size_t)n_peaks * (3 * 8 + 3 * 8 + 3 * 8 + 3 * 8 + sizeof(int));
        work = PyMem_RawMalloc(bytes);
        if (!work) {
            PyErr_NoMemory();
            goto done;
        }
        char *p = work;
        Py_ssize_t *active = (Py_ssize_t *)p;
        p += (size_t)n_peaks * 8;
        double *h_buf = (double *)p;
        p += (size_t)n_peaks * 8;
        double *u_buf = (double *)p;
        p += (size_t)n_peaks * 8;
        double *energy = (double *)p;
        p += (size_t)n_peaks * 24;
        int64_t *rows = (int64_t *)p;
        p += (size_t)n_peaks * 24;
        double *t = (double *)p;
        p += (size_t)n_peaks * 24;
        int *n_probe = (int *)p;
        Py_BEGIN_ALLOW_THREADS
        refine_kernel(n, bv.buf, bm.buf, ba.buf, bw.buf, peak_rows, n_peaks, bx.buf, by.buf,
                      iterations, extra_rounds, loose_bracket, loose_fit, inv_hb2, active, h_buf,
                      u_buf, energy, rows, t, n_probe, 0);
        final_vertex(n, bv.buf, bm.buf, ba.buf, bw.buf, peak_rows, n_peaks, bx.buf, by.buf,
                     exact_peak, inv_hb2, energy, t, bo.buf, 0);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyMem_RawFree(work);
    PyBuffer_Release(&bv);
    PyBuffer_Release(&bm);
    PyBuffer_Release(&ba);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&bi);
    PyBuffer_Release(&bx);
    PyBuffer_Release(&by);
    PyBuffer_Release(&bo);
    return result;
}

static PyObject *py_refine_brackets(PyObject *self, PyObject *args)
{
    int n, iterations, extra_rounds;
    double inv_hb2, loose_bracket, loose_fit;
    Py_buffer bv = {0}, bm = {0}, ba = {0}, bw = {0}, bi = {0}, bx = {0}, by = {0};
    PyObject *result = NULL;
    void *work = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "iy*y*y*y*dy*w*w*iidd", &n, &bv, &bm, &ba, &bw, &inv_hb2, &bi,
                          &bx, &by, &iterations, &extra_rounds, &loose_bracket, &loose_fit))
        return NULL;
    if (!(need_double(&bx, "x") && need_double(&by, "y"))) goto done;
    const Py_ssize_t n_profiles = slice_profiles(n, &bv, &bm, &ba, &bw);
    if (n_profiles < 0) goto done;
    const Py_ssize_t n_peaks = bi.len / (Py_ssize_t)sizeof(int64_t);
    if (bi.len != n_peaks * (Py_ssize_t)sizeof(int64_t) || bx.len != 3 * n_peaks * 8 ||
        by.len != bx.len || iterations < 0 || extra_rounds < 0) {
        PyErr_SetString(PyExc_ValueError, "rows: one int64 per bracket; x, y: 3 float64 each");
        goto done;
    }
    const int64_t *peak_rows = bi.buf;
    for (Py_ssize_t g = 0; g < n_peaks; g++) {
        if (peak_rows[g] < 0 || peak_rows[g] >= n_profiles) {
            PyErr_SetString(PyExc_IndexError, "rows: profile index out of range");
            goto done;
        }
    }
    if (n_peaks > 0) {
        /* active, h, u: n_peaks each; energy, rows, t: 3 n_peaks each; n_probe: n_peaks */
        const size_t bytes = (size_t)n_peaks * (3 * 8 + 3 * 8 + 3 * 8 + 3 * 8 + sizeof(int));
        work = PyMem_RawMalloc(bytes);
        if (!work) {
            PyErr_NoMemory();
            goto done;
        }
        char *p = work;
        Py_ssize_t *active = (Py_ssize_t *)p;
        p += (size_t)n_peaks * 8;
        double *h_buf = (double *)p;
        p += (size_t)n_peaks * 8;
        double *u_buf = (double *)p;
        p += (size_t)n_peaks * 8;
        double *energy = (double *)p;
        p += (size_t)n_peaks * 24;
        int64_t *rows = (int64_t *)p;
        p += (size_t)n_peaks * 24;
        double *t = (double *)p;
        p += (size_t)n_peaks * 24;
        int *n_probe = (int *)p;
        Py_BEGIN_ALLOW_THREADS
        refine_kernel(n, bv.buf, bm.buf, ba.buf, bw.buf, peak_rows, n_peaks, bx.buf, by.buf,
                      iterations, extra_rounds, loose_bracket, loose_fit, inv_hb2, active, h_buf,
                      u_buf, energy, rows, t, n_probe, 0);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyMem_RawFree(work);
    PyBuffer_Release(&bv);
    PyBuffer_Release(&bm);
    PyBuffer_Release(&ba);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&bi);
    PyBuffer_Release(&bx);
    PyBuffer_Release(&by);
    return result;
}

/* ---- states on a coarse grid (physics/resonances.py: find_resonances after its grid) ----
   T on each profile's own grid of ne energies, the n_max highest interior local maxima
   (local_peaks: v[i] > v[i-1] and v[i] >= v[i+1], ranked by T, ties by grid index), then
   the n_first first ones along the grid (local_peaks with first=True), each
   refined from its node and neighbours (refine_grid_peaks: the rounds and end above, the
   brackets in numpy's nonzero order; a first maximum that is also among the highest is
   refined once and copied, the same numbers). out: n_profiles * (n_max + n_first) * 4 values
   (centre, width, peak T, 1 where the slot holds a grid maximum; where not, as refine_grid_peaks: the grid's
   second energy, NaN width and peak). */
static void grid_states(int n, const double *edge, const double *mass, const double *alpha,
                        const double *width, Py_ssize_t n_profiles, Py_ssize_t ne,
                        const double *grid, int n_max, int n_first, int iterations, int extra_rounds,
                        double loose_bracket, double loose_fit, int exact_peak, double inv_hb2,
                        double *t_grid, int64_t *peak_rows, double *x, double *y,
                        Py_ssize_t *slot, Py_ssize_t *active, double *h_buf, double *u_buf,
                        double *energy, int64_t *rows, double *t, int *n_probe, double *fit,
                        Py_ssize_t *twin, Py_ssize_t *twin_of, double *out)
{
    kernel(n, edge, mass, alpha, width, NULL, n_profiles * ne, ne, grid, inv_hb2, t_grid, NULL, 1);
    Py_ssize_t n_peaks = 0, n_twins = 0;
    for (Py_ssize_t g = 0; g < n_profiles; g++) {
        const double *v = t_grid + g * ne, *e = grid + g * ne;
        const int n_slots = n_max + n_first;
        double *o = out + g * n_slots * 4;
        Py_ssize_t best[128];
        int found = 0, n_found_first = 0;
        for (int k = 0; k < n_slots; k++) { /* an empty slot: the grid's second node, as numpy */
            o[4 * k] = e[1];
            o[4 * k + 1] = o[4 * k + 2] = NAN;
            o[4 * k + 3] = 0.0;
        }
        /* the n_max highest maxima, kept sorted by T (descending, earlier index first) */
        for (Py_ssize_t i = 1; i + 1 < ne; i++) {
            if (!(v[i] > v[i - 1] && v[i] >= v[i + 1])) continue;
            if (n_found_first < n_first) /* the first n_first maxima, after the tallest */
                best[n_max + n_found_first++] = i;
            if (n_max == 0) continue;
            int q = found < n_max ? found : n_max;
            if (q == n_max && !(v[i] > v[best[n_max - 1]])) continue;
            if (q == n_max) q--;
            while (q > 0 && v[i] > v[best[q - 1]]) {
                best[q] = best[q - 1];
                q--;
            }
            best[q] = i;
            if (found < n_max) found++;
        }
        for (int k = 0; k < n_slots; k++) {
            if (k < n_max ? k >= found : k - n_max >= n_found_first) continue;
            const Py_ssize_t i = best[k];
            o[4 * k + 3] = 1.0;
            int same = -1; /* a first maximum that is also among the highest: refined once */
            for (int j = 0; k >= n_max && j < found && same < 0; j++)
                if (best[j] == i) same = j;
            if (same >= 0) {
                twin[n_twins] = g * n_slots + k;
                twin_of[n_twins++] = g * n_slots + same;
                continue;
            }
            for (int c = 0; c < 3; c++) {
                x[3 * n_peaks + c] = e[i - 1 + c];
                y[3 * n_peaks + c] = 1.0 / max_nan(v[i - 1 + c], 1e-150);
            }
            peak_rows[n_peaks] = g;
            slot[n_peaks++] = g * n_slots + k;
        }
    }
    if (n_peaks == 0) return;
    refine_kernel(n, edge, mass, alpha, width, peak_rows, n_peaks, x, y, iterations,
                  extra_rounds, loose_bracket, loose_fit, inv_hb2, active, h_buf, u_buf, energy,
                  rows, t, n_probe, 1);
    final_vertex(n, edge, mass, alpha, width, peak_rows, n_peaks, x, y, exact_peak, inv_hb2,
                 energy, t, fit, 1);
    for (Py_ssize_t p = 0; p < n_peaks; p++)
        for (int c = 0; c < 3; c++) out[4 * slot[p] + c] = fit[3 * p + c];
    for (Py_ssize_t p = 0; p < n_twins; p++)
        for (int c = 0; c < 3; c++) out[4 * twin[p] + c] = out[4 * twin_of[p] + c];
}

static PyObject *py_grid_states(PyObject *self, PyObject *args)
{
    int n, n_max, n_first, iterations, extra_rounds, exact_peak;
    Py_ssize_t ne;
    double inv_hb2, loose_bracket, loose_fit;
    Py_buffer be = {0}, bv = {0}, bm = {0}, ba = {0}, bw = {0}, bo = {0};
    PyObject *result = NULL;
    void *work = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "iny*y*y*y*y*diiiiddiw*", &n, &ne, &be, &bv, &bm, &ba, &bw,
                          &inv_hb2, &n_max, &n_first, &iterations, &extra_rounds, &loose_bracket,
                          &loose_fit, &exact_peak, &bo))
        return NULL;
    if (!(need_double(&be, "energy") && need_double(&bo, "out"))) goto done;
    const Py_ssize_t n_profiles = slice_profiles(n, &bv, &bm, &ba, &bw);
    if (n_profiles < 0) goto done;
    if (ne < 3 || n_max < 0 || n_max > 64 || n_first < 0 || n_first > 64 ||
        n_max + n_first < 1 || iterations < 0 || extra_rounds < 0 ||
        be.len != n_profiles * ne * 8 || bo.len != n_profiles * (n_max + n_first) * 4 * 8) {
        PyErr_SetString(PyExc_ValueError, "energy: n_energy >= 3 values per profile; out: "
                                          "4 (n_max + n_first) per profile, each 0 to 64");
        goto done;
    }
    if (n_profiles > 0) {
        const size_t n_peaks = (size_t)n_profiles * (size_t)(n_max + n_first);
        /* t_grid: n_profiles ne; peak_rows, slot, active, h, u, twin, twin_of, n_probe(int):
           n_peaks each; x, y, energy, rows, t, fit: 3 n_peaks each */
        const size_t bytes = (size_t)n_profiles * (size_t)ne * 8 + n_peaks * (7 * 8 + sizeof(int)) +
                             n_peaks * 6 * 24;
        work = PyMem_RawMalloc(bytes);
        if (!work) {
            PyErr_NoMemory();
            goto done;
        }
        char *p = work;
        double *t_grid = (double *)p;
        p += (size_t)n_profiles * (size_t)ne * 8;
        int64_t *peak_rows = (int64_t *)p;
        p += n_peaks * 8;
        Py_ssize_t *slot = (Py_ssize_t *)p;
        p += n_peaks * 8;
        Py_ssize_t *active = (Py_ssize_t *)p;
        p += n_peaks * 8;
        double *h_buf = (double *)p;
        p += n_peaks * 8;
        double *u_buf = (double *)p;
        p += n_peaks * 8;
        double *x = (double *)p;
        p += n_peaks * 24;
        double *y = (double *)p;
        p += n_peaks * 24;
        double *energy = (double *)p;
        p += n_peaks * 24;
        int64_t *rows = (int64_t *)p;
        p += n_peaks * 24;
        double *t = (double *)p;
        p += n_peaks * 24;
        double *fit = (double *)p;
        p += n_peaks * 24;
        Py_ssize_t *twin = (Py_ssize_t *)p;
        p += n_peaks * 8;
        Py_ssize_t *twin_of = (Py_ssize_t *)p;
        p += n_peaks * 8;
        int *n_probe = (int *)p;
        Py_BEGIN_ALLOW_THREADS
        grid_states(n, bv.buf, bm.buf, ba.buf, bw.buf, n_profiles, ne, be.buf, n_max, n_first,
                    iterations,
                    extra_rounds, loose_bracket, loose_fit, exact_peak, inv_hb2, t_grid,
                    peak_rows, x, y, slot, active, h_buf, u_buf, energy, rows, t, n_probe, fit,
                    twin, twin_of, bo.buf);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyMem_RawFree(work);
    PyBuffer_Release(&be);
    PyBuffer_Release(&bv);
    PyBuffer_Release(&bm);
    PyBuffer_Release(&ba);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&bo);
    return result;
}

/* ---- well-charge root step (physics/electrostatics.py: _WellChargeRoot.next_well) ----
   One step of the secant / Illinois regula falsi search for F(n) = n of every entry, the
   same arithmetic as the numpy statement (which stays the reference; tests compare the
   two bit for bit). No fused multiply-add: a * b + c rounds as numpy's two operations. */
#if defined(__GNUC__) && !defined(__clang__)
#define WW_NO_FMA __attribute__((optimize("fp-contract=off")))
#else
#define WW_NO_FMA
#endif

enum { R_LO, R_RLO, R_LOKNOWN, R_HI, R_RHI, R_SIDE, R_REOPENED, R_SETTLED, R_FROZEN, R_PUSH,
       R_WARM, R_PREVW, R_PREVR, R_ROWS };

WW_NO_FMA
static int root_step(Py_ssize_t n_entries, double *st, double *well, const double *residual,
                     const double *target, const double *done, int has_previous, double mixing,
                     double tolerance, double abs_cm2)
{
    int any_collapsed = 0;
#define S(row) st[(row) * n_entries + e]
    for (Py_ssize_t e = 0; e < n_entries; e++) {
        const double w = well[e], r = residual[e], tg = target[e];
        const int dn = done[e] != 0.0;
        const int up = r >= 0.0;
        const int moved_lo = !dn && up && (w >= S(R_LO));
        const int moved_hi = !dn && !up && (w <= S(R_HI));
        if (moved_lo) {
            S(R_LOKNOWN) = 1.0;
            S(R_LO) = w;
            S(R_RLO) = r;
        }
        if (moved_hi) {
            S(R_HI) = w;
            S(R_RHI) = r;
        }
        const double side = moved_lo ? 1.0 : (moved_hi ? -1.0 : 0.0);
        if (side == 1.0 && S(R_SIDE) == 1.0) S(R_RHI) = 0.5 * S(R_RHI); /* stale end: halve */
        if (side == -1.0 && S(R_SIDE) == -1.0) S(R_RLO) = 0.5 * S(R_RLO);
        if (side != 0.0) S(R_SIDE) = side;
        double candidate = w + mixing * r;
        if (has_previous) {
            const double d_well = w - S(R_PREVW), d_res = r - S(R_PREVR);
            if (fabs(d_well) > 0.0 && d_res != 0.0) candidate = w - r * d_well / d_res;
        }
        const double lo = S(R_LO), hi = S(R_HI), r_lo = S(R_RLO), r_hi = S(R_RHI);
        const double ceiling = 4.0 * max_nan(tg, w) + abs_cm2;
        const int open_ok = isfinite(candidate) && candidate > lo && candidate < ceiling;
        /* with no lower end known yet (0 a bound only; a warm start whose residual is
           negative), an open step below hi goes on towards the nearest root */
        const int lo_open = S(R_LOKNOWN) == 0.0 && S(R_REOPENED) == 0.0;
        const int bracketed = isfinite(hi) && !(lo_open && open_ok && candidate < hi);
        const double denom = bracketed ? r_lo - r_hi : 1.0;
        const double falsi = (S(R_LOKNOWN) != 0.0 && denom > 0.0)
                                 ? (lo * -r_hi + (bracketed ? hi : 0.0) * r_lo) / denom
                                 : 0.5 * (lo + hi);
        S(R_PREVW) = w;
        S(R_PREVR) = r;
        const int creeping = !bracketed && !open_ok && r > 0.0;
        S(R_PUSH) = creeping ? 2.0 * S(R_PUSH) : 1.0;
        const double fallback = min_nan(w + S(R_PUSH) * r, max_nan(ceiling, tg));
        const double step = bracketed ? falsi : (open_ok ? candidate : fallback);
        double next = dn ? w : step;
        /* a collapsed bracket with a large residual: reopened once, then settled at the jump
           (a warm start at once) */
        if (bracketed && (hi - lo) <= tolerance * fabs(hi) + abs_cm2 && !dn) {
            any_collapsed = 1;
            if (S(R_REOPENED) != 0.0 || S(R_WARM) != 0.0) {
                S(R_FROZEN) = 0.5 * (lo + hi);
                S(R_SETTLED) = 1.0;
            } else {
                S(R_REOPENED) = 1.0;
                S(R_LO) = 0.0;
                S(R_LOKNOWN) = 0.0;
                S(R_HI) = INFINITY;
                S(R_SIDE) = 0.0;
                next = tg;
            }
        }
        if (S(R_SETTLED) != 0.0) next = S(R_FROZEN);
        well[e] = next;
    }
#undef S
    return any_collapsed ? 0 : 1; /* a collapse forgets every entry's previous step */
}

static PyObject *py_well_root_step(PyObject *self, PyObject *args)
{
    int has_previous;
    double mixing, tolerance, abs_cm2;
    Py_buffer bs = {0}, bw = {0}, br = {0}, bt = {0}, bd = {0};
    PyObject *result = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "w*w*y*y*y*iddd", &bs, &bw, &br, &bt, &bd, &has_previous, &mixing,
                          &tolerance, &abs_cm2))
        return NULL;
    if (!(need_double(&bs, "state") && need_double(&bw, "well") && need_double(&br, "residual") &&
          need_double(&bt, "target") && need_double(&bd, "done")))
        goto done;
    const Py_ssize_t n_entries = bw.len / (Py_ssize_t)sizeof(double);
    if (br.len != bw.len || bt.len != bw.len || bd.len != bw.len || bs.len != R_ROWS * bw.len) {
        PyErr_SetString(PyExc_ValueError, "well, residual, target, done: n values; state: 12 n");
        goto done;
    }
    result = PyLong_FromLong(root_step(n_entries, bs.buf, bw.buf, br.buf, bt.buf, bd.buf,
                                       has_previous, mixing, tolerance, abs_cm2));
done:
    PyBuffer_Release(&bs);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&br);
    PyBuffer_Release(&bt);
    PyBuffer_Release(&bd);
    return result;
}

/* ---- the well-charge step's charge (physics/electrostatics.py: _WellChargeStep) ----
   well_sheet_density_cm2's charge from grid_states' slots, in two passes around numpy's
   expm1, exp and log1p (each called once on all its arguments): the numpy statement's
   operations in its order, without fused multiply-add, and numpy's maximum, minimum
   (NaN propagated; of two equal values the second) and sum over the slots (in order): the
   same numbers bit for bit (tests/test_kernel_backends.py). Per entry i: states holds
   n_slots slots of 4 values (centre, width, peak T, 1 where found); edge, mu and kt are
   the injecting contact's band edge and Fermi level and kT, eV; n2d the 2D density of
   states times kT, cm^-2. */

/* a slot holding a state (found, finite positive width) */
static inline int state_found(const double *s) { return s[3] > 0.0 && isfinite(s[1]) && s[1] > 0.0; }

/* the arguments of expm1 (occupancy switch-on) and of exp (F_0's tail), n_slots per entry */
WW_NO_FMA
static void charge_arguments(Py_ssize_t n_entries, int n_slots, const double *states,
                             const double *edge, const double *mu, const double *kt,
                             double *em1_arg, double *exp_arg)
{
    for (Py_ssize_t i = 0; i < n_entries; i++) {
        for (int k = 0; k < n_slots; k++) {
            const Py_ssize_t o = i * n_slots + k;
            const double *s = states + 4 * o;
            const double e1 = state_found(s) ? s[0] : 0.0;
            em1_arg[o] = -max_nan(e1 - edge[i], 0.0) / kt[i];
            exp_arg[o] = -fabs((mu[i] - e1) / kt[i]);
        }
    }
}

/* the charge of each entry from expm1 of the first arguments and log1p(exp) of the second */
WW_NO_FMA
static void charge_sums(Py_ssize_t n_entries, int n_slots, const double *states, const double *mu,
                        const double *kt, const double *n2d, const double *em1_val,
                        const double *log1p_val, double *charge)
{
    for (Py_ssize_t i = 0; i < n_entries; i++) {
        double sum = 0.0;
        for (int k = 0; k < n_slots; k++) {
            const Py_ssize_t o = i * n_slots + k;
            const double *s = states + 4 * o;
            const int ok = state_found(s);
            const double e1 = ok ? s[0] : 0.0, tp = ok ? s[2] : 0.0;
            double fraction = 0.5 * (1.0 - sqrt(1.0 - min_nan(max_nan(tp, 0.0), 1.0)));
            fraction = fraction * -em1_val[o];
            const double supply = max_nan((mu[i] - e1) / kt[i], 0.0) + log1p_val[o];
            const double value = ok ? fraction * n2d[i] * supply : 0.0;
            sum = k == 0 ? value : sum + value; /* numpy's sum over the slots: in order */
        }
        charge[i] = sum;
    }
}

/* charge_arguments (second = 0): states, edge, mu, kt -> em1_arg, exp_arg;
   charge_sums (second = 1): states, mu, kt, n2d, em1_val, log1p_val -> charge */
static PyObject *py_charge_pass(PyObject *args, int second)
{
    int n_slots;
    Py_buffer bs = {0}, ba = {0}, bb = {0}, bc = {0}, bx = {0}, by = {0}, bo = {0};
    const char *names[3] = {second ? "mu" : "edge", second ? "kt" : "mu", second ? "n2d" : "kt"};
    PyObject *result = NULL;
    const int parsed = second ? PyArg_ParseTuple(args, "iy*y*y*y*y*y*w*", &n_slots, &bs, &ba,
                                                 &bb, &bc, &bx, &by, &bo)
                              : PyArg_ParseTuple(args, "iy*y*y*y*w*w*", &n_slots, &bs, &ba, &bb,
                                                 &bc, &bx, &by);
    if (!parsed) return NULL;
    if (!(need_double(&bs, "states") && need_double(&ba, names[0]) &&
          need_double(&bb, names[1]) && need_double(&bc, names[2]) &&
          need_double(&bx, second ? "em1_val" : "em1_arg") &&
          need_double(&by, second ? "log1p_val" : "exp_arg") &&
          (!second || need_double(&bo, "charge"))))
        goto done;
    const Py_ssize_t d = (Py_ssize_t)sizeof(double), n = ba.len / d;
    if (n_slots < 1 || bs.len != n * n_slots * 4 * d || bb.len != ba.len || bc.len != ba.len ||
        bx.len != n * n_slots * d || by.len != bx.len || (second && bo.len != ba.len)) {
        PyErr_SetString(PyExc_ValueError, "states: n x n_slots x 4; edge, mu, kt, n2d, charge:"
                                          " n; arguments and values: n x n_slots");
        goto done;
    }
    if (second)
        charge_sums(n, n_slots, bs.buf, ba.buf, bb.buf, bc.buf, bx.buf, by.buf, bo.buf);
    else
        charge_arguments(n, n_slots, bs.buf, ba.buf, bb.buf, bc.buf, bx.buf, by.buf);
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&bs);
    PyBuffer_Release(&ba);
    PyBuffer_Release(&bb);
    PyBuffer_Release(&bc);
    PyBuffer_Release(&bx);
    PyBuffer_Release(&by);
    PyBuffer_Release(&bo);
    return result;
}

static PyObject *py_charge_arguments(PyObject *self, PyObject *args)
{
    (void)self;
    return py_charge_pass(args, 0);
}

static PyObject *py_charge_sums(PyObject *self, PyObject *args)
{
    (void)self;
    return py_charge_pass(args, 1);
}

/* ---- Poisson-Newton (physics/electrostatics.py: solve_poisson_1d) ----
   The damped Newton iteration of the finite-volume Poisson equation with Thomas-Fermi
   electrons, one batch entry at a time (each entry stops when its own largest update is
   below the tolerance), the same arithmetic as the numpy statement in electrostatics.py;
   the tridiagonal system is solved by the Thomas algorithm (the Jacobian is diagonally
   dominant: off-diagonal g > 0, diagonal -(g + g) - q w |dn/dU|). */

/* F_1/2 and its derivative from the spline of ln F_1/2 (_fermi_half_and_derivative) */
static inline void fermi_half(double eta, const double *coef, Py_ssize_t n_cells, double lo,
                              double step, double hi, double *f_out, double *df_out)
{
    if (eta != eta) {
        *f_out = *df_out = NAN;
        return;
    }
    if (eta < lo) {
        const double f = exp(eta > -700.0 ? eta : -700.0);
        *f_out = f;
        *df_out = f;
        return;
    }
    if (eta > hi) {
        const double c = 4.0 / (3.0 * sqrt(M_PI)), e = eta > 0.0 ? eta : 0.0;
        *f_out = c * pow(e, 1.5);
        *df_out = 1.5 * c * sqrt(e);
        return;
    }
    Py_ssize_t cell = (Py_ssize_t)((eta - lo) / step);
    if (cell > n_cells - 1) cell = n_cells - 1;
    const double dx = eta - (lo + (double)cell * step);
    const double *c = coef + 4 * cell; /* cubic coefficient first */
    const double f = exp(((c[0] * dx + c[1]) * dx + c[2]) * dx + c[3]);
    *f_out = f;
    *df_out = f * ((3.0 * c[0] * dx + 2.0 * c[1]) * dx + c[2]);
}

/* One entry: u (n) updated in place, electrons (n) written. Returns the iterations used,
   or -(iterations) when the largest update was still above the tolerance (or not finite)
   at the end; *worst gets the last largest update. */
static int newton_entry(Py_ssize_t n, double *u, const double *g, const double *w,
                        const double *donors, const double *offset, const double *mu,
                        const double *mask, const double *fixed, const double *nc, double kt,
                        const double *coef, Py_ssize_t n_cells, double lo, double step,
                        double hi, double tolerance, int max_iterations, double max_step,
                        double q, double *electrons, double *dn, double *cp, double *dp,
                        double *worst)
{
    const Py_ssize_t m = n - 2; /* interior nodes */
    for (int it = 1; it <= max_iterations; it++) {
        for (Py_ssize_t i = 0; i < n; i++) {
            double f, df;
            fermi_half((mu[i] - offset[i] - u[i]) / kt, coef, n_cells, lo, step, hi, &f, &df);
            electrons[i] = (mask[i] != 0.0 ? nc[i] * f : 0.0) + fixed[i];
            dn[i] = mask[i] != 0.0 ? -nc[i] * df / kt : 0.0;
        }
        /* Thomas forward sweep on rows r = 0..m-1 (node j = r + 1) */
        for (Py_ssize_t r = 0; r < m; r++) {
            const Py_ssize_t j = r + 1;
            const double residual = g[j] * (u[j + 1] - u[j]) - g[j - 1] * (u[j] - u[j - 1]) -
                                    q * w[j] * (donors[j] - electrons[j]);
            const double diag = -(g[j] + g[j - 1]) + q * w[j] * dn[j];
            const double lower = r > 0 ? g[j - 1] : 0.0, upper = g[j];
            const double den = r > 0 ? diag - lower * cp[r - 1] : diag;
            cp[r] = upper / den;
            dp[r] = ((-residual) - (r > 0 ? lower * dp[r - 1] : 0.0)) / den;
        }
        double biggest = 0.0;
        int nan_seen = 0;
        for (Py_ssize_t r = m - 1; r >= 0; r--) {
            if (r < m - 1) dp[r] -= cp[r] * dp[r + 1];
            const double a = fabs(dp[r]);
            if (a != a) nan_seen = 1;
            if (a > biggest) biggest = a;
        }
        if (nan_seen || !isfinite(biggest)) { /* diverged (numpy: a non-finite largest update) */
            *worst = nan_seen ? NAN : biggest;
            return -it;
        }
        const double limit = max_step / (biggest > 1e-300 ? biggest : 1e-300);
        const double scale = limit < 1.0 ? limit : 1.0;
        for (Py_ssize_t r = 0; r < m; r++) u[r + 1] += scale * dp[r];
        *worst = biggest;
        if (biggest < tolerance) {
            for (Py_ssize_t i = 0; i < n; i++) {
                double f, df;
                fermi_half((mu[i] - offset[i] - u[i]) / kt, coef, n_cells, lo, step, hi, &f,
                           &df);
                electrons[i] = (mask[i] != 0.0 ? nc[i] * f : 0.0) + fixed[i];
            }
            return it;
        }
    }
    return -max_iterations;
}

static PyObject *py_poisson_newton(PyObject *self, PyObject *args)
{
    Py_ssize_t n;
    int max_iterations;
    double lo, step, hi, tolerance, max_step, q;
    Py_buffer bu = {0}, bg = {0}, bw = {0}, bd = {0}, bo = {0}, bmu = {0}, bmask = {0},
              bf = {0}, bnc = {0}, bkt = {0}, bc = {0}, be = {0}, bi = {0};
    PyObject *result = NULL;
    double *work = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "ny*w*y*y*y*y*y*y*y*y*y*y*dddddidw*", &n, &bi, &bu, &bg, &bw,
                          &bd, &bo, &bmu, &bmask, &bf, &bnc, &bkt, &bc, &lo, &step, &hi,
                          &tolerance, &max_step, &max_iterations, &q, &be))
        return NULL;
    Py_buffer *all[] = {&bu, &bg, &bw, &bd, &bo, &bmu, &bmask, &bf, &bnc, &bkt, &bc, &be, &bi};
    const char *names[] = {"u", "g", "w", "donors", "offset", "mu", "mask", "fixed", "nc", "kt",
                           "coef", "electrons"};
    for (int k = 0; k < 12; k++)
        if (!need_double(all[k], names[k])) goto done;
    /* per entry: u, mu, fixed, electrons (n values each); per profile row: g (n - 1), w,
       donors, offset, mask, nc (n each), kt (one) */
    const Py_ssize_t n_entries = bi.len / 8, n_rows = bkt.len / 8;
    if (n < 3 || bi.len != n_entries * 8 || bu.len != n_entries * n * 8 || bmu.len != bu.len ||
        bf.len != bu.len || be.len != bu.len || bg.len != n_rows * (n - 1) * 8 ||
        bw.len != n_rows * n * 8 || bd.len != bw.len || bo.len != bw.len ||
        bmask.len != bw.len || bnc.len != bw.len || bc.len % 32 != 0 || bc.len == 0) {
        PyErr_SetString(PyExc_ValueError, "poisson_newton: inconsistent buffer sizes");
        goto done;
    }
    const int64_t *rows = bi.buf;
    for (Py_ssize_t b = 0; b < n_entries; b++) {
        if (rows[b] < 0 || rows[b] >= n_rows) {
            PyErr_SetString(PyExc_IndexError, "poisson_newton: row index out of range");
            goto done;
        }
    }
    work = PyMem_RawMalloc((size_t)(3 * n) * sizeof(double));
    if (!work) {
        PyErr_NoMemory();
        goto done;
    }
    int most = 0, failed = 0;
    double worst = 0.0;
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t b = 0; b < n_entries; b++) {
        double last = 0.0;
        const Py_ssize_t o = b * n, r = (Py_ssize_t)rows[b] * n;
        const int used = newton_entry(
            n, (double *)bu.buf + o, (const double *)bg.buf + (Py_ssize_t)rows[b] * (n - 1),
            (const double *)bw.buf + r, (const double *)bd.buf + r, (const double *)bo.buf + r,
            (const double *)bmu.buf + o, (const double *)bmask.buf + r,
            (const double *)bf.buf + o, (const double *)bnc.buf + r,
            ((const double *)bkt.buf)[rows[b]], bc.buf, bc.len / 32, lo, step, hi, tolerance,
            max_iterations, max_step, q, (double *)be.buf + o, work, work + n, work + 2 * n,
            &last);
        if (used < 0) {
            failed = 1;
            most = -used;
            worst = last;
            break;
        }
        most = used > most ? used : most;
    }
    Py_END_ALLOW_THREADS
    result = Py_BuildValue("iid", most, failed, worst);
done:
    PyMem_RawFree(work);
    for (int k = 0; k < 13; k++) PyBuffer_Release(all[k]);
    return result;
}

/* The profiles' slice buffers (edge, mass, alpha, width): float64, n_profiles * n slices each;
   returns n_profiles, or -1 with a Python error set. */
static Py_ssize_t slice_profiles(int n, Py_buffer *bv, Py_buffer *bm, Py_buffer *ba,
                                 Py_buffer *bw)
{
    if (!(need_double(bv, "edge") && need_double(bm, "mass") && need_double(ba, "alpha") &&
          need_double(bw, "width")))
        return -1;
    const Py_ssize_t n_slice_values = bv->len / (Py_ssize_t)sizeof(double);
    if (n < 2 || n_slice_values % n != 0 || bm->len != bv->len || ba->len != bv->len ||
        bw->len != bv->len) {
        PyErr_SetString(PyExc_ValueError, "slice buffers must hold n_profiles * n_slices values");
        return -1;
    }
    return n_slice_values / n;
}

static int need_double(Py_buffer *b, const char *name)
{
    if (b->len % (Py_ssize_t)sizeof(double) != 0) {
        PyErr_Format(PyExc_ValueError, "%s: buffer is not float64", name);
        return 0;
    }
    return 1;
}

static int optional_buffer(PyObject *obj, Py_buffer *view, int flags)
{
    if (obj == Py_None) return 0;
    return PyObject_GetBuffer(obj, view, flags | PyBUF_C_CONTIGUOUS) < 0 ? -1 : 1;
}

static PyObject *py_transmission(PyObject *self, PyObject *args)
{
    int n;
    Py_ssize_t ne;
    double inv_hb2;
    PyObject *r_obj, *rows_obj;
    Py_buffer be = {0}, bv = {0}, bm = {0}, ba = {0}, bw = {0}, bt = {0}, br = {0}, bi = {0};
    int have_r = 0, have_rows = 0;
    PyObject *result = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "iny*y*y*y*y*dw*OO", &n, &ne, &be, &bv, &bm, &ba, &bw, &inv_hb2,
                          &bt, &r_obj, &rows_obj))
        return NULL;
    if ((have_r = optional_buffer(r_obj, &br, PyBUF_WRITABLE)) < 0) goto done;
    if ((have_rows = optional_buffer(rows_obj, &bi, PyBUF_SIMPLE)) < 0) goto done;
    if (!(need_double(&be, "energy") && need_double(&bt, "t_out"))) goto done;
    const Py_ssize_t n_profiles = slice_profiles(n, &bv, &bm, &ba, &bw);
    if (n_profiles < 0) goto done;
    const Py_ssize_t n_values = be.len / (Py_ssize_t)sizeof(double);
    if (ne < 1 || n_values % ne != 0 || bt.len != be.len || (have_r && br.len != be.len)) {
        PyErr_SetString(PyExc_ValueError, "energy and outputs must hold n_groups * n_energy values");
        goto done;
    }
    const Py_ssize_t n_groups = n_values / ne;
    const int64_t *rows = have_rows ? (const int64_t *)bi.buf : NULL;
    if (have_rows ? bi.len != n_groups * (Py_ssize_t)sizeof(int64_t) : n_groups != n_profiles) {
        PyErr_SetString(PyExc_ValueError, "rows must give one int64 profile index per energy group");
        goto done;
    }
    for (Py_ssize_t g = 0; have_rows && g < n_groups; g++) {
        if (rows[g] < 0 || rows[g] >= n_profiles) {
            PyErr_SetString(PyExc_IndexError, "rows: profile index out of range");
            goto done;
        }
    }
    const double *energy = be.buf, *edge = bv.buf, *mass = bm.buf, *alpha = ba.buf, *width = bw.buf;
    double *t_out = bt.buf, *r_out = have_r ? (double *)br.buf : NULL;
    if (n_values > 0) {
        Py_BEGIN_ALLOW_THREADS
        kernel(n, edge, mass, alpha, width, rows, n_values, ne, energy, inv_hb2, t_out, r_out, 0);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&be);
    PyBuffer_Release(&bv);
    PyBuffer_Release(&bm);
    PyBuffer_Release(&ba);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&bt);
    if (have_r > 0) PyBuffer_Release(&br);
    if (have_rows > 0) PyBuffer_Release(&bi);
    return result;
}

/* ---- barrier action (physics/scattering.py: _barrier_action) ----
   int kappa dz over one barrier's slices at many energies: per row (a profile) and energy z,
   the sum over slices lo..hi-1 of sqrt(mass max(edge - z, 0) / hb2) width where the slice
   is in the barrier's run, 0 elsewhere. The same arithmetic as the numpy statement (which
   stays the reference; tests compare the two bit for bit): the quotient by hb2 (not a
   product with its inverse), the slices added in order (numpy's order when it sums along
   an outer axis), no fused multiply-add. sqrt is correctly rounded in both. */
WW_NO_FMA
static void barrier_action(Py_ssize_t n_rows, Py_ssize_t n_slices, Py_ssize_t n_z, Py_ssize_t lo,
                           Py_ssize_t hi, double hb2, const double *z, const double *edge,
                           const double *mass, const double *width, const unsigned char *run,
                           double *out)
{
    for (Py_ssize_t r = 0; r < n_rows; r++) {
        const double *zr = z + r * n_z;
        double *o = out + r * n_z;
        for (Py_ssize_t s = lo; s < hi; s++) {
            const Py_ssize_t k = r * n_slices + s;
            const double e = edge[k], m = mass[k], w = width[k];
            const int in_run = run[k] != 0, first = s == lo;
            for (Py_ssize_t j = 0; j < n_z; j++) {
                const double h = e - zr[j];
                const double hp = h < 0.0 ? 0.0 : h; /* numpy's maximum: NaN stays NaN */
                const double v = in_run ? sqrt(m * hp / hb2) * w : 0.0;
                o[j] = first ? v : o[j] + v;
            }
        }
    }
}

static PyObject *py_barrier_action(PyObject *self, PyObject *args)
{
    Py_ssize_t n, lo, hi;
    double hb2;
    Py_buffer bz = {0}, be = {0}, bm = {0}, bw = {0}, br = {0}, bo = {0};
    PyObject *result = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "nnndy*y*y*y*y*w*", &n, &lo, &hi, &hb2, &bz, &be, &bm, &bw, &br,
                          &bo))
        return NULL;
    if (!(need_double(&bz, "z") && need_double(&be, "edge") && need_double(&bm, "mass") &&
          need_double(&bw, "width") && need_double(&bo, "out")))
        goto done;
    const Py_ssize_t n_values = be.len / (Py_ssize_t)sizeof(double);
    const Py_ssize_t n_z_total = bz.len / (Py_ssize_t)sizeof(double);
    if (n <= 0 || n_values % n != 0 || n_values == 0 || bm.len != be.len || bw.len != be.len ||
        br.len != n_values || bo.len != bz.len || n_z_total % (n_values / n) != 0 || lo < 0 ||
        hi > n || lo >= hi) {
        PyErr_SetString(PyExc_ValueError,
                        "edge, mass, width (float64), run (bool): rows x n_slices values; z and"
                        " out: rows x n_z; 0 <= lo < hi <= n_slices");
        goto done;
    }
    const Py_ssize_t rows = n_values / n;
    barrier_action(rows, n, n_z_total / rows, lo, hi, hb2, bz.buf, be.buf, bm.buf, bw.buf, br.buf,
                   bo.buf);
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&bz);
    PyBuffer_Release(&be);
    PyBuffer_Release(&bm);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&br);
    PyBuffer_Release(&bo);
    return result;
}

/* ---- the scattering channel at its energy nodes (physics/scattering.py: _couplings and
   _reservoir_fluxes) ----
   Two passes around numpy's exp, arctan and tanh (which stay numpy's, so that the numbers
   are the numpy statement's bit for bit): node_arguments writes the arguments of those
   functions, node_fluxes takes their values and computes the couplings, the cumulative
   integrals, the reservoir's occupation and the two fluxes, in the numpy statement's order
   of operations, without fused multiply-add. Row r is one state of batch entry r / n_states;
   its scalars are the NODE_P values of par (order: enum below). */
enum { P_EN, P_GT, P_HW, P_GIFR, P_GLO, P_GR, P_FLOOR2, P_LPS, P_SCALE, P_EW, P_BOSE, P_ER,
       P_MUL, P_MUR, P_KT, P_LEADM, P_BM, P_BE, P_LOCAL, NODE_P };

static inline double max_numpy(double a, double b) { return (a >= b || a != a) ? a : b; }

/* exp arguments (rows x 3K): lateral (K), -2 int kappa dz at E and E + hbar w (2K);
   arctan arguments (rows x 3K + 2 rows): exists, drain (elastic), drain (phonon) (K each),
   then per row the two lower ends; tanh arguments (rows x 4K): source lead at E and
   E + hbar w, drain lead at both. */
WW_NO_FMA
static void node_arguments(Py_ssize_t rows, Py_ssize_t n_states, Py_ssize_t k, const double *par,
                           const double *both, Py_ssize_t n_slices, Py_ssize_t lo, Py_ssize_t hi,
                           double hb2, const double *edge, const double *mass,
                           const double *width, const unsigned char *run, double *ex_arg,
                           double *at_arg, double *th_arg)
{
    for (Py_ssize_t r = 0; r < rows; r++) {
        const double *p = par + r * NODE_P;
        const double *z = both + r * 2 * k;
        double *xe = ex_arg + r * 3 * k, *xa = at_arg + r * 3 * k, *xt = th_arg + r * 4 * k;
        const double e_n = p[P_EN], gamma_t = p[P_GT], hw = p[P_HW];
        const double neg_lps = -p[P_LPS], g2 = 2.0 / gamma_t;
        const double lower_el = p[P_ER] - e_n, e_down = e_n - hw;
        const double lower_ph = (p[P_ER] - hw) - e_down;
        for (Py_ssize_t j = 0; j < k; j++) {
            const double above = z[j] - e_n;
            xe[j] = neg_lps * max_numpy(above, 0.0);
            xa[j] = 2.0 * above / gamma_t;
            xa[k + j] = g2 * max_numpy(above, lower_el);
            xa[2 * k + j] = g2 * max_numpy(z[j] - e_down, lower_ph);
        }
        at_arg[rows * 3 * k + 2 * r] = g2 * lower_el;
        at_arg[rows * 3 * k + 2 * r + 1] = g2 * lower_ph;
        for (Py_ssize_t j = 0; j < 2 * k; j++) {
            xt[j] = 0.5 * (z[j] - p[P_MUL]) / p[P_KT];
            xt[2 * k + j] = 0.5 * (z[j] - p[P_MUR]) / p[P_KT];
        }
        /* the source barrier's int kappa dz at both node sets, times -2 */
        double *act = xe + k;
        const Py_ssize_t o = (r / n_states) * n_slices;
        if (hi <= lo) {
            for (Py_ssize_t j = 0; j < 2 * k; j++) act[j] = 0.0;
        } else {
            barrier_action(1, n_slices, 2 * k, lo, hi, hb2, z, edge + o, mass + o, width + o,
                           run + o, act);
        }
        for (Py_ssize_t j = 0; j < 2 * k; j++) act[j] = -2.0 * act[j];
    }
}

/* cumulative trapezoid integral of y (k values) over the node steps (k - 1), from 0 */
static inline void cumulative(Py_ssize_t k, const double *y, const double *steps, double *out)
{
    out[0] = 0.0;
    for (Py_ssize_t j = 1; j < k; j++) out[j] = out[j - 1] + 0.5 * (y[j] + y[j - 1]) * steps[j - 1];
}

WW_NO_FMA
static int node_fluxes(Py_ssize_t rows, Py_ssize_t k, double hb2, const double *par,
                       const double *both, const double *steps, const double *ex_val,
                       const double *at_val, const double *th_val, double *flux_l,
                       double *flux_r)
{
    double *work = PyMem_RawMalloc(sizeof(double) * (size_t)(7 * k));
    if (!work) return 0;
    double *gl_el = work, *y = work + k, *cum_a = work + 2 * k, *cum_b = work + 3 * k;
    double *cum_c = work + 4 * k, *gl_lo = work + 5 * k, *exists = work + 6 * k;
    for (Py_ssize_t r = 0; r < rows; r++) {
        const double *p = par + r * NODE_P;
        const double *z = both + r * 2 * k, *st = steps + r * (k - 1);
        const double *lat = ex_val + r * 3 * k, *theta = lat + k;
        const double *at = at_val + r * 3 * k, *tl = th_val + r * 4 * k, *tr = tl + 2 * k;
        const double at_lower_el = at_val[rows * 3 * k + 2 * r];
        const double at_lower_ph = at_val[rows * 3 * k + 2 * r + 1];
        const double e_n = p[P_EN], gamma_t = p[P_GT], hw = p[P_HW], g_ifr = p[P_GIFR];
        const double g_lo = p[P_GLO], gamma_r = p[P_GR], scale = p[P_SCALE], e_w = p[P_EW];
        const double bose = p[P_BOSE], lead_m = p[P_LEADM], m_b = p[P_BM], b_edge = p[P_BE];
        const double flr = 1.0 / p[P_FLOOR2], half2 = 0.25 * (gamma_t * gamma_t);
        const double g2 = 2.0 / gamma_t, lower_el = p[P_ER] - e_n, e_down = e_n - hw;
        const double lower_ph = (p[P_ER] - hw) - e_down, floor_el = 0.5 * g_ifr;
        const double bose1 = bose + 1.0, per_ev = lead_m / hb2, local = p[P_LOCAL];
        const double e_b = 2.0 * e_w / M_PI, flr_lo = 1.0 / (e_b * e_b); /* bulk_floor2_ev2 */
        /* tau_L (step x interface factor x transparency) at E and E + hbar w */
        for (Py_ssize_t j = 0; j < 2 * k; j++) {
            const double kin = z[j] - 0.0;
            const double kap = sqrt(m_b * max_numpy(b_edge - z[j], 1e-3) / hb2);
            const double k_lead = sqrt(max_numpy(kin, 0.0) * per_ev);
            const double kk = sqrt(max_numpy(z[j] - local, 0.0) * per_ev);
            const double sum = k_lead + kk;
            const double step = 4.0 * k_lead * kk / max_numpy(sum * sum, 1e-300);
            const double a = kk / lead_m, bb = kap / m_b;
            const double tau = step * (4.0 * a * bb / (a * a + bb * bb + 1e-300)) * theta[j];
            const double t = kin > 0.0 ? tau : 0.0;
            if (j < k)
                gl_el[j] = scale * t * lat[j];
            else
                gl_lo[j - k] = scale * t;
        }
        for (Py_ssize_t j = 0; j < k; j++) {
            const double above = z[j] - e_n;
            exists[j] = 0.5 + at[j] / M_PI;
            y[j] = gl_el[j] * (1.0 / (above * above + half2));
        }
        cumulative(k, y, st, cum_a);
        cumulative(k, gl_el, st, cum_b);
        for (Py_ssize_t j = 0; j < k; j++) {
            const double reach = sqrt((fabs(z[j] - e_n) + 0.5 * gamma_t) / e_w);
            const double forward = M_PI_2 / (reach * (1.0 + M_PI / 3.0 * reach));
            y[j] = gl_lo[j] * flr_lo * forward;
        }
        cumulative(k, y, st, cum_c);
        double *fl = flux_l + r * k, *fr = flux_r + r * k;
        for (Py_ssize_t j = 0; j < k; j++) {
            const double above = z[j] - e_n, ex = exists[j];
            const double g_l = g_ifr * (cum_a[j] + 0.5 * ex * cum_b[j] * flr);
            const double p_l = g_lo * ex * cum_c[j];
            const double top_el = max_numpy(above, lower_el);
            const double arc_el = g2 * (at[k + j] - at_lower_el);
            const double g_r =
                gamma_r * (g_ifr * arc_el + floor_el * ex * (top_el - lower_el) * flr);
            const double top_ph = max_numpy(z[j] - e_down, lower_ph);
            const double arc_ph = g2 * (at[2 * k + j] - at_lower_ph);
            const double p_r =
                ex * (gamma_r * (g_lo * arc_ph + g_lo * ex * (top_ph - lower_ph) * flr_lo));
            const double f_l = 0.5 * (1.0 - tl[j]), fu_l = 0.5 * (1.0 - tl[k + j]);
            const double f_r = 0.5 * (1.0 - tr[j]), fu_r = 0.5 * (1.0 - tr[k + j]);
            const double emit_l = bose1 * p_l, emit_r = bose1 * p_r;
            const double absorb_l = bose * p_l, absorb_r = bose * p_r;
            const double in_l = emit_l * fu_l, in_r = emit_r * fu_r;
            const double empty_l = 1.0 - fu_l, empty_r = 1.0 - fu_r;
            const double num = g_l * f_l + g_r * f_r + in_l + in_r;
            const double den = g_l + g_r + in_l + absorb_l * empty_l + in_r + absorb_r * empty_r;
            const double f_w = den > 0.0 ? num / max_numpy(den, 1e-300) : 0.0;
            const double free = 1.0 - f_w;
            fl[j] = g_l * (f_l - f_w) + in_l * free - absorb_l * f_w * empty_l;
            fr[j] = g_r * (f_w - f_r) - in_r * free + absorb_r * f_w * empty_r;
        }
    }
    PyMem_RawFree(work);
    return 1;
}

static PyObject *py_node_arguments(PyObject *self, PyObject *args)
{
    Py_ssize_t n_states, k, n_slices, lo, hi;
    double hb2;
    Py_buffer bp = {0}, bz = {0}, be = {0}, bm = {0}, bw = {0}, br = {0}, bx = {0}, ba = {0},
              bt = {0};
    PyObject *result = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "nny*y*nnndy*y*y*y*w*w*w*", &n_states, &k, &bp, &bz, &n_slices,
                          &lo, &hi, &hb2, &be, &bm, &bw, &br, &bx, &ba, &bt))
        return NULL;
    if (!(need_double(&bp, "par") && need_double(&bz, "both") && need_double(&be, "edge") &&
          need_double(&bm, "mass") && need_double(&bw, "width") && need_double(&bx, "ex_arg") &&
          need_double(&ba, "at_arg") && need_double(&bt, "th_arg")))
        goto done;
    const Py_ssize_t rows = bp.len / (Py_ssize_t)(sizeof(double) * NODE_P);
    const Py_ssize_t d = (Py_ssize_t)sizeof(double);
    if (n_states <= 0 || k <= 1 || n_slices <= 0 || rows <= 0 || rows % n_states != 0 ||
        bp.len != rows * NODE_P * d || bz.len != rows * 2 * k * d ||
        be.len != (rows / n_states) * n_slices * d || bm.len != be.len || bw.len != be.len ||
        br.len * d != be.len || bx.len != rows * 3 * k * d || ba.len != (rows * 3 * k + 2 * rows) * d ||
        bt.len != rows * 4 * k * d || lo < 0 || hi > n_slices) {
        PyErr_SetString(PyExc_ValueError,
                        "par: rows x 19, both: rows x 2k, slices: rows / n_states x n_slices,"
                        " ex_arg: rows x 3k, at_arg: rows x (3k) + 2 rows, th_arg: rows x 4k,"
                        " 0 <= lo, hi <= n_slices");
        goto done;
    }
    node_arguments(rows, n_states, k, bp.buf, bz.buf, n_slices, lo, hi, hb2, be.buf, bm.buf,
                   bw.buf, br.buf, bx.buf, ba.buf, bt.buf);
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&bp);
    PyBuffer_Release(&bz);
    PyBuffer_Release(&be);
    PyBuffer_Release(&bm);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&br);
    PyBuffer_Release(&bx);
    PyBuffer_Release(&ba);
    PyBuffer_Release(&bt);
    return result;
}

static PyObject *py_node_fluxes(PyObject *self, PyObject *args)
{
    Py_ssize_t k;
    double hb2;
    Py_buffer bp = {0}, bz = {0}, bs = {0}, bx = {0}, ba = {0}, bt = {0}, bl = {0}, br = {0};
    PyObject *result = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "ndy*y*y*y*y*y*w*w*", &k, &hb2, &bp, &bz, &bs, &bx, &ba, &bt, &bl,
                          &br))
        return NULL;
    if (!(need_double(&bp, "par") && need_double(&bz, "both") && need_double(&bs, "steps") &&
          need_double(&bx, "ex_val") && need_double(&ba, "at_val") &&
          need_double(&bt, "th_val") && need_double(&bl, "flux_l") && need_double(&br, "flux_r")))
        goto done;
    const Py_ssize_t rows = bp.len / (Py_ssize_t)(sizeof(double) * NODE_P);
    const Py_ssize_t d = (Py_ssize_t)sizeof(double);
    if (k <= 1 || rows <= 0 || bp.len != rows * NODE_P * d || bz.len != rows * 2 * k * d ||
        bs.len != rows * (k - 1) * d || bx.len != rows * 3 * k * d ||
        ba.len != (rows * 3 * k + 2 * rows) * d || bt.len != rows * 4 * k * d ||
        bl.len != rows * k * d || br.len != bl.len) {
        PyErr_SetString(PyExc_ValueError,
                        "par: rows x 19, both: rows x 2k, steps: rows x (k - 1), ex_val: rows x 3k,"
                        " at_val: rows x (3k) + 2 rows, th_val: rows x 4k, fluxes: rows x k");
        goto done;
    }
    if (!node_fluxes(rows, k, hb2, bp.buf, bz.buf, bs.buf, bx.buf, ba.buf, bt.buf, bl.buf,
                     br.buf)) {
        PyErr_NoMemory();
        goto done;
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&bp);
    PyBuffer_Release(&bz);
    PyBuffer_Release(&bs);
    PyBuffer_Release(&bx);
    PyBuffer_Release(&ba);
    PyBuffer_Release(&bt);
    PyBuffer_Release(&bl);
    PyBuffer_Release(&br);
    return result;
}

/* ---- shots through the well (physics/scattering.py: _well_shots) ----
   -dE_n/dz_i at the well's two interfaces from psi shot through the well's slices at E_n
   from each interface in turn, and the state's kinetic energy <E_n - U> in the well,
   the same arithmetic as the numpy statement (which stays the reference and the fallback;
   a test compares the two). par per entry: first, last (well slices), has, U_b1, m_b1,
   U_b2, m_b2. */
enum { S_FIRST, S_LAST, S_HAS, S_UB1, S_MB1, S_UB2, S_MB2, SLOPE_P };

/* -dE/dz at the interface a shot starts from: psi shot through the slices s0, s0 + step, ...
   (count of them) from that interface's barrier (U_a, m_a) towards the other's (U_b, m_b);
   and that psi's <E_n - U> over the well into *kinetic */
static double shot_slope(double e_n, double hb2, const double *er, const double *mr,
                         const double *wr, Py_ssize_t s0, Py_ssize_t step, Py_ssize_t count,
                         double u_a, double m_a, double u_b, double m_b, double *kinetic)
{
    const double k1 = sqrt(m_a * max_numpy(u_a - e_n, 1e-3) / hb2);
    const double k2 = sqrt(m_b * max_numpy(u_b - e_n, 1e-3) / hb2);
    double psi = 1.0, flux = k1 / m_a, norm = 0.5 / k1, in_well = 0.0, kin = 0.0;
    for (Py_ssize_t i = 0; i < count; i++) {
        const Py_ssize_t s = s0 + i * step;
        const double d = wr[s], m = mr[s];
        if (!(d > 0.0)) continue;
        const double k2s = m * (e_n - er[s]) / hb2;
        const double q = sqrt(fabs(k2s)), qd = q * d;
        const int up = k2s >= 0.0;
        const double c = up ? cos(qd) : cosh(qd);
        const double sn = qd > 1e-8 ? (up ? sin(qd) : sinh(qd)) / (q > 1e-300 ? q : 1e-300) : d;
        const double x2 = k2s * d * d;
        const double odd = fabs(x2) < 1e-3 ? d * d * d * (1.0 / 3.0 - x2 / 15.0)
                                           : (d - sn * c) / (2.0 * k2s);
        const double slope = m * flux;
        const double piece = psi * psi * 0.5 * (d + sn * c) + slope * slope * odd +
                             psi * slope * sn * sn;
        norm += piece;
        in_well += piece;
        kin += piece * (e_n - er[s]);
        const double psi_next = c * psi + sn * slope;
        flux = (-k2s * sn * psi + c * slope) / m;
        psi = psi_next;
    }
    norm += psi * psi * 0.5 / k2;
    *kinetic = kin / (in_well > 0.0 ? in_well : 1.0);
    return ((e_n - er[s0]) + mr[s0] / m_a * (u_a - e_n)) / norm;
}

/* per state: the two interface slopes and the kinetic energy of the shot from the interface
   whose well slice lies higher (physics/scattering.py, _well_shots) */
static void well_shots(Py_ssize_t n_rows, Py_ssize_t n_slices, Py_ssize_t n_states, double hb2,
                       const double *energy, const double *par, const double *edge,
                       const double *mass, const double *width, double *out)
{
    for (Py_ssize_t r = 0; r < n_rows; r++) {
        const double *p = par + r * SLOPE_P;
        const double *er = edge + r * n_slices, *mr = mass + r * n_slices,
                     *wr = width + r * n_slices;
        const Py_ssize_t first = (Py_ssize_t)p[S_FIRST], last = (Py_ssize_t)p[S_LAST];
        const Py_ssize_t count = p[S_HAS] != 0.0 ? last - first + 1 : 0;
        for (Py_ssize_t l = 0; l < n_states; l++) {
            const double e_n = energy[r * n_states + l];
            double *o = out + 3 * (r * n_states + l);
            double kin_a, kin_b;
            o[0] = shot_slope(e_n, hb2, er, mr, wr, first, 1, count, p[S_UB1], p[S_MB1], p[S_UB2],
                              p[S_MB2], &kin_a);
            o[1] = shot_slope(e_n, hb2, er, mr, wr, last, -1, count, p[S_UB2], p[S_MB2], p[S_UB1],
                              p[S_MB1], &kin_b);
            o[2] = er[first] >= er[last] ? kin_a : kin_b;
        }
    }
}

static PyObject *py_well_shots(PyObject *self, PyObject *args)
{
    Py_ssize_t n, n_states;
    double hb2;
    Py_buffer bE = {0}, bp = {0}, be = {0}, bm = {0}, bw = {0}, bo = {0};
    PyObject *result = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "nndy*y*y*y*y*w*", &n, &n_states, &hb2, &bE, &bp, &be, &bm, &bw,
                          &bo))
        return NULL;
    if (!(need_double(&bE, "energy") && need_double(&bp, "par") && need_double(&be, "edge") &&
          need_double(&bm, "mass") && need_double(&bw, "width") && need_double(&bo, "out")))
        goto done;
    const Py_ssize_t n_values = be.len / (Py_ssize_t)sizeof(double);
    const Py_ssize_t rows = n > 0 ? n_values / n : 0;
    if (n <= 0 || n_states <= 0 || n_values % n != 0 || bm.len != be.len || bw.len != be.len ||
        bE.len != rows * n_states * (Py_ssize_t)sizeof(double) ||
        bp.len != rows * SLOPE_P * (Py_ssize_t)sizeof(double) || bo.len != 3 * bE.len) {
        PyErr_SetString(PyExc_ValueError,
                        "edge, mass, width: rows x n_slices float64; energy: rows x n_states;"
                        " par: rows x 7; out: rows x n_states x 3");
        goto done;
    }
    for (Py_ssize_t r = 0; r < rows; r++) {
        const double *p = (const double *)bp.buf + r * SLOPE_P;
        if (!(p[S_FIRST] >= 0.0 && p[S_LAST] >= 0.0 && p[S_FIRST] < (double)n &&
              p[S_LAST] < (double)n)) {
            PyErr_SetString(PyExc_ValueError, "par: well slices outside 0..n_slices-1");
            goto done;
        }
    }
    well_shots(rows, n, n_states, hb2, bE.buf, bp.buf, be.buf, bm.buf, bw.buf, bo.buf);
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&bE);
    PyBuffer_Release(&bp);
    PyBuffer_Release(&be);
    PyBuffer_Release(&bm);
    PyBuffer_Release(&bw);
    PyBuffer_Release(&bo);
    return result;
}

static PyMethodDef methods[] = {
    {"transmission", py_transmission, METH_VARARGS,
     "transmission(n_slices, n_energy, energy, edge, mass, alpha, width, inv_hb2, t_out, r_out,"
     " rows)\n\n"
     "Fill t_out (and r_out unless None) with T(E) (and R(E)): energy group g (n_energy values)"
     " on profile rows[g] (g itself where rows is None)."},
    {"refine_brackets", py_refine_brackets, METH_VARARGS,
     "refine_brackets(n_slices, edge, mass, alpha, width, inv_hb2, rows, x, y, iterations,"
     " extra_rounds, loose_bracket, loose_fit)\n\n"
     "The bracketing rounds of physics.resonances.refine_bracketed on brackets x (n, 3) with"
     " y = 1/T (both float64, updated in place), bracket i on profile rows[i] (int64)."},
    {"refine_peaks", py_refine_peaks, METH_VARARGS,
     "refine_peaks(n_slices, edge, mass, alpha, width, inv_hb2, rows, x, y, iterations,"
     " extra_rounds, loose_bracket, loose_fit, exact_peak, out)\n\n"
     "refine_brackets, then the end of physics.resonances.refine_bracketed: out (n, 3) gets"
     " each line's centre, width and peak transmission."},
    {"grid_states", py_grid_states, METH_VARARGS,
     "grid_states(n_slices, n_energy, energy, edge, mass, alpha, width, inv_hb2, n_max, n_first,"
     " iterations, extra_rounds, loose_bracket, loose_fit, exact_peak, out)\n\n"
     "T on each profile's grid (energy: n_energy per profile), its n_max highest interior"
     " maxima and n_first first ones refined as refine_peaks does; out (n_profiles, n_max +"
     " n_first, 4): centre, width, peak T,"
     " 1.0 where the slot holds a maximum (the grid's second energy, NaN, NaN, 0.0 where not)."},
    {"well_root_step", py_well_root_step, METH_VARARGS,
     "well_root_step(state, well, residual, target, done, has_previous, mixing, tolerance,"
     " abs_cm2)\n\n"
     "One step of physics.electrostatics._WellChargeRoot.next_well on n entries: state (12, n)"
     " float64 (lo, r_lo, lo_known, hi, r_hi, last_side, reopened, settled, frozen, push,"
     " previous well, previous residual) and well (the next charge) updated in place; returns"
     " whether the previous step is kept (0 after a collapsed bracket)."},
    {"charge_arguments", py_charge_arguments, METH_VARARGS,
     "charge_arguments(n_slots, states, edge, mu, kt, em1_arg, exp_arg)\n\n"
     "The arguments of expm1 and exp of the well-charge step's charge (physics.electrostatics."
     "_WellChargeStep) from grid_states' out (n, n_slots, 4); edge, mu, kt: n values each."},
    {"charge_sums", py_charge_sums, METH_VARARGS,
     "charge_sums(n_slots, states, mu, kt, n2d, em1_val, log1p_val, charge)\n\n"
     "The well-charge step's charge of each entry (n values, cm^-2) from expm1 of the first"
     " arguments and log1p(exp) of the second (bit for bit the numpy statement's)."},
    {"poisson_newton", py_poisson_newton, METH_VARARGS,
     "poisson_newton(n_nodes, rows, u, g, w, donors, offset, mu, mask, fixed, nc, kt, coef,"
     " eta_lo, eta_step, eta_hi, tolerance, max_step, max_iterations, q, electrons)\n\n"
     "Damped Newton solve of physics.electrostatics.solve_poisson_1d per entry (u, mu, fixed,"
     " electrons per entry; g, w, donors, offset, mask, nc, kt per profile row rows[entry]);"
     " u and electrons updated in place; returns (iterations, failed, last largest update)."},
    {"barrier_action", py_barrier_action, METH_VARARGS,
     "barrier_action(n_slices, lo, hi, hb2, z, edge, mass, width, run, out)\n\n"
     "int kappa dz of physics.scattering._barrier_action: out (rows, n_z) gets, per row of"
     " edge, mass, width (float64) and run (bool), all (rows, n), and energy z (rows, n_z), the"
     " sum over slices lo..hi-1 in run of sqrt(mass max(edge - z, 0) / hb2) width."},
    {"node_arguments", py_node_arguments, METH_VARARGS,
     "node_arguments(n_states, k, par, both, n_slices, lo, hi, hb2, edge, mass, width, run,"
     " ex_arg, at_arg, th_arg)\n\n"
     "The arguments of exp, arctan and tanh of the scattering channel at its energy nodes"
     " (physics.scattering._compiled_node_fluxes)."},
    {"node_fluxes", py_node_fluxes, METH_VARARGS,
     "node_fluxes(k, hb2, par, both, steps, ex_val, at_val, th_val, flux_l, flux_r)\n\n"
     "The channel's couplings and reservoir fluxes at its energy nodes from the values of"
     " those functions (physics.scattering._couplings and _reservoir_fluxes, bit for bit)."},
    {"well_shots", py_well_shots, METH_VARARGS,
     "well_shots(n_slices, n_states, hb2, energy, par, edge, mass, width, out)\n\n"
     "-dE_n/dz at the well's two interfaces and <E_n - U> in the well"
     " (physics.scattering._well_shots): out"
     " (rows, n_states, 3) from the states' energies (rows, n_states), par (rows, 7: first,"
     " last, has, U_b1, m_b1, U_b2, m_b2) and the slices' edge, mass, width (rows, n)."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {
    PyModuleDef_HEAD_INIT, "physics._slices",
    "Compiled transmission kernel (see physics.transmission).", -1, methods, NULL, NULL, NULL, NULL,
};

#ifdef WW_VECTOR_MATH
#define WW_VECTOR_MATH_NAME "libmvec"
#else
#define WW_VECTOR_MATH_NAME "none"
#endif

PyMODINIT_FUNC PyInit__slices(void)
{
    PyObject *m = PyModule_Create(&module);
    if (m && PyModule_AddStringConstant(m, "VECTOR_MATH", WW_VECTOR_MATH_NAME) < 0) {
        Py_DECREF(m);
        return NULL;
    }
    return m;
}
