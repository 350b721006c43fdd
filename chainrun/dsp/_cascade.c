/* chainrun.dsp._cascade: an optional compiled biquad cascade, bit for bit scipy.signal.sosfilt.
 *
 * One function, cascade(sos, x, zi, y): filters the channel-major float64 block x (C x N) through
 * the S second-order sections in sos (S x 6, rows [b0, b1, b2, 1, a1, a2]) into y (C x N), with
 * the state zi (C x S x 2) updated in place.  All four are C-contiguous float64 buffers; the
 * Python side (chainrun/dsp/compiled.py) arranges them.  No numpy headers: only the buffer
 * protocol, so building needs a C compiler and Python's headers and nothing else.
 *
 * Exactness.  Every sample goes through the sections in order, with the same operations in the
 * same order as scipy's _sosfilt.pyx (transposed direct form II):
 *
 *     y  = b0*x + z0
 *     z0 = (b1*x - a1*y) + z1
 *     z1 = b2*x - a2*y
 *
 * Each product and sum is one IEEE-754 double operation, rounded once.  That holds only if the
 * compiler neither fuses a product into an add (FMA contraction: setup.py passes
 * -ffp-contract=off; the pragmas below say the same to compilers that read them) nor reorders or
 * flushes anything (-ffast-math is refused below), and if doubles are evaluated as doubles
 * (FLT_EVAL_METHOD 0, 1 or 16; not x87 extended precision).  A build where these cannot be promised
 * fails on purpose; the extension is optional, so chainrun then uses scipy's sosfilt.
 * tests/unit/test_compiled.py compares the bytes with scipy.signal.sosfilt.
 *
 * A second function, linear(b, a, x, zi, y), is the loop of scipy.signal.lfilter for a
 * denominator with a[0] == 1 (the loudness meter's K-weighting, both stages as one filter of order
 * K = len(b) - 1 <= 8; optionally writing each output's square, y*y, which the meter needs next): per
 * sample, in scipy's order (its _lfilter.cc, transposed direct form II),
 *
 *     y      = z[0] + b[0]*x
 *     z[k]   = (z[k+1] + x*b[k+1]) - y*a[k+1]      for k = 0 .. K-2
 *     z[K-1] = x*b[K] - y*a[K]
 *
 * Speed comes from running two channels side by side in one 2-lane vector (GCC/Clang vector
 * extensions: SSE2 on x86-64, NEON on AArch64): lane-wise IEEE operations, so each lane's
 * result is exactly the scalar one.  An odd last channel runs the scalar loop.
 *
 * Small loops serve the true-peak meter around its matrix products (fold_rows, absmax_sum,
 * absmax_runs, prescreen_rows, screen_picked; chainrun/dsp/fold.py holds their numpy forms, which give
 * the same bits).
 *
 * Two byte loops serve PCM_24 files: pack24_row (quantise one channel row and store its three-byte
 * codes) and unpack24_rows (the reverse); see their block just before the method table.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <float.h>
#include <math.h>
#include <stdint.h>
#include <string.h>

#if defined(__FAST_MATH__)
#error "chainrun's cascade kernel must not be built with -ffast-math (it would change the output bytes)"
#endif
/* 0: every type in its own precision; 1: float as double; 16 (ISO/IEC TS 18661-3, e.g. with
 * AVX512-FP16): _Float16 in its own, the rest as 0.  Doubles stay doubles in all three; 2 (x87
 * long double) and -1 (unknown) would change the roundings. */
#if defined(FLT_EVAL_METHOD) && FLT_EVAL_METHOD != 0 && FLT_EVAL_METHOD != 1 && FLT_EVAL_METHOD != 16
#error "chainrun's cascade kernel needs doubles evaluated as doubles (FLT_EVAL_METHOD 0, 1 or 16)"
#endif

#if defined(__clang__)
#pragma STDC FP_CONTRACT OFF
#elif defined(_MSC_VER)
#pragma fp_contract(off)
#endif              /* GCC ignores the pragma: setup.py passes -ffp-contract=off */

/* Bump when the calling convention changes; compiled.py refuses a build of another version. */
#define CASCADE_ABI 12

#ifndef CASCADE_SOURCE_DIGEST
#define CASCADE_SOURCE_DIGEST ""
#endif

/* Loops built for AVX-512, AVX2 and the baseline by GCC, one picked when the module loads (target
 * clones): WAVE_LOOP for the loops written with vector types; VECTOR_LOOP, at -O3 as well, for the
 * plain loops the compiler vectorises (the true-peak, PCM_24 and RMS loops).  In all of them each
 * vector lane does exactly the scalar operations, and nothing is reordered but a max, whose order
 * does not matter (the RMS sums keep one running sum per lane): the results are the scalar bits. */
#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && defined(__linux__)
#define WAVE_LOOP __attribute__((target_clones("avx512f", "avx2", "default")))
#define VECTOR_LOOP __attribute__((target_clones("avx512f", "avx2", "default"), optimize("O3")))
#else
#define WAVE_LOOP
#define VECTOR_LOOP
#endif

/* Sections held on the stack by the two-lane loop; a longer cascade runs the scalar loop. */
#define PAIR_MAX_SECTIONS 64

static void
cascade_one(const double *sos, Py_ssize_t n_sections, const double *x, double *y,
            Py_ssize_t n_samples, double *zi)
{
    for (Py_ssize_t n = 0; n < n_samples; n++) {
        double x_cur = x[n];
        for (Py_ssize_t s = 0; s < n_sections; s++) {
            const double *c = sos + 6 * s;
            double *z = zi + 2 * s;
            double x_new = c[0] * x_cur + z[0];
            z[0] = c[1] * x_cur - c[4] * x_new + z[1];
            z[1] = c[2] * x_cur - c[5] * x_new;
            x_cur = x_new;
        }
        y[n] = x_cur;
    }
}

#if defined(__GNUC__) || defined(__clang__)
#define CASCADE_HAVE_PAIR 1
typedef double pair_t __attribute__((vector_size(16)));

static void
cascade_pair(const double *sos, Py_ssize_t n_sections, const double *x0, const double *x1,
             double *y0, double *y1, Py_ssize_t n_samples, double *zi0, double *zi1)
{
    pair_t b0[PAIR_MAX_SECTIONS], b1[PAIR_MAX_SECTIONS], b2[PAIR_MAX_SECTIONS];
    pair_t a1[PAIR_MAX_SECTIONS], a2[PAIR_MAX_SECTIONS];
    pair_t z0[PAIR_MAX_SECTIONS], z1[PAIR_MAX_SECTIONS];
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        const double *c = sos + 6 * s;
        b0[s] = (pair_t){c[0], c[0]};
        b1[s] = (pair_t){c[1], c[1]};
        b2[s] = (pair_t){c[2], c[2]};
        a1[s] = (pair_t){c[4], c[4]};
        a2[s] = (pair_t){c[5], c[5]};
        z0[s] = (pair_t){zi0[2 * s], zi1[2 * s]};
        z1[s] = (pair_t){zi0[2 * s + 1], zi1[2 * s + 1]};
    }
    for (Py_ssize_t n = 0; n < n_samples; n++) {
        pair_t x_cur = {x0[n], x1[n]};
        for (Py_ssize_t s = 0; s < n_sections; s++) {
            pair_t x_new = b0[s] * x_cur + z0[s];
            z0[s] = b1[s] * x_cur - a1[s] * x_new + z1[s];
            z1[s] = b2[s] * x_cur - a2[s] * x_new;
            x_cur = x_new;
        }
        y0[n] = x_cur[0];
        y1[n] = x_cur[1];
    }
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        zi0[2 * s] = z0[s][0];
        zi1[2 * s] = z0[s][1];
        zi0[2 * s + 1] = z1[s][0];
        zi1[2 * s + 1] = z1[s][1];
    }
}

/* The wavefront: the sections of one or two signals side by side in the lanes of 4-lane vectors.
 *
 * In the loops above every section waits for the section before it at the same sample, so a
 * sample's trip through S sections is a chain of S multiply-adds.  Here lane (s, c) -- section s of
 * signal c, lane s*W + c for W signals -- takes sample t - s at step t: its input is what lane
 * (s - 1, c) gave at step t - 1 (a shift of the vectors by W lanes), so all S*W lanes advance
 * together and a step waits only for one section's own recurrence.  Each lane does exactly the
 * scalar operations of cascade_one on the same values in the same order (lane-wise IEEE operations,
 * shuffles move values unchanged), and each section sees its samples in order with its own state:
 * the output and the final state are cascade_one's, bit for bit.  The first S - 1 steps (lanes whose
 * first sample has not reached them) and the last S - 1 (lanes past their last sample) run one lane
 * at a time (wave_scalar_step); the steps between run whole vectors, with V = ceil(S*W / 4) a
 * constant of each generated loop so that everything stays in registers.  Lanes past S*W hold
 * zero coefficients and are never read.  Measured by timing the loops alone in C (65536 frames,
 * random stable sections): stereo, six sections, 3.9 ns a frame against 7.4 for cascade_pair; one
 * signal of six sections, 4.2 against 7.1 for cascade_one. */
