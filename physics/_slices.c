/*
 * Compiled transmission kernel: the reflection-ratio recursion of
 * physics/transmission.py in real arithmetic, vectorised across energies.
 *
 * The recursion, its stability argument and its references are documented
 * in physics/transmission.py; this file computes the same numbers (tested
 * against the numpy implementation to 1e-11 relative). Per slice the wave
 * number is either real (propagating) or imaginary (evanescent), so the
 * ratio eta of k/m across an interface is real or purely imaginary and the
 * phase factor exp(2 i k d) is either (cos, sin) or a real decay: no complex
 * square roots or exponentials are needed. Lanes of LANES energies advance
 * through the slices together; on x86-64 glibc the loops compile to SIMD
 * with the vector math library (libmvec), in clones for AVX-512, AVX2 and
 * baseline SSE2 picked at load time.
 *
 * Python interface (physics._slices):
 *   transmission(n_slices, energy, edge, mass, alpha, width, inv_hb2, t_out, r_out)
 * energy: float64 buffer (n_batch * n_energy); edge, mass, alpha, width:
 * float64 buffers (n_batch * n_slices); t_out like energy (written);
 * r_out like energy or None. inv_hb2 = 1 / (hbar^2 / 2 m0) in 1/(eV nm^2).
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>

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
double sin(double) __attribute__((simd("notinbranch"), const, nothrow));
double cos(double) __attribute__((simd("notinbranch"), const, nothrow));
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

/* One profile (n slices) at ne energies. */
WW_CLONES
static void kernel(int n, const double *edge, const double *mass, const double *alpha,
                   const double *width, Py_ssize_t ne, const double *energy, double inv_hb2,
                   double *t_out, double *r_out)
{
    for (Py_ssize_t e0 = 0; e0 < ne; e0 += LANES) {
        double en[LANES], rr[LANES], ri[LANES], lg[LANES], pm[LANES];
        double q_next[LANES], p_next[LANES], q_coll[LANES];
        const int used = (ne - e0) < LANES ? (int)(ne - e0) : LANES;
        for (int l = 0; l < LANES; l++) en[l] = energy[e0 + (l < used ? l : used - 1)];
        {
            const int j = n - 1;
            WW_SIMD
            for (int l = 0; l < LANES; l++) {
                const double kin = en[l] - edge[j];
                const double m = mass_factor(1.0 + alpha[j] * kin) * mass[j];
                const double k2 = floor_k2(m * kin * inv_hb2);
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
            const double v_j = edge[j], m_j = mass[j], a_j = alpha[j], w2 = 2.0 * width[j];
            WW_SIMD
            for (int l = 0; l < LANES; l++) {
                const double kin = en[l] - v_j;
                const double m = mass_factor(1.0 + a_j * kin) * m_j;
                const double k2 = floor_k2(m * kin * inv_hb2);
                const double p = k2 > 0.0 ? 1.0 : 0.0; /* 1 propagating, 0 evanescent */
                const double s = sqrt(fabs(k2));
                const double q = s / m;
                /* eta = (q_next / q) times 1, -i or +i as the two slices' kinds differ */
                const double r = q_next[l] / q;
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
                /* rho_j = rho' exp(2 i k d): a rotation or a decay (contacts: d = 0) */
                const double arg = w2 * s;
                const double cs = cos(arg), sn = sin(arg), ex = exp(-arg);
                const double c = p * cs + (1.0 - p) * ex, si = p * sn;
                rr[l] = xr * c - xi * si;
                ri[l] = xr * si + xi * c;
                lg[l] += (1.0 - p) * arg;
                q_next[l] = q;
                p_next[l] = p;
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
}

static int need_double(Py_buffer *b, const char *name)
{
    if (b->len % (Py_ssize_t)sizeof(double) != 0) {
        PyErr_Format(PyExc_ValueError, "%s: buffer is not float64", name);
        return 0;
    }
    return 1;
}

static PyObject *py_transmission(PyObject *self, PyObject *args)
{
    int n;
    double inv_hb2;
    PyObject *r_obj;
    Py_buffer be = {0}, bv = {0}, bm = {0}, ba = {0}, bw = {0}, bt = {0}, br = {0};
    int have_r = 0;
    PyObject *result = NULL;
    (void)self;
    if (!PyArg_ParseTuple(args, "iy*y*y*y*y*dw*O", &n, &be, &bv, &bm, &ba, &bw, &inv_hb2, &bt,
                          &r_obj))
        return NULL;
    if (r_obj != Py_None) {
        if (PyObject_GetBuffer(r_obj, &br, PyBUF_WRITABLE | PyBUF_C_CONTIGUOUS) < 0) goto done;
        have_r = 1;
    }
    if (!(need_double(&be, "energy") && need_double(&bv, "edge") && need_double(&bm, "mass") &&
          need_double(&ba, "alpha") && need_double(&bw, "width") && need_double(&bt, "t_out")))
        goto done;
    const Py_ssize_t n_slice_values = bv.len / (Py_ssize_t)sizeof(double);
    if (n < 2 || n_slice_values % n != 0 || bm.len != bv.len || ba.len != bv.len ||
        bw.len != bv.len) {
        PyErr_SetString(PyExc_ValueError, "slice buffers must hold n_batch * n_slices values");
        goto done;
    }
    const Py_ssize_t n_batch = n_slice_values / n;
    const Py_ssize_t n_values = be.len / (Py_ssize_t)sizeof(double);
    if (n_batch == 0 || n_values % n_batch != 0 || bt.len != be.len ||
        (have_r && br.len != be.len)) {
        PyErr_SetString(PyExc_ValueError, "energy and output buffers must hold n_batch * n_energy values");
        goto done;
    }
    const Py_ssize_t ne = n_values / n_batch;
    const double *energy = be.buf, *edge = bv.buf, *mass = bm.buf, *alpha = ba.buf, *width = bw.buf;
    double *t_out = bt.buf, *r_out = have_r ? (double *)br.buf : NULL;
    if (ne > 0) {
        Py_BEGIN_ALLOW_THREADS
        for (Py_ssize_t b = 0; b < n_batch; b++) {
            const Py_ssize_t os = b * n, oe = b * ne;
            kernel(n, edge + os, mass + os, alpha + os, width + os, ne, energy + oe, inv_hb2,
                   t_out + oe, r_out ? r_out + oe : NULL);
        }
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
    if (have_r) PyBuffer_Release(&br);
    return result;
}

static PyMethodDef methods[] = {
    {"transmission", py_transmission, METH_VARARGS,
     "transmission(n_slices, energy, edge, mass, alpha, width, inv_hb2, t_out, r_out)\n\n"
     "Fill t_out (and r_out unless None) with T(E) (and R(E)) of n_batch profiles."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {
    PyModuleDef_HEAD_INIT, "physics._slices",
    "Compiled transmission kernel (see physics.transmission).", -1, methods,
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
