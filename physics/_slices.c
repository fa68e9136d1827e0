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
 * items advance through the slices together; on x86-64 glibc the loops compile to SIMD
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
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>
#include <stdint.h>

#define LANES 8
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

/* One chunk of LANES (energy, profile) items from item e0 on. Item i belongs to energy
   group i / ne, which runs on profile rows[group] (the group itself without rows).
   Lanes run over items, not over one profile's energies, so that short energy lists
   (two probes per resonance in the refinement) fill the vectors too; each lane then
   gathers its own profile's slice parameters. With `shared` (the chunk inside one
   energy group: every chunk when ne is a multiple of LANES, all but the straddling ones
   otherwise) all lanes read one profile: plain loads instead of gathers, and padding
   slices are skipped. Inlined twice, once per case. */
static inline __attribute__((always_inline)) void chunk(
    const int shared, int n, const double *edge, const double *mass, const double *alpha,
    const double *width, const int64_t *rows, Py_ssize_t n_items, Py_ssize_t ne,
    const double *energy, double inv_hb2, double *t_out, double *r_out, Py_ssize_t e0)
{
    double en[LANES], rr[LANES], ri[LANES], lg[LANES], pm[LANES];
    double q_next[LANES], p_next[LANES], q_coll[LANES], arg[LANES];
    Py_ssize_t base[LANES]; /* offset of the lane's profile in the slice arrays */
    const int used = (n_items - e0) < LANES ? (int)(n_items - e0) : LANES;
    Py_ssize_t group = e0 / ne, within = e0 % ne; /* of lane 0; the others count on */
    for (int l = 0; l < LANES; l++) {
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
        for (int l = 0; l < LANES; l++) {
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
                for (int l = 0; l < LANES; l++) pm[l] *= 4.0;
                continue;
            }
        }
        WW_SIMD
        for (int l = 0; l < LANES; l++) {
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
        for (int l = 0; l < LANES; l++) n_prop += p_next[l];
        if (j == 0) {
            /* the emitter: rho' is its reflection ratio */
        } else if (n_prop == LANES) {
            WW_SIMD
            for (int l = 0; l < LANES; l++) {
                const double th = tan(0.5 * arg[l]), den = 1.0 / (1.0 + th * th);
                const double c = (1.0 - th * th) * den, si = 2.0 * th * den;
                const double xr = rr[l], xi = ri[l];
                rr[l] = xr * c - xi * si;
                ri[l] = xr * si + xi * c;
            }
        } else if (n_prop == 0.0) {
            WW_SIMD
            for (int l = 0; l < LANES; l++) {
                const double c = exp(-arg[l]);
                rr[l] *= c;
                ri[l] *= c;
                lg[l] += arg[l];
            }
        } else {
            WW_SIMD
            for (int l = 0; l < LANES; l++) {
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
            for (int l = 0; l < LANES; l++) {
                lg[l] += log(pm[l]);
                pm[l] = 1.0;
            }
        }
    }
    double t[LANES], refl[LANES];
    WW_SIMD
    for (int l = 0; l < LANES; l++) {
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

WW_CLONES
static void kernel(int n, const double *edge, const double *mass, const double *alpha,
                   const double *width, const int64_t *rows, Py_ssize_t n_items, Py_ssize_t ne,
                   const double *energy, double inv_hb2, double *t_out, double *r_out)
{
    for (Py_ssize_t e0 = 0; e0 < n_items; e0 += LANES) {
        const Py_ssize_t last = (e0 + LANES < n_items ? e0 + LANES : n_items) - 1;
        if (e0 / ne == last / ne) /* the whole chunk in one energy group: one profile */
            chunk(1, n, edge, mass, alpha, width, rows, n_items, ne, energy, inv_hb2, t_out,
                  r_out, e0);
        else
            chunk(0, n, edge, mass, alpha, width, rows, n_items, ne, energy, inv_hb2, t_out,
                  r_out, e0);
    }
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
    if (!(need_double(&be, "energy") && need_double(&bv, "edge") && need_double(&bm, "mass") &&
          need_double(&ba, "alpha") && need_double(&bw, "width") && need_double(&bt, "t_out")))
        goto done;
    const Py_ssize_t n_slice_values = bv.len / (Py_ssize_t)sizeof(double);
    if (n < 2 || n_slice_values % n != 0 || bm.len != bv.len || ba.len != bv.len ||
        bw.len != bv.len) {
        PyErr_SetString(PyExc_ValueError, "slice buffers must hold n_profiles * n_slices values");
        goto done;
    }
    const Py_ssize_t n_profiles = n_slice_values / n;
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
        kernel(n, edge, mass, alpha, width, rows, n_values, ne, energy, inv_hb2, t_out, r_out);
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

static PyMethodDef methods[] = {
    {"transmission", py_transmission, METH_VARARGS,
     "transmission(n_slices, n_energy, energy, edge, mass, alpha, width, inv_hb2, t_out, r_out,"
     " rows)\n\n"
     "Fill t_out (and r_out unless None) with T(E) (and R(E)): energy group g (n_energy values)"
     " on profile rows[g] (g itself where rows is None)."},
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