typedef double lanes4_t __attribute__((vector_size(32)));
#if defined(__clang__)
#define SHIFT_W2(a, b) __builtin_shufflevector((a), (b), 2, 3, 4, 5)
#define SHIFT_W1(a, b) __builtin_shufflevector((a), (b), 3, 4, 5, 6)
#else
typedef long long lanes4_mask_t __attribute__((vector_size(32)));
#define SHIFT_W2(a, b) __builtin_shuffle((a), (b), (lanes4_mask_t){2, 3, 4, 5})
#define SHIFT_W1(a, b) __builtin_shuffle((a), (b), (lanes4_mask_t){3, 4, 5, 6})
#endif

/* Steps t0 .. t1-1 with every lane busy.  coef: b0, b1, b2, a1, a2 of every lane, 4V doubles each;
 * st: z0, z1 and the last output of every lane, 4V doubles each; output lane of signal 0: j of the
 * last vector (the last section, which is always in it); y[t - lag] is sample t - lag. */
#define WAVE_FN(NAME, W, V, SHIFT)                                                              \
WAVE_LOOP static void                                                                          \
NAME(const double *coef, double *st, const double *x0, const double *x1, double *y0, double *y1, \
     Py_ssize_t t0, Py_ssize_t t1, Py_ssize_t lag, int j)                                       \
{                                                                                              \
    lanes4_t B0[V], B1[V], B2[V], A1[V], A2[V], Z0[V], Z1[V], O[V];                             \
    _Pragma("GCC unroll 16")                                                                   \
    for (int v = 0; v < V; v++) {                                                              \
        memcpy(&B0[v], coef + 4 * v, sizeof(lanes4_t));                                          \
        memcpy(&B1[v], coef + 4 * (V + v), sizeof(lanes4_t));                                    \
        memcpy(&B2[v], coef + 4 * (2 * V + v), sizeof(lanes4_t));                                \
        memcpy(&A1[v], coef + 4 * (3 * V + v), sizeof(lanes4_t));                                \
        memcpy(&A2[v], coef + 4 * (4 * V + v), sizeof(lanes4_t));                                \
        memcpy(&Z0[v], st + 4 * v, sizeof(lanes4_t));                                            \
        memcpy(&Z1[v], st + 4 * (V + v), sizeof(lanes4_t));                                      \
        memcpy(&O[v], st + 4 * (2 * V + v), sizeof(lanes4_t));                                   \
    }                                                                                          \
    for (Py_ssize_t t = t0; t < t1; t++) {                                                     \
        lanes4_t in[V];                                                                          \
        lanes4_t xv = (W == 2) ? (lanes4_t){0.0, 0.0, x0[t], x1[t]} : (lanes4_t){0.0, 0.0, 0.0, x0[t]}; \
        in[0] = SHIFT(xv, O[0]);                                                               \
        _Pragma("GCC unroll 16")                                                               \
        for (int v = 1; v < V; v++)                                                            \
            in[v] = SHIFT(O[v - 1], O[v]);                                                     \
        _Pragma("GCC unroll 16")                                                               \
        for (int v = 0; v < V; v++) {                                                          \
            lanes4_t o = B0[v] * in[v] + Z0[v];                                                  \
            Z0[v] = B1[v] * in[v] - A1[v] * o + Z1[v];                                         \
            Z1[v] = B2[v] * in[v] - A2[v] * o;                                                 \
            O[v] = o;                                                                          \
        }                                                                                      \
        double last[4];                                                                        \
        memcpy(last, &O[V - 1], sizeof last);                                                  \
        y0[t - lag] = last[j];                                                                 \
        if (W == 2)                                                                            \
            y1[t - lag] = last[j + 1];                                                         \
    }                                                                                          \
    _Pragma("GCC unroll 16")                                                                   \
    for (int v = 0; v < V; v++) {                                                              \
        memcpy(st + 4 * v, &Z0[v], sizeof(lanes4_t));                                            \
        memcpy(st + 4 * (V + v), &Z1[v], sizeof(lanes4_t));                                      \
        memcpy(st + 4 * (2 * V + v), &O[v], sizeof(lanes4_t));                                   \
    }                                                                                          \
}

WAVE_FN(wave2_1, 2, 1, SHIFT_W2)
WAVE_FN(wave2_2, 2, 2, SHIFT_W2)
WAVE_FN(wave2_3, 2, 3, SHIFT_W2)
WAVE_FN(wave2_4, 2, 4, SHIFT_W2)
WAVE_FN(wave1_1, 1, 1, SHIFT_W1)
WAVE_FN(wave1_2, 1, 2, SHIFT_W1)
WAVE_FN(wave1_3, 1, 3, SHIFT_W1)
WAVE_FN(wave1_4, 1, 4, SHIFT_W1)

typedef void (*wave_fn)(const double *, double *, const double *, const double *, double *, double *,
                        Py_ssize_t, Py_ssize_t, Py_ssize_t, int);
static const wave_fn WAVES[2][4] = {{wave1_1, wave1_2, wave1_3, wave1_4}, {wave2_1, wave2_2, wave2_3, wave2_4}};
#define WAVE_MAX_LANES 16

/* One step t of the wave, lane by lane: the lanes whose sample t - s lies in [0, n), from the last
 * section down, so that each reads what the section before it gave at the previous step. */
static void
wave_scalar_step(int w, Py_ssize_t S, const double *coef, double *st, int V, const double *const *x,
                 double *const *y, Py_ssize_t t, Py_ssize_t n)
{
    const double *b0 = coef, *b1 = coef + 4 * V, *b2 = coef + 8 * V, *a1 = coef + 12 * V, *a2 = coef + 16 * V;
    double *z0 = st, *z1 = st + 4 * V, *o = st + 8 * V;
    Py_ssize_t s_lo = t - n + 1 > 0 ? t - n + 1 : 0, s_hi = t < S - 1 ? t : S - 1;
    for (Py_ssize_t s = s_hi; s >= s_lo; s--)
        for (int c = 0; c < w; c++) {
            Py_ssize_t l = s * w + c;
            double in = s == 0 ? x[c][t] : o[l - w];
            double on = b0[l] * in + z0[l];
            z0[l] = b1[l] * in - a1[l] * on + z1[l];
            z1[l] = b2[l] * in - a2[l] * on;
            o[l] = on;
        }
    if (s_hi == S - 1 && t >= S - 1)
        for (int c = 0; c < w; c++)
            y[c][t - (S - 1)] = o[(S - 1) * w + c];
}

/* w signals (1 or 2) through one cascade of S sections (S * w <= WAVE_MAX_LANES); zi[c]: signal c's
 * state (S x 2), updated. */
static void
cascade_wave(const double *sos, Py_ssize_t S, int w, const double *const *x, double *const *y, Py_ssize_t n,
             double *const *zi)
{
    int V = (int)((S * w + 3) / 4);
    double coef[5 * WAVE_MAX_LANES] = {0}, st[3 * WAVE_MAX_LANES] = {0};
    for (Py_ssize_t s = 0; s < S; s++)
        for (int c = 0; c < w; c++) {
            Py_ssize_t l = s * w + c;
            const double *k = sos + 6 * s;
            coef[l] = k[0]; coef[4 * V + l] = k[1]; coef[8 * V + l] = k[2];
            coef[12 * V + l] = k[4]; coef[16 * V + l] = k[5];
            st[l] = zi[c][2 * s]; st[4 * V + l] = zi[c][2 * s + 1];
        }
    Py_ssize_t t = 0, end = n + S - 1, lag = S - 1;
    for (; t < lag && t < end; t++)
        wave_scalar_step(w, S, coef, st, V, x, y, t, n);
    if (t < n) {
        WAVES[w - 1][V - 1](coef, st, x[0], w == 2 ? x[1] : NULL, y[0], w == 2 ? y[1] : NULL, t, n, lag,
                            (int)((lag * w) % 4));
        t = n;
    }
    for (; t < end; t++)
        wave_scalar_step(w, S, coef, st, V, x, y, t, n);
    for (Py_ssize_t s = 0; s < S; s++)
        for (int c = 0; c < w; c++) {
            zi[c][2 * s] = st[s * w + c];
            zi[c][2 * s + 1] = st[4 * V + s * w + c];
        }
}
#else
#define CASCADE_HAVE_PAIR 0
#endif

/* A C-contiguous buffer of `ndim` dimensions (any number when ndim < 0) whose items are `itemsize`
 * bytes in one of the struct codes of `codes`, native order (the code alone, or after '=' or '@');
 * `type` names it in the error.  The one way every function here takes its arrays. */
static int
get_array(PyObject *obj, Py_buffer *view, int writable, int ndim, Py_ssize_t itemsize, const char *codes,
          const char *type, const char *name)
{
    int flags = PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | (writable ? PyBUF_WRITABLE : 0);
    if (PyObject_GetBuffer(obj, view, flags) < 0)
        return -1;
    const char *f = view->format;
    if (f != NULL && (f[0] == '=' || f[0] == '@'))
        f++;
    if ((ndim >= 0 && view->ndim != ndim) || view->itemsize != itemsize || f == NULL || f[0] == '\0'
        || f[1] != '\0' || strchr(codes, f[0]) == NULL) {
        if (ndim >= 0)
            PyErr_Format(PyExc_TypeError, "_cascade: %s must be a C-contiguous %d-d %s array", name, ndim, type);
        else
            PyErr_Format(PyExc_TypeError, "_cascade: %s must be a C-contiguous %s array", name, type);
        PyBuffer_Release(view);
        return -1;
    }
    return 0;
}

static int
get_doubles(PyObject *obj, Py_buffer *view, int writable, int ndim, const char *name)
{
    return get_array(obj, view, writable, ndim, 8, "d", "float64", name);
}

static PyObject *
cascade(PyObject *self, PyObject *args)
{
    PyObject *o_sos, *o_x, *o_zi, *o_y, *result = NULL;
    Py_buffer sos = {0}, x = {0}, zi = {0}, y = {0};      /* releasing an unfilled view does nothing */
    if (!PyArg_ParseTuple(args, "OOOO:cascade", &o_sos, &o_x, &o_zi, &o_y))
        return NULL;
    if (get_doubles(o_sos, &sos, 0, 2, "sos") < 0 || get_doubles(o_x, &x, 0, 2, "x") < 0
        || get_doubles(o_zi, &zi, 1, 3, "zi") < 0 || get_doubles(o_y, &y, 1, 2, "y") < 0)
        goto done;

    Py_ssize_t n_sections = sos.shape[0], n_signals = x.shape[0], n_samples = x.shape[1];
    if (sos.shape[1] != 6 || zi.shape[0] != n_signals || zi.shape[1] != n_sections || zi.shape[2] != 2
        || y.shape[0] != n_signals || y.shape[1] != n_samples) {
        PyErr_SetString(PyExc_ValueError, "cascade: shapes must be sos (S, 6), x and y (C, N), zi (C, S, 2)");
        goto done;
    }
    {
        const double *c = sos.buf, *xs = x.buf;
        double *ys = y.buf, *zs = zi.buf;
        Py_ssize_t i = 0;
        Py_BEGIN_ALLOW_THREADS
#if CASCADE_HAVE_PAIR
        if (n_sections <= WAVE_MAX_LANES) {          /* two signals a wave, one when two do not fit */
            int w = 2 * n_sections <= WAVE_MAX_LANES ? 2 : 1;
            for (; i < n_signals; i += w) {
                if (i + w > n_signals)
                    w = 1;
                const double *xw[2] = {xs + i * n_samples, xs + (i + w - 1) * n_samples};
                double *yw[2] = {ys + i * n_samples, ys + (i + w - 1) * n_samples};
                double *zw[2] = {zs + i * 2 * n_sections, zs + (i + w - 1) * 2 * n_sections};
                cascade_wave(c, n_sections, w, xw, yw, n_samples, zw);
            }
        }
        else if (n_sections <= PAIR_MAX_SECTIONS) {
            for (; i + 1 < n_signals; i += 2)
                cascade_pair(c, n_sections, xs + i * n_samples, xs + (i + 1) * n_samples,
                             ys + i * n_samples, ys + (i + 1) * n_samples, n_samples,
                             zs + i * 2 * n_sections, zs + (i + 1) * 2 * n_sections);
        }
#endif
        for (; i < n_signals; i++)
            cascade_one(c, n_sections, xs + i * n_samples, ys + i * n_samples, n_samples,
                        zs + i * 2 * n_sections);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&y);
    PyBuffer_Release(&zi);
    PyBuffer_Release(&x);
    PyBuffer_Release(&sos);
    return result;
}

/* The longest linear filter: the loudness meter's K-weighting is of order 4. */
#define LINEAR_MAX_ORDER 8

/* The loops below take the order as a constant: each is generated for orders 1 .. 8 (LINEAR_FOR),
 * so that the state stays in registers instead of an array in memory, whose store and reload sat
 * in every sample's chain of dependent operations (measured: the K-weighting, of order 4, twice as
 * fast). The operations and their order are unchanged. */
#define LINEAR_ONE(K)                                                                             \
static void                                                                                       \
linear_one_##K(const double *b, const double *a, const double *x, double *y, Py_ssize_t n_samples, \
               double *zi, int square)                                                            \
{                                                                                                 \
    double z[K];                                                                                  \
    _Pragma("GCC unroll 8")                                                                       \
    for (int k = 0; k < K; k++)                                                                   \
        z[k] = zi[k];                                                                             \
    for (Py_ssize_t n = 0; n < n_samples; n++) {                                                  \
        double xn = x[n];                                                                         \
        double yn = z[0] + b[0] * xn;                                                             \
        _Pragma("GCC unroll 8")                                                                   \
        for (int k = 0; k < K - 1; k++)                                                           \
            z[k] = z[k + 1] + xn * b[k + 1] - yn * a[k + 1];                                      \
        z[K - 1] = xn * b[K] - yn * a[K];                                                         \
        y[n] = square ? yn * yn : yn;                                                             \
    }                                                                                             \
    _Pragma("GCC unroll 8")                                                                       \
    for (int k = 0; k < K; k++)                                                                   \
        zi[k] = z[k];                                                                             \
}

#if CASCADE_HAVE_PAIR
#define LINEAR_PAIR(K)                                                                            \
static void                                                                                       \
linear_pair_##K(const double *b, const double *a, const double *x0, const double *x1, double *y0,  \
                double *y1, Py_ssize_t n_samples, double *zi0, double *zi1, int square)           \
{                                                                                                 \
    pair_t bb[K + 1], aa[K + 1], z[K];                                                            \
    _Pragma("GCC unroll 9")                                                                       \
    for (int k = 0; k <= K; k++) {                                                                \
        bb[k] = (pair_t){b[k], b[k]};                                                             \
        aa[k] = (pair_t){a[k], a[k]};                                                             \
    }                                                                                             \
    _Pragma("GCC unroll 8")                                                                       \
    for (int k = 0; k < K; k++)                                                                   \
        z[k] = (pair_t){zi0[k], zi1[k]};                                                          \
    for (Py_ssize_t n = 0; n < n_samples; n++) {                                                  \
        pair_t xn = {x0[n], x1[n]};                                                               \
        pair_t yn = z[0] + bb[0] * xn;                                                            \
        _Pragma("GCC unroll 8")                                                                   \
        for (int k = 0; k < K - 1; k++)                                                           \
            z[k] = z[k + 1] + xn * bb[k + 1] - yn * aa[k + 1];                                    \
        z[K - 1] = xn * bb[K] - yn * aa[K];                                                       \
        if (square)                                                                               \
            yn = yn * yn;                                                                         \
        y0[n] = yn[0];                                                                            \
        y1[n] = yn[1];                                                                            \
    }                                                                                             \
    _Pragma("GCC unroll 8")                                                                       \
    for (int k = 0; k < K; k++) {                                                                 \
        zi0[k] = z[k][0];                                                                         \
        zi1[k] = z[k][1];                                                                         \
    }                                                                                             \
}

/* Four signals side by side in one 4-lane vector (the loudness meters of a file's input and output,
 * stacked, or the first four channels of a wider file): the chain of dependent operations is the
 * same as for one signal, so four take the time of one.  Lane-wise, each lane is linear_one. */
#define LINEAR_QUAD(K)                                                                            \
WAVE_LOOP static void                                                                             \
linear_quad_##K(const double *b, const double *a, const double *const *x, double *const *y,       \
                Py_ssize_t n_samples, double *const *zi, int square)                              \
{                                                                                                 \
    lanes4_t bb[K + 1], aa[K + 1], z[K];                                                          \
    _Pragma("GCC unroll 9")                                                                       \
    for (int k = 0; k <= K; k++) {                                                                \
        bb[k] = (lanes4_t){b[k], b[k], b[k], b[k]};                                               \
        aa[k] = (lanes4_t){a[k], a[k], a[k], a[k]};                                               \
    }                                                                                             \
    _Pragma("GCC unroll 8")                                                                       \
    for (int k = 0; k < K; k++)                                                                   \
        z[k] = (lanes4_t){zi[0][k], zi[1][k], zi[2][k], zi[3][k]};                                \
    const double *x0 = x[0], *x1 = x[1], *x2 = x[2], *x3 = x[3];                                  \
    double *y0 = y[0], *y1 = y[1], *y2 = y[2], *y3 = y[3];                                        \
    for (Py_ssize_t n = 0; n < n_samples; n++) {                                                  \
        lanes4_t xn = {x0[n], x1[n], x2[n], x3[n]};                                               \
        lanes4_t yn = z[0] + bb[0] * xn;                                                          \
        _Pragma("GCC unroll 8")                                                                   \
        for (int k = 0; k < K - 1; k++)                                                           \
            z[k] = z[k + 1] + xn * bb[k + 1] - yn * aa[k + 1];                                    \
        z[K - 1] = xn * bb[K] - yn * aa[K];                                                       \
        if (square)                                                                               \
            yn = yn * yn;                                                                         \
        y0[n] = yn[0];                                                                            \
        y1[n] = yn[1];                                                                            \
        y2[n] = yn[2];                                                                            \
        y3[n] = yn[3];                                                                            \
    }                                                                                             \
    _Pragma("GCC unroll 8")                                                                       \
    for (int k = 0; k < K; k++)                                                                   \
        for (int c = 0; c < 4; c++)                                                               \
            zi[c][k] = z[k][c];                                                                   \
}
#else
#define LINEAR_PAIR(K)
#define LINEAR_QUAD(K)
#endif

#define LINEAR_FOR(K) LINEAR_ONE(K) LINEAR_PAIR(K) LINEAR_QUAD(K)
LINEAR_FOR(1) LINEAR_FOR(2) LINEAR_FOR(3) LINEAR_FOR(4) LINEAR_FOR(5) LINEAR_FOR(6) LINEAR_FOR(7) LINEAR_FOR(8)

typedef void (*linear_one_fn)(const double *, const double *, const double *, double *, Py_ssize_t, double *, int);
static const linear_one_fn LINEAR_ONES[LINEAR_MAX_ORDER] = {
    linear_one_1, linear_one_2, linear_one_3, linear_one_4, linear_one_5, linear_one_6, linear_one_7, linear_one_8};
#if CASCADE_HAVE_PAIR
typedef void (*linear_pair_fn)(const double *, const double *, const double *, const double *, double *, double *,
                               Py_ssize_t, double *, double *, int);
static const linear_pair_fn LINEAR_PAIRS[LINEAR_MAX_ORDER] = {
    linear_pair_1, linear_pair_2, linear_pair_3, linear_pair_4, linear_pair_5, linear_pair_6, linear_pair_7,
    linear_pair_8};
typedef void (*linear_quad_fn)(const double *, const double *, const double *const *, double *const *,
                               Py_ssize_t, double *const *, int);
static const linear_quad_fn LINEAR_QUADS[LINEAR_MAX_ORDER] = {
    linear_quad_1, linear_quad_2, linear_quad_3, linear_quad_4, linear_quad_5, linear_quad_6, linear_quad_7,
    linear_quad_8};
#endif

/* Rows of signals through the lfilter loops: four side by side, then two, then one.  The rows need
 * not lie in one array (the loudness meters of a file's input and output are filtered together). */
static void
linear_rows(const double *bs, const double *as, Py_ssize_t order, const double *const *xr, double *const *yr,
            double *const *zr, Py_ssize_t n_rows, Py_ssize_t n_samples, int square)
{
    Py_ssize_t i = 0;
#if CASCADE_HAVE_PAIR
    for (; i + 3 < n_rows; i += 4)
        LINEAR_QUADS[order - 1](bs, as, xr + i, yr + i, n_samples, zr + i, square);
    for (; i + 1 < n_rows; i += 2)
        LINEAR_PAIRS[order - 1](bs, as, xr[i], xr[i + 1], yr[i], yr[i + 1], n_samples, zr[i], zr[i + 1], square);
#endif
    for (; i < n_rows; i++)
        LINEAR_ONES[order - 1](bs, as, xr[i], yr[i], n_samples, zr[i], square);
}

static PyObject *
linear(PyObject *self, PyObject *args)
{
    PyObject *o_b, *o_a, *o_x, *o_zi, *o_y, *o_x2 = NULL, *o_zi2 = NULL, *o_y2 = NULL, *result = NULL;
    Py_buffer b = {0}, a = {0}, x = {0}, zi = {0}, y = {0};   /* releasing an unfilled view does nothing */
    Py_buffer x2 = {0}, zi2 = {0}, y2 = {0};
    const double **xr = NULL;
    int square = 0;
    if (!PyArg_ParseTuple(args, "OOOOO|pOOO:linear", &o_b, &o_a, &o_x, &o_zi, &o_y, &square, &o_x2, &o_zi2, &o_y2))
        return NULL;
    if (get_doubles(o_b, &b, 0, 1, "b") < 0 || get_doubles(o_a, &a, 0, 1, "a") < 0
        || get_doubles(o_x, &x, 0, 2, "x") < 0 || get_doubles(o_zi, &zi, 1, 2, "zi") < 0
        || get_doubles(o_y, &y, 1, 2, "y") < 0)
        goto done;
    int two = o_x2 != NULL;
    if (two && (o_zi2 == NULL || o_y2 == NULL || get_doubles(o_x2, &x2, 0, 2, "x2") < 0
                || get_doubles(o_zi2, &zi2, 1, 2, "zi2") < 0 || get_doubles(o_y2, &y2, 1, 2, "y2") < 0))
        goto done;

    Py_ssize_t order = b.shape[0] - 1, n1 = x.shape[0], n_samples = x.shape[1], n2 = two ? x2.shape[0] : 0;
    if (order < 1 || order > LINEAR_MAX_ORDER || a.shape[0] != order + 1 || ((const double *)a.buf)[0] != 1.0
        || zi.shape[0] != n1 || zi.shape[1] != order || y.shape[0] != n1 || y.shape[1] != n_samples
        || (two && (x2.shape[1] != n_samples || zi2.shape[0] != n2 || zi2.shape[1] != order || y2.shape[0] != n2
                    || y2.shape[1] != n_samples))) {
        if (!PyErr_Occurred())
            PyErr_SetString(PyExc_ValueError, "linear: b and a (K+1,) with a[0] == 1 and 1 <= K <= 8, "
                                              "x and y (C, N), zi (C, K); x2, y2 (C2, N), zi2 (C2, K)");
        goto done;
    }
    xr = PyMem_Malloc(sizeof(double *) * 3 * (size_t)(n1 + n2 + 1));
    if (xr == NULL) {
        PyErr_NoMemory();
        goto done;
    }
    {
        double **yr = (double **)(xr + n1 + n2 + 1), **zr = yr + n1 + n2;
        for (Py_ssize_t i = 0; i < n1 + n2; i++) {
            int first = i < n1;
            Py_ssize_t r = first ? i : i - n1;
            xr[i] = (const double *)(first ? x.buf : x2.buf) + r * n_samples;
            yr[i] = (double *)(first ? y.buf : y2.buf) + r * n_samples;
            zr[i] = (double *)(first ? zi.buf : zi2.buf) + r * order;
        }
        const double *bs = b.buf, *as = a.buf;
        Py_BEGIN_ALLOW_THREADS
        linear_rows(bs, as, order, xr, yr, zr, n1 + n2, n_samples, square);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyMem_Free(xr);
    PyBuffer_Release(&y2);
    PyBuffer_Release(&zi2);
    PyBuffer_Release(&x2);
    PyBuffer_Release(&y);
    PyBuffer_Release(&zi);
    PyBuffer_Release(&x);
    PyBuffer_Release(&a);
    PyBuffer_Release(&b);
    return result;
}

/* The true-peak meter's loops around its matrix products (chainrun/dsp/fold.py says what they
 * compute; chainrun/meters/truepeak.py why).  float32 additions, subtractions and magnitudes, each
 * rounded once, as numpy's: the results are numpy's bits. */


/* The max of floats >= +0 (or NaN, with the sign cleared) is the max of their bit patterns as
 * unsigned integers, a reduction every vector unit has; a pattern above +inf's is a NaN. */
#define TP_INF_BITS 0x7f800000u

static double
tp_from_bits(uint32_t m)
{
    float f;
    if (m > TP_INF_BITS)
        return (double)NAN;
    memcpy(&f, &m, sizeof f);
    return (double)f;
}

VECTOR_LOOP static void
fold_loop(const float *zs, Py_ssize_t start, Py_ssize_t step, Py_ssize_t rows, Py_ssize_t half,
          float *restrict ss, float *restrict ds)
{
    Py_ssize_t span = 2 * half + 1;
    for (Py_ssize_t r = 0; r < rows; r++) {
        const float *x = zs + start + r * step, *back = x + span - 1;
        float *restrict sr = ss + r * (half + 1), *restrict dr = ds + r * half;
        for (Py_ssize_t i = 0; i < half; i++) {
            float a = x[i], b = back[-i];
            sr[i] = a + b;
            dr[i] = a - b;
        }
        sr[half] = x[half];
    }
}

VECTOR_LOOP static uint32_t
absmax_sum_loop(const float *restrict as, const float *restrict bs, Py_ssize_t n)
{
    uint32_t m = 0;
    for (Py_ssize_t i = 0; i < n; i++) {
        float t = fabsf(as[i]) + fabsf(bs[i]);
        uint32_t u;
        memcpy(&u, &t, sizeof u);
        m = u > m ? u : m;
    }
    return m;
}

/* The bits of max |z| over n float32 values (the bit patterns of non-negative floats order as they do);
 * inlined into the vector loops that need it. */
static inline __attribute__((always_inline)) uint32_t
absmax_bits(const float *restrict zs, Py_ssize_t n)
{
    uint32_t m = 0;
    for (Py_ssize_t i = 0; i < n; i++) {
        float t = fabsf(zs[i]);
        uint32_t u;
        memcpy(&u, &t, sizeof u);
        m = u > m ? u : m;
    }
    return m;
}

/* The peaks of the runs of `run` of n samples (the last run short, runs past the samples 0.0) into
 * runs[0 .. n_runs - 1]; returns the larger of `level` and all of them. */
VECTOR_LOOP static double
runs_loop(const float *zs, Py_ssize_t n, Py_ssize_t run, double *runs, Py_ssize_t n_runs, double level)
{
    for (Py_ssize_t k = 0; k < n_runs; k++) {
        Py_ssize_t r0 = run * k, r1 = r0 + run < n ? r0 + run : n;
        runs[k] = r1 > r0 ? tp_from_bits(absmax_bits(zs + r0, r1 - r0)) : 0.0;
        if (runs[k] > level)
            level = runs[k];
    }
    return level;
}

static int
get_floats(PyObject *obj, Py_buffer *view, int writable, const char *name)
{
    return get_array(obj, view, writable, -1, 4, "f", "float32", name);
}

static PyObject *
fold_rows(PyObject *self, PyObject *args)
{
    PyObject *o_z, *o_s, *o_d, *result = NULL;
    Py_ssize_t start, step;
    Py_buffer z = {0}, s = {0}, d = {0};
    if (!PyArg_ParseTuple(args, "OnnOO:fold_rows", &o_z, &start, &step, &o_s, &o_d))
        return NULL;
    if (get_floats(o_z, &z, 0, "z") < 0 || get_floats(o_s, &s, 1, "s") < 0 || get_floats(o_d, &d, 1, "d") < 0)
        goto done;
    if (z.ndim != 1 || s.ndim != 2 || d.ndim != 2 || s.shape[0] != d.shape[0] || s.shape[1] != d.shape[1] + 1
        || step < 1) {
        PyErr_SetString(PyExc_ValueError, "fold_rows: z (N,), s (R, H+1), d (R, H), step >= 1");
        goto done;
    }
    {
        Py_ssize_t rows = d.shape[0], half = d.shape[1], span = 2 * half + 1;
        if (rows > 0 && (start < 0 || start + (rows - 1) * step + span > z.shape[0])) {
            PyErr_SetString(PyExc_ValueError, "fold_rows: the rows run past the samples");
            goto done;
        }
        const float *zs = z.buf;
        float *ss = s.buf, *ds = d.buf;
        Py_BEGIN_ALLOW_THREADS
        fold_loop(zs, start, step, rows, half, ss, ds);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&d);
    PyBuffer_Release(&s);
    PyBuffer_Release(&z);
    return result;
}

static PyObject *
absmax_sum(PyObject *self, PyObject *args)
{
    PyObject *o_a, *o_b, *result = NULL;
    Py_buffer a = {0}, b = {0};
    if (!PyArg_ParseTuple(args, "OO:absmax_sum", &o_a, &o_b))
        return NULL;
    if (get_floats(o_a, &a, 0, "a") < 0 || get_floats(o_b, &b, 0, "b") < 0)
        goto done;
    if (a.len != b.len) {
        PyErr_SetString(PyExc_ValueError, "absmax_sum: a and b must hold as many values");
        goto done;
    }
    {
        const float *as = a.buf, *bs = b.buf;
        uint32_t m;
        Py_BEGIN_ALLOW_THREADS
        m = absmax_sum_loop(as, bs, a.len / 4);
        Py_END_ALLOW_THREADS
        result = PyFloat_FromDouble(tp_from_bits(m));
    }
done:
    PyBuffer_Release(&b);
    PyBuffer_Release(&a);
    return result;
}

static PyObject *
absmax_runs(PyObject *self, PyObject *args)
{
    PyObject *o_z, *o_out, *result = NULL;
    Py_ssize_t run;
    Py_buffer z = {0}, out = {0};
    if (!PyArg_ParseTuple(args, "OnO:absmax_runs", &o_z, &run, &o_out))
        return NULL;
    if (get_floats(o_z, &z, 0, "z") < 0 || get_doubles(o_out, &out, 1, 1, "out") < 0)
        goto done;
    if (run < 1 || out.len / 8 != (z.len / 4 + run - 1) / run) {
        PyErr_SetString(PyExc_ValueError, "absmax_runs: z float32 (N,), run >= 1, out float64 (ceil(N/run),)");
        goto done;
    }
    {
        const float *zs = z.buf;
        double *os = out.buf;
        Py_ssize_t n = z.len / 4;
        Py_BEGIN_ALLOW_THREADS
        runs_loop(zs, n, run, os, (n + run - 1) / run, 0.0);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&out);
    PyBuffer_Release(&z);
    return result;
}

/* The true-peak meter's prescreen of the rows of one product (chainrun/meters/truepeak.py, _screened;
 * chainrun/dsp/fold.py holds the numpy form, which gives the same results).  z: float32 samples,
 * the product's R rows of 69 from `start` on (R*32 + 37 of them).  Per row r, X = the peak |z| of
 * runs r, r+1 and r+2 of 32 samples (its 69 samples lie in them), and for each of its 32 instants
 * j the value of the 8 taps of branch 2 nearest to it,
 *     c_j = sum over k of centre[k][j] * z[32r + j + 15 + k]
 * (float32 products and sums, k in order, from 0); P2b = max |c_j| + tail * X bounds every
 * branch-2 value the products would compute (`tail`: the other taps' L1 norm plus the allowances
 * for rounding).  The level is the larger of `level` and every run peak of the product.  A row is
 * a candidate when P2b * one_tiny or (0.5 * (X * one_eps + P2b) + l13_eps * X) * one_tiny
 * (screen_picked's bound of branches 1 and 3, with P2b for P2) passes the level; its folded
 * samples go to s and d (as fold_rows), its X to xs and its index to rows, the candidates packed
 * in order.  Returns (level, number of candidates).  Float32 and double operations in this order,
 * each rounded once. */
#define PRESCREEN_TAPS 8
typedef float lanes16f_t __attribute__((vector_size(64)));

/* max |c_j| over a row's 32 instants: c_j in float32, the taps in order (two vectors of 16 instants) */
static inline __attribute__((always_inline)) double
prescreen_peak(const float *restrict x, const float *restrict centre)
{
    lanes16f_t a0 = {0}, a1 = {0}, v, c;
    for (int k = 0; k < PRESCREEN_TAPS; k++) {
        memcpy(&c, centre + 32 * k, sizeof c);
        memcpy(&v, x + 15 + k, sizeof v);
        a0 += c * v;
        memcpy(&c, centre + 32 * k + 16, sizeof c);
        memcpy(&v, x + 31 + k, sizeof v);
        a1 += c * v;
    }
    float t[32];
    memcpy(t, &a0, sizeof a0);
    memcpy(t + 16, &a1, sizeof a1);
    return tp_from_bits(absmax_bits(t, 32));
}


/* The prescreen's loop over the rows (see prescreen_rows below); returns the number of candidates. */
VECTOR_LOOP static Py_ssize_t
prescreen_loop(const float *zs, Py_ssize_t n_rows, const double *runs, const float *centre, double tail,
               double one_eps, double l13_eps, double one_tiny, double level, float *ss, float *ds,
               double *xo, int64_t *out)
{
    Py_ssize_t n = 0;
    for (Py_ssize_t r = 0; r < n_rows; r++) {
        double x = runs[r];
        if (runs[r + 1] > x)
            x = runs[r + 1];
        if (runs[r + 2] > x)
            x = runs[r + 2];
        double p2b = prescreen_peak(zs + 32 * r, centre) + tail * x;
        double b13 = (0.5 * (x * one_eps + p2b) + l13_eps * x) * one_tiny;
        if (p2b * one_tiny > level || b13 > level) {
            fold_loop(zs, 32 * r, 32, 1, 34, ss + 35 * n, ds + 34 * n);
            xo[n] = x;
            out[n++] = r;
        }
    }
    return n;
}

static PyObject *
prescreen_rows(PyObject *self, PyObject *args)
{
    PyObject *o_z, *o_c, *o_s, *o_d, *o_x, *o_rows, *result = NULL;
    Py_ssize_t start, n_rows;
    double tail, one_eps, l13_eps, one_tiny, level;
    Py_buffer z = {0}, c = {0}, s = {0}, d = {0}, xs = {0}, rows = {0};
    if (!PyArg_ParseTuple(args, "OnnOdddddOOOO:prescreen_rows", &o_z, &start, &n_rows, &o_c, &tail, &one_eps,
                          &l13_eps, &one_tiny, &level, &o_s, &o_d, &o_x, &o_rows))
        return NULL;
    if (get_floats(o_z, &z, 0, "z") < 0 || get_floats(o_c, &c, 0, "centre") < 0
        || get_floats(o_s, &s, 1, "s") < 0 || get_floats(o_d, &d, 1, "d") < 0
        || get_doubles(o_x, &xs, 1, 1, "xs") < 0 || get_array(o_rows, &rows, 1, 1, 8, "ql", "int64", "rows") < 0)
        goto done;
    if (z.ndim != 1 || n_rows < 0 || start < 0 || start + 32 * n_rows + 37 > z.shape[0]
        || c.ndim != 2 || c.shape[0] != PRESCREEN_TAPS || c.shape[1] != 32 || s.ndim != 2 || d.ndim != 2
        || s.shape[1] != 35 || d.shape[1] != 34 || s.shape[0] < n_rows || d.shape[0] < n_rows
        || xs.shape[0] < n_rows || rows.shape[0] < n_rows) {
        PyErr_SetString(PyExc_ValueError, "prescreen_rows: z float32 holding start + 32R + 37 samples, "
                                          "centre float32 (8, 32), s (>= R, 35), d (>= R, 34), xs (>= R,), "
                                          "rows (>= R,)");
        goto done;
    }
    {
        const float *zs = (const float *)z.buf + start;
        const float *cs = c.buf;
        float *ss = s.buf, *ds = d.buf;
        double *xo = xs.buf;
        int64_t *out = rows.buf;
        Py_ssize_t n = 0, n_runs = n_rows + 2, n_z = 32 * n_rows + 37;
        double *runs = PyMem_RawMalloc((size_t)(n_runs > 0 ? n_runs : 1) * sizeof(double));
        if (runs == NULL) {
            PyErr_NoMemory();
            goto done;
        }
        Py_BEGIN_ALLOW_THREADS
        level = runs_loop(zs, n_z, 32, runs, n_runs, level);
        n = prescreen_loop(zs, n_rows, runs, cs, tail, one_eps, l13_eps, one_tiny, level, ss, ds, xo, out);
        Py_END_ALLOW_THREADS
        PyMem_RawFree(runs);
        result = Py_BuildValue("(dn)", level, n);
    }
done:
    PyBuffer_Release(&rows);
    PyBuffer_Release(&xs);
    PyBuffer_Release(&d);
    PyBuffer_Release(&s);
    PyBuffer_Release(&c);
    PyBuffer_Release(&z);
    return result;
}

/* The screen of the prescreen's candidates (chainrun/dsp/fold.py screen_picked): a2, b2 float32 (N, Q),
 * their folded branch-2 products, xs (N,) their X.  Per row, P2 = max(|a2| + |b2|) over its Q values
 * (float32); the level is raised to the largest P2; a row is kept when
 * (0.5 * (X * one_eps + P2) + l13_eps * X) * one_tiny passes it.  Returns (max P2, number kept); the
 * kept rows' indices (into the N) go to rows, in order.  Double operations in this order. */
static PyObject *
screen_picked(PyObject *self, PyObject *args)
{
    PyObject *o_a, *o_b, *o_x, *o_rows, *result = NULL;
    double one_eps, l13_eps, one_tiny, level;
    Py_buffer a = {0}, b = {0}, xs = {0}, rows = {0};
    if (!PyArg_ParseTuple(args, "OOOddddO:screen_picked", &o_a, &o_b, &o_x, &one_eps, &l13_eps, &one_tiny,
                          &level, &o_rows))
        return NULL;
    if (get_floats(o_a, &a, 0, "a2") < 0 || get_floats(o_b, &b, 0, "b2") < 0
        || get_doubles(o_x, &xs, 0, 1, "xs") < 0 || get_array(o_rows, &rows, 1, 1, 8, "ql", "int64", "rows") < 0)
        goto done;
    Py_ssize_t n_rows = a.ndim == 2 ? a.shape[0] : -1, q = a.ndim == 2 ? a.shape[1] : 0;
    if (a.ndim != 2 || b.ndim != 2 || b.shape[0] != n_rows || b.shape[1] != q || q < 1
        || xs.shape[0] != n_rows || rows.shape[0] < n_rows) {
        PyErr_SetString(PyExc_ValueError, "screen_picked: a2, b2 float32 (N, Q); xs (N,); rows int64 (>= N,)");
        goto done;
    }
    {
        const float *as = a.buf, *bs = b.buf;
        const double *x = xs.buf;
        int64_t *out = rows.buf;
        Py_ssize_t kept = 0;
        double p2max = 0.0;
        double *p2 = PyMem_RawMalloc((size_t)(n_rows > 0 ? n_rows : 1) * sizeof(double));
        if (p2 == NULL) {
            PyErr_NoMemory();
            goto done;
        }
        Py_BEGIN_ALLOW_THREADS
        for (Py_ssize_t r = 0; r < n_rows; r++) {
            p2[r] = tp_from_bits(absmax_sum_loop(as + r * q, bs + r * q, q));
            if (p2[r] > p2max)
                p2max = p2[r];
        }
        if (p2max > level)
            level = p2max;
        for (Py_ssize_t r = 0; r < n_rows; r++) {
            double bound = (0.5 * (x[r] * one_eps + p2[r]) + l13_eps * x[r]) * one_tiny;
            if (bound > level)
                out[kept++] = r;
        }
        Py_END_ALLOW_THREADS
        PyMem_RawFree(p2);
        result = Py_BuildValue("(dn)", p2max, kept);
    }
done:
    PyBuffer_Release(&rows);
    PyBuffer_Release(&xs);
    PyBuffer_Release(&b);
    PyBuffer_Release(&a);
    return result;
}

/* PCM_24 packing and unpacking (chainrun/audio/quantise.py Quantiser.packed24 and
 * chainrun/audio/reader.py unpack24 hold the numpy forms, which give the same bytes).
 *
 * pack24_row quantises ONE channel row as Quantiser._round does, in its order: v = y*scale; with
 * dither v += r0, then v -= r1 (each one double operation, rounded once); v = rint(v), which under
 * the default rounding mode rounds half to even (IEEE 754 roundTiesToEven), as numpy.rint; then,
 * unless the caller knows no code can leave the range ("safe"), the codes beyond [lo, hi] are
 * counted (leaving out those marked in `counted`) and clipped.  The three low bytes of each code go
 * to out[offset + i*stride + 0, 1, 2], low byte first (or high byte first for AIFF).  A row holding
 * a NaN or an infinity is reported (-1) and not finished: the numpy form then does the whole row.
 *
 * unpack24_rows reads interleaved little-endian 3-byte samples as numpy's unpack24 does: the three
 * bytes in the top of an int32, times 2**-31 (exactly code / 2**23; every step is exact). */

/* Codes are made a chunk at a time into an int32 buffer by a loop that vectorises (each lane does
 * the scalar operations: rint is vroundsd/vroundpd in the current rounding mode, the compares and
 * clamps exact), then stored as one 16-bit and one 8-bit write per sample. */
#define PACK24_CHUNK 1024

VECTOR_LOOP static Py_ssize_t
pack24_codes(const double *restrict y, Py_ssize_t n, double scale, const double *restrict r,
             Py_ssize_t r_step, const unsigned char *restrict counted, int safe, double lo, double hi,
             int32_t *restrict codes, int *restrict nonfinite)
{
    Py_ssize_t count = 0;
    int bad = 0;
    for (Py_ssize_t i = 0; i < n; i++) {
        double v = y[i] * scale;
        if (r != NULL) {
            v += r[i * r_step];
            v -= r[i * r_step + 1];
        }
        v = rint(v);
        bad |= !(fabs(v) <= DBL_MAX);                           /* NaN or an infinity */
        if (!safe) {
            int outside = (v > hi) | (v < lo);
            if (counted != NULL)
                outside &= !counted[i];
            count += outside;
        }
        /* Clipped into [lo, hi]; without the search ("safe") every value is in range already, so
         * this changes nothing there and only keeps the conversion defined.  A NaN (its row is
         * redone by numpy) converts as 0. */
        v = v > hi ? hi : v;
        v = v < lo ? lo : v;
        v = v == v ? v : 0.0;
        codes[i] = (int32_t)v;
    }
    *nonfinite |= bad;
    return count;
}

static void
pack24_store(const int32_t *codes, Py_ssize_t n, unsigned char *out, Py_ssize_t stride, int big_endian)
{
    int p0 = big_endian ? 2 : 0, p2 = big_endian ? 0 : 2;
    if (!big_endian) {                                           /* a loop of its own, so the stores merge */
        for (Py_ssize_t i = 0; i < n; i++, out += stride) {
            uint32_t u = (uint32_t)codes[i];
            out[0] = (unsigned char)(u & 0xffu);
            out[1] = (unsigned char)((u >> 8) & 0xffu);
            out[2] = (unsigned char)((u >> 16) & 0xffu);
        }
        return;
    }
    for (Py_ssize_t i = 0; i < n; i++, out += stride) {
        uint32_t u = (uint32_t)codes[i];
        out[p0] = (unsigned char)(u & 0xffu);
        out[1] = (unsigned char)((u >> 8) & 0xffu);
        out[p2] = (unsigned char)((u >> 16) & 0xffu);
    }
}

static Py_ssize_t
pack24_loop(const double *y, Py_ssize_t n, double scale, const double *r, Py_ssize_t r_step,
            const unsigned char *counted, int safe, double lo, double hi, unsigned char *out,
            Py_ssize_t stride, int big_endian, int *nonfinite)
{
    int32_t codes[PACK24_CHUNK];
    Py_ssize_t count = 0;
    *nonfinite = 0;
    for (Py_ssize_t i0 = 0; i0 < n; i0 += PACK24_CHUNK) {
        Py_ssize_t m = n - i0 < PACK24_CHUNK ? n - i0 : PACK24_CHUNK;
        count += pack24_codes(y + i0, m, scale, r == NULL ? NULL : r + i0 * r_step, r_step,
                              counted == NULL ? NULL : counted + i0, safe, lo, hi, codes, nonfinite);
        if (*nonfinite)
            return 0;
        pack24_store(codes, m, out + i0 * stride, stride, big_endian);
    }
    return count;
}

static int
get_bytes(PyObject *obj, Py_buffer *view, int writable, const char *format, const char *name)
{
    return get_array(obj, view, writable, 1, 1, format, format[0] == '?' ? "bool" : "uint8", name);
}

static PyObject *
pack24_row(PyObject *self, PyObject *args)
{
    PyObject *o_y, *o_r, *o_counted, *o_out, *result = NULL;
    double scale, lo, hi;
    Py_ssize_t channel, offset, stride;
    int safe, big_endian;
    Py_buffer y = {0}, r = {0}, counted = {0}, out = {0};
    if (!PyArg_ParseTuple(args, "OdOnOpddOnnp:pack24_row", &o_y, &scale, &o_r, &channel, &o_counted, &safe,
                          &lo, &hi, &o_out, &offset, &stride, &big_endian))
        return NULL;
    if (get_doubles(o_y, &y, 0, 1, "y") < 0 || get_bytes(o_out, &out, 1, "B", "out") < 0
        || (o_r != Py_None && get_doubles(o_r, &r, 0, 3, "r") < 0)
        || (o_counted != Py_None && get_bytes(o_counted, &counted, 0, "?", "counted") < 0))
        goto done;
    {
        Py_ssize_t n = y.shape[0];
        if ((o_r != Py_None && (r.shape[0] != n || r.shape[2] != 2 || channel < 0 || channel >= r.shape[1]))
            || (o_counted != Py_None && counted.shape[0] != n) || offset < 0 || stride < 3
            || (n > 0 && offset + (n - 1) * stride + 3 > out.shape[0])) {
            PyErr_SetString(PyExc_ValueError, "pack24_row: y (N,), r (N, C, 2) with 0 <= channel < C, counted (N,), "
                                              "stride >= 3 and the samples inside out");
            goto done;
        }
        const double *ys = y.buf;
        const double *rs = o_r != Py_None ? (const double *)r.buf + 2 * channel : NULL;
        Py_ssize_t r_step = o_r != Py_None ? 2 * r.shape[1] : 0;
        const unsigned char *cs = o_counted != Py_None ? counted.buf : NULL;
        unsigned char *os = (unsigned char *)out.buf + offset;
        Py_ssize_t count;
        int nonfinite;
        Py_BEGIN_ALLOW_THREADS
        count = pack24_loop(ys, n, scale, rs, r_step, cs, safe, lo, hi, os, stride, big_endian, &nonfinite);
        Py_END_ALLOW_THREADS
        result = PyLong_FromSsize_t(nonfinite ? -1 : count);
    }
done:
    PyBuffer_Release(&out);
    PyBuffer_Release(&counted);
    PyBuffer_Release(&r);
    PyBuffer_Release(&y);
    return result;
}

VECTOR_LOOP static void
unpack24_loop(const unsigned char *restrict raw, Py_ssize_t frames, Py_ssize_t channels,
              double *restrict out, Py_ssize_t width, double *restrict ext)
{
    for (Py_ssize_t c = 0; c < channels; c++) {
        const unsigned char *b = raw + 3 * c;
        double *o = out + c * width;
        Py_ssize_t step = 3 * channels;
        int32_t hi = INT32_MIN, lo = INT32_MAX;                 /* the row's largest and smallest code << 8 */
        for (Py_ssize_t i = 0; i < frames; i++) {
            const unsigned char *s = b + i * step;
#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__
            uint32_t u;                                         /* four bytes: the caller keeps one past the end */
            memcpy(&u, s, sizeof u);
            u <<= 8;
#else
            uint32_t u = ((uint32_t)s[0] << 8) | ((uint32_t)s[1] << 16) | ((uint32_t)s[2] << 24);
#endif
            int32_t shifted;
            memcpy(&shifted, &u, sizeof shifted);               /* code << 8, two's complement */
            o[i] = (double)shifted * 0x1p-31;
            hi = shifted > hi ? shifted : hi;
            lo = shifted < lo ? shifted : lo;
        }
        if (ext != NULL && frames > 0) {                        /* the same values as the row's max and min */
            ext[c] = (double)hi * 0x1p-31;
            ext[channels + c] = (double)lo * 0x1p-31;
        }
    }
}

static PyObject *
unpack24_rows(PyObject *self, PyObject *args)
{
    PyObject *o_raw, *o_out, *o_ext = Py_None, *result = NULL;
    Py_ssize_t frames, channels;
    Py_buffer raw = {0}, out = {0}, ext = {0};
    if (!PyArg_ParseTuple(args, "OnnO|O:unpack24_rows", &o_raw, &frames, &channels, &o_out, &o_ext))
        return NULL;
    if (get_bytes(o_raw, &raw, 0, "B", "raw") < 0 || get_doubles(o_out, &out, 1, 2, "out") < 0
        || (o_ext != Py_None && get_doubles(o_ext, &ext, 1, 2, "extremes") < 0))
        goto done;
    if (frames < 0 || channels < 1 || out.shape[0] != channels || out.shape[1] < frames
        || raw.shape[0] < 3 * frames * channels + 1
        || (o_ext != Py_None && (ext.shape[0] != 2 || ext.shape[1] != channels))) {
        PyErr_SetString(PyExc_ValueError, "unpack24_rows: raw (> 3*frames*channels,) uint8, out (channels, >= frames), "
                                          "extremes (2, channels)");
        goto done;
    }
    {
        const unsigned char *rs = raw.buf;
        double *os = out.buf, *es = o_ext != Py_None ? ext.buf : NULL;
        Py_ssize_t width = out.shape[1];
        Py_BEGIN_ALLOW_THREADS
        unpack24_loop(rs, frames, channels, os, width, es);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&ext);
    PyBuffer_Release(&out);
    PyBuffer_Release(&raw);
    return result;
}

/* The RMS meter's sums (chainrun/dsp/sums.py holds the numpy form, which gives the same bits): of a
 * float64 row, the sum and the sum of squares, each in 32 running sums (sample i into sum i mod 32,
 * in order, starting from the first 32 samples), combined pairwise (sum 2k with sum 2k+1, level by
 * level), then the last n mod 32 samples added in order; every square x*x rounded once.  One pass;
 * the running sums sit in vector lanes, each lane its own, so nothing is reordered, and 32 of them
 * keep the adders busy where 8 would wait on each other. */
#define SUMS_LANES 32

VECTOR_LOOP static void
sums32_loop(const double *restrict x, Py_ssize_t n, double *restrict out)
{
    double a[SUMS_LANES] = {0}, q[SUMS_LANES] = {0};
    Py_ssize_t m = n - n % SUMS_LANES;
    if (m) {
        for (int j = 0; j < SUMS_LANES; j++) {
            a[j] = x[j];
            q[j] = x[j] * x[j];
        }
        for (Py_ssize_t i = SUMS_LANES; i < m; i += SUMS_LANES)
            for (int j = 0; j < SUMS_LANES; j++) {
                a[j] += x[i + j];
                q[j] += x[i + j] * x[i + j];
            }
    }
    for (int w = SUMS_LANES / 2; w >= 1; w /= 2)
        for (int j = 0; j < w; j++) {
            a[j] = a[2 * j] + a[2 * j + 1];
            q[j] = q[2 * j] + q[2 * j + 1];
        }
    double s1 = a[0], s2 = q[0];
    for (Py_ssize_t i = m; i < n; i++) {
        s1 += x[i];
        s2 += x[i] * x[i];
    }
    out[0] = s1;
    out[1] = s2;
}

static PyObject *
row_sums(PyObject *self, PyObject *args)
{
    PyObject *o_x, *result = NULL;
    Py_buffer x = {0};
    if (!PyArg_ParseTuple(args, "O:row_sums", &o_x))
        return NULL;
    if (get_doubles(o_x, &x, 0, 1, "x") < 0)
        return NULL;
    double out[2];
    const double *xs = x.buf;
    Py_ssize_t n = x.shape[0];
    Py_BEGIN_ALLOW_THREADS
    sums32_loop(xs, n, out);
    Py_END_ALLOW_THREADS
    result = Py_BuildValue("(dd)", out[0], out[1]);
    PyBuffer_Release(&x);
    return result;
}

/* The loudness meter's 10 ms sub-block sums (chainrun/dsp/sums.py segment_sums): numpy's
 * add.reduceat along the rows, bit for bit.  numpy starts a segment's result with its first value
 * and adds the pairwise sum of the others (its loops_utils.h.src): fewer than 8 values added in
 * order to -0.0; up to 128 in 8 running sums (value i into sum i mod 8), combined as
 * ((r0 + r1) + (r2 + r3)) + ((r4 + r5) + (r6 + r7)), then the last n mod 8 added in order; more
 * than 128 split at n/2 rounded down to a multiple of 8, each part summed so and the two added.
 * The 8 running sums sit in the lanes of one vector, each lane its own, so nothing is reordered. */
typedef double lanes8_t __attribute__((vector_size(64)));

VECTOR_LOOP static double
pairwise_sum(const double *a, Py_ssize_t n)
{
    if (n < 8) {
        double res = -0.0;
        for (Py_ssize_t i = 0; i < n; i++)
            res += a[i];
        return res;
    }
    if (n > 128) {
        Py_ssize_t n2 = n / 2;
        n2 -= n2 % 8;
        return pairwise_sum(a, n2) + pairwise_sum(a + n2, n - n2);
    }
    lanes8_t r, v;
    memcpy(&r, a, sizeof r);
    Py_ssize_t i = 8, m = n - n % 8;
    for (; i < m; i += 8) {
        memcpy(&v, a + i, sizeof v);
        r += v;
    }
    double res = ((r[0] + r[1]) + (r[2] + r[3])) + ((r[4] + r[5]) + (r[6] + r[7]));
    for (; i < n; i++)
        res += a[i];
    return res;
}

static PyObject *
segment_sums(PyObject *self, PyObject *args)
{
    PyObject *o_x, *o_starts, *o_out, *result = NULL;
    Py_ssize_t stop;
    Py_buffer x = {0}, starts = {0}, out = {0};
    if (!PyArg_ParseTuple(args, "OOnO:segment_sums", &o_x, &o_starts, &stop, &o_out))
        return NULL;
    if (get_doubles(o_x, &x, 0, 2, "x") < 0 || get_array(o_starts, &starts, 0, 1, 8, "qlL", "int64", "starts") < 0
        || get_doubles(o_out, &out, 1, 2, "out") < 0)
        goto done;
    {
        Py_ssize_t rows = x.shape[0], width = x.shape[1], k = starts.shape[0];
        const int64_t *st = starts.buf;
        int ok = k >= 1 && stop >= 1 && stop <= width && out.shape[0] == rows && out.shape[1] == k;
        for (Py_ssize_t i = 0; ok && i < k; i++)
            ok = st[i] >= 0 && st[i] < stop;
        if (!ok) {
            PyErr_SetString(PyExc_ValueError, "segment_sums: x (R, N), 1 <= stop <= N, starts (K,) each in "
                                              "[0, stop), out (R, K)");
            goto done;
        }
        const double *xs = x.buf;
        double *os = out.buf;
        Py_BEGIN_ALLOW_THREADS
        for (Py_ssize_t r = 0; r < rows; r++) {
            const double *row = xs + r * width;
            for (Py_ssize_t i = 0; i < k; i++) {
                Py_ssize_t a = st[i], b = i + 1 < k ? st[i + 1] : stop;
                double v = row[a];                      /* numpy: an empty segment gives its first value */
                if (b - a > 1)
                    v += pairwise_sum(row + a + 1, b - a - 1);
                os[r * k + i] = v;
            }
        }
        Py_END_ALLOW_THREADS
        Py_INCREF(Py_None);
        result = Py_None;
    }
done:
    PyBuffer_Release(&out);
    PyBuffer_Release(&starts);
    PyBuffer_Release(&x);
    return result;
}

/* The per-channel extremes of a block (chainrun/dsp/sums.py row_extremes): of each float64 row, its
 * max and min in one pass instead of numpy's two (x.max(axis=1), x.min(axis=1)), the same values:
 * NaN for both when the row holds a NaN, as numpy's.  Only a zero extreme may come with the other
 * sign of zero than numpy's (numpy's own SIMD loops do not promise one); chainrun compares the
 * extremes and takes magnitudes, never their sign of zero. */
typedef long long lanes8_mask_t __attribute__((vector_size(64)));

static inline lanes8_t
select8(lanes8_mask_t m, lanes8_t a, lanes8_t b)              /* a where m, else b */
{
    lanes8_mask_t ai, bi;
    memcpy(&ai, &a, sizeof ai);
    memcpy(&bi, &b, sizeof bi);
    ai = (m & ai) | (~m & bi);
    memcpy(&a, &ai, sizeof a);
    return a;
}

VECTOR_LOOP static void
extremes_loop(const double *restrict x, Py_ssize_t n, double *restrict hi, double *restrict lo)
{
    double h = x[0], l = x[0];
    int nan = x[0] != x[0];
    Py_ssize_t m = n - n % 32;
    if (m) {                                /* four vectors of 8 running extremes: none waits on another */
        lanes8_t mx[4], mn[4], v;
        lanes8_mask_t bad[4];
        for (int k = 0; k < 4; k++) {
            memcpy(&mx[k], x + 8 * k, sizeof v);
            mn[k] = mx[k];
            bad[k] = mx[k] != mx[k];
        }
        for (Py_ssize_t i = 32; i < m; i += 32)
            for (int k = 0; k < 4; k++) {
                memcpy(&v, x + i + 8 * k, sizeof v);
                mx[k] = select8(v > mx[k], v, mx[k]);
                mn[k] = select8(v < mn[k], v, mn[k]);
                bad[k] |= v != v;
            }
        for (int k = 0; k < 4; k++)
            for (int j = 0; j < 8; j++) {
                h = mx[k][j] > h ? mx[k][j] : h;
                l = mn[k][j] < l ? mn[k][j] : l;
                nan |= bad[k][j] != 0;
            }
    }
    for (Py_ssize_t i = m; i < n; i++) {
        h = x[i] > h ? x[i] : h;
        l = x[i] < l ? x[i] : l;
        nan |= x[i] != x[i];
    }
    *hi = nan ? NAN : h;
    *lo = nan ? NAN : l;
}

static PyObject *
row_extremes(PyObject *self, PyObject *args)
{
    PyObject *o_x, *o_hi, *o_lo, *result = NULL;
    Py_buffer x = {0}, hi = {0}, lo = {0};
    if (!PyArg_ParseTuple(args, "OOO:row_extremes", &o_x, &o_hi, &o_lo))
        return NULL;
    if (get_doubles(o_x, &x, 0, 2, "x") < 0 || get_doubles(o_hi, &hi, 1, 1, "hi") < 0
        || get_doubles(o_lo, &lo, 1, 1, "lo") < 0)
        goto done;
    if (x.shape[1] < 1 || hi.shape[0] != x.shape[0] || lo.shape[0] != x.shape[0]) {
        PyErr_SetString(PyExc_ValueError, "row_extremes: x (R, N) with N >= 1, hi and lo (R,)");
        goto done;
    }
    {
        const double *xs = x.buf;
        double *hs = hi.buf, *ls = lo.buf;
        Py_ssize_t rows = x.shape[0], n = x.shape[1];
        Py_BEGIN_ALLOW_THREADS
        for (Py_ssize_t r = 0; r < rows; r++)
            extremes_loop(xs + r * n, n, hs + r, ls + r);
        Py_END_ALLOW_THREADS
        Py_INCREF(Py_None);
        result = Py_None;
    }
done:
    PyBuffer_Release(&lo);
    PyBuffer_Release(&hi);
    PyBuffer_Release(&x);
    return result;
}

static PyMethodDef methods[] = {
    {"cascade", cascade, METH_VARARGS,
     "cascade(sos, x, zi, y): filter x (C, N) through sos (S, 6) into y, updating zi (C, S, 2) in place;\n"
     "C-contiguous float64 buffers; the same arithmetic as scipy.signal.sosfilt."},
    {"linear", linear, METH_VARARGS,
     "linear(b, a, x, zi, y[, square[, x2, zi2, y2]]): filter x (C, N) through b/a (K+1,), a[0] == 1, into y,\n"
     "updating zi (C, K) in place; C-contiguous float64 buffers; the same arithmetic as scipy.signal.lfilter.\n"
     "With square true, y holds the squares of the output (each y*y, rounded once).  With x2, zi2, y2\n"
     "(C2 rows of the same N), those rows are filtered too, in the same pass (four rows side by side)."},
    {"fold_rows", fold_rows, METH_VARARGS,
     "fold_rows(z, start, step, s, d): sums and differences of mirrored samples of the rows of z\n"
     "(float32) that start at start + r*step; see chainrun/dsp/fold.py."},
    {"absmax_sum", absmax_sum, METH_VARARGS,
     "absmax_sum(a, b) -> max(|a| + |b|) over two float32 buffers of one length (NaN if any is NaN)."},
    {"absmax_runs", absmax_runs, METH_VARARGS,
     "absmax_runs(z, run, out): out[k] = max |z| over z[k*run : (k+1)*run] (float32 in, float64 out)."},
    {"row_sums", row_sums, METH_VARARGS,
     "row_sums(x) -> (sum, sum of squares) of a float64 row, in 32 running sums (see chainrun/dsp/sums.py)."},
    {"row_extremes", row_extremes, METH_VARARGS,
     "row_extremes(x, hi, lo): hi[r], lo[r] = max and min of row r of x (R, N >= 1), float64, in one pass\n"
     "(NaN for both when the row holds one); see chainrun/dsp/sums.py."},
    {"segment_sums", segment_sums, METH_VARARGS,
     "segment_sums(x, starts, stop, out): out (R, K) = numpy.add.reduceat(x[:, :stop], starts, axis=1), the same\n"
     "bits (x (R, N) float64, starts (K,) int64); see chainrun/dsp/sums.py."},
    {"prescreen_rows", prescreen_rows, METH_VARARGS,
     "prescreen_rows(z, start, R, centre, tail, one_eps, l13_eps, one_tiny, level, s, d, xs, rows) -> (level, n):\n"
     "the true-peak meter's prescreen of one product's rows (see chainrun/dsp/fold.py)."},
    {"screen_picked", screen_picked, METH_VARARGS,
     "screen_picked(a2, b2, xs, one_eps, l13_eps, one_tiny, level, rows) -> (max P2, kept): the screen of the\n"
     "prescreen's candidates (see chainrun/dsp/fold.py)."},
    {"pack24_row", pack24_row, METH_VARARGS,
     "pack24_row(y, scale, r, channel, counted, safe, lo, hi, out, offset, stride, big_endian) -> count:\n"
     "quantise one float64 row (dither r[:, channel] or None, rint, clip to [lo, hi] unless safe) into\n"
     "3-byte codes at out[offset::stride]; the count of clipped samples not in counted, or -1 for a\n"
     "row holding NaN or infinity (left unfinished); see chainrun/audio/quantise.py."},
    {"unpack24_rows", unpack24_rows, METH_VARARGS,
     "unpack24_rows(raw, frames, channels, out[, extremes]): packed little-endian 3-byte interleaved samples\n"
     "into out[:, :frames] (float64, channels x width) as code / 2**23, and with extremes (float64, 2 x\n"
     "channels; frames >= 1) each row's max and min into its two rows; see chainrun/audio/reader.py."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {
    PyModuleDef_HEAD_INIT, "_cascade",
    "chainrun's optional compiled biquad cascade (see chainrun/dsp/compiled.py).", -1, methods,
};

PyMODINIT_FUNC
PyInit__cascade(void)
{
    PyObject *m = PyModule_Create(&module);
    if (m == NULL)
        return NULL;
    if (PyModule_AddIntConstant(m, "ABI", CASCADE_ABI) < 0
        || PyModule_AddStringConstant(m, "SOURCE_DIGEST", CASCADE_SOURCE_DIGEST) < 0
        || PyModule_AddIntConstant(m, "PAIRED", CASCADE_HAVE_PAIR) < 0) {
        Py_DECREF(m);
        return NULL;
    }
    return m;
}
