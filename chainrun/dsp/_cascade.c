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
 * Three small float32 loops serve the true-peak meter around its matrix products (fold_rows,
 * absmax_sum, absmax_runs; chainrun/dsp/fold.py holds their numpy forms, which give the same bits).
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
#define CASCADE_ABI 5

#ifndef CASCADE_SOURCE_DIGEST
#define CASCADE_SOURCE_DIGEST ""
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
#else
#define CASCADE_HAVE_PAIR 0
#endif

static int
get_doubles(PyObject *obj, Py_buffer *view, int writable, int ndim, const char *name)
{
    int flags = PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | (writable ? PyBUF_WRITABLE : 0);
    if (PyObject_GetBuffer(obj, view, flags) < 0)
        return -1;
    if (view->ndim != ndim || view->itemsize != 8 || view->format == NULL
        || !(strcmp(view->format, "d") == 0 || strcmp(view->format, "=d") == 0)) {   /* native order */
        PyErr_Format(PyExc_TypeError, "cascade: %s must be a C-contiguous %d-d float64 array", name, ndim);
        PyBuffer_Release(view);
        return -1;
    }
    return 0;
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
        if (n_sections <= PAIR_MAX_SECTIONS) {
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

static void
linear_one(const double *b, const double *a, Py_ssize_t order, const double *x, double *y,
           Py_ssize_t n_samples, double *z, int square)
{
    for (Py_ssize_t n = 0; n < n_samples; n++) {
        double xn = x[n];
        double yn = z[0] + b[0] * xn;
        for (Py_ssize_t k = 0; k < order - 1; k++)
            z[k] = z[k + 1] + xn * b[k + 1] - yn * a[k + 1];
        z[order - 1] = xn * b[order] - yn * a[order];
        y[n] = square ? yn * yn : yn;
    }
}

#if CASCADE_HAVE_PAIR
static void
linear_pair(const double *b, const double *a, Py_ssize_t order, const double *x0, const double *x1,
            double *y0, double *y1, Py_ssize_t n_samples, double *zi0, double *zi1, int square)
{
    pair_t bb[LINEAR_MAX_ORDER + 1], aa[LINEAR_MAX_ORDER + 1], z[LINEAR_MAX_ORDER];
    for (Py_ssize_t k = 0; k <= order; k++) {
        bb[k] = (pair_t){b[k], b[k]};
        aa[k] = (pair_t){a[k], a[k]};
    }
    for (Py_ssize_t k = 0; k < order; k++)
        z[k] = (pair_t){zi0[k], zi1[k]};
    for (Py_ssize_t n = 0; n < n_samples; n++) {
        pair_t xn = {x0[n], x1[n]};
        pair_t yn = z[0] + bb[0] * xn;
        for (Py_ssize_t k = 0; k < order - 1; k++)
            z[k] = z[k + 1] + xn * bb[k + 1] - yn * aa[k + 1];
        z[order - 1] = xn * bb[order] - yn * aa[order];
        if (square)
            yn = yn * yn;
        y0[n] = yn[0];
        y1[n] = yn[1];
    }
    for (Py_ssize_t k = 0; k < order; k++) {
        zi0[k] = z[k][0];
        zi1[k] = z[k][1];
    }
}
#endif

static PyObject *
linear(PyObject *self, PyObject *args)
{
    PyObject *o_b, *o_a, *o_x, *o_zi, *o_y, *result = NULL;
    Py_buffer b = {0}, a = {0}, x = {0}, zi = {0}, y = {0};   /* releasing an unfilled view does nothing */
    int square = 0;
    if (!PyArg_ParseTuple(args, "OOOOO|p:linear", &o_b, &o_a, &o_x, &o_zi, &o_y, &square))
        return NULL;
    if (get_doubles(o_b, &b, 0, 1, "b") < 0 || get_doubles(o_a, &a, 0, 1, "a") < 0
        || get_doubles(o_x, &x, 0, 2, "x") < 0 || get_doubles(o_zi, &zi, 1, 2, "zi") < 0
        || get_doubles(o_y, &y, 1, 2, "y") < 0)
        goto done;

    Py_ssize_t order = b.shape[0] - 1, n_signals = x.shape[0], n_samples = x.shape[1];
    if (order < 1 || order > LINEAR_MAX_ORDER || a.shape[0] != order + 1 || ((const double *)a.buf)[0] != 1.0
        || zi.shape[0] != n_signals || zi.shape[1] != order || y.shape[0] != n_signals || y.shape[1] != n_samples) {
        PyErr_SetString(PyExc_ValueError, "linear: b and a (K+1,) with a[0] == 1 and 1 <= K <= 8, "
                                          "x and y (C, N), zi (C, K)");
        goto done;
    }
    {
        const double *bs = b.buf, *as = a.buf, *xs = x.buf;
        double *ys = y.buf, *zs = zi.buf;
        Py_ssize_t i = 0;
        Py_BEGIN_ALLOW_THREADS
#if CASCADE_HAVE_PAIR
        for (; i + 1 < n_signals; i += 2)
            linear_pair(bs, as, order, xs + i * n_samples, xs + (i + 1) * n_samples,
                        ys + i * n_samples, ys + (i + 1) * n_samples, n_samples,
                        zs + i * order, zs + (i + 1) * order, square);
#endif
        for (; i < n_signals; i++)
            linear_one(bs, as, order, xs + i * n_samples, ys + i * n_samples, n_samples, zs + i * order, square);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&y);
    PyBuffer_Release(&zi);
    PyBuffer_Release(&x);
    PyBuffer_Release(&a);
    PyBuffer_Release(&b);
    return result;
}

/* The true-peak meter's two loops around its matrix products (chainrun/dsp/fold.py says what they
 * compute; chainrun/meters/truepeak.py why).  float32 additions, subtractions and magnitudes, each
 * rounded once, as numpy's: the results are numpy's bits. */

/* These loops hold only additions, subtractions, magnitudes and comparisons: vectorised, each lane
 * does exactly the scalar operation, and nothing is reordered but the max, whose order does not
 * matter.  GCC builds them for AVX-512, AVX2 and the baseline and picks one when the module loads. */
#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && defined(__linux__)
#define TP_LOOP __attribute__((target_clones("avx512f", "avx2", "default"), optimize("O3")))
#else
#define TP_LOOP
#endif

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

TP_LOOP static void
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

TP_LOOP static uint32_t
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

TP_LOOP static uint32_t
absmax_loop(const float *restrict zs, Py_ssize_t n)
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

static int
get_floats(PyObject *obj, Py_buffer *view, int writable, const char *name)
{
    int flags = PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | (writable ? PyBUF_WRITABLE : 0);
    if (PyObject_GetBuffer(obj, view, flags) < 0)
        return -1;
    if (view->itemsize != 4 || view->format == NULL
        || !(strcmp(view->format, "f") == 0 || strcmp(view->format, "=f") == 0)) {   /* native order */
        PyErr_Format(PyExc_TypeError, "fold: %s must be a C-contiguous float32 array", name);
        PyBuffer_Release(view);
        return -1;
    }
    return 0;
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
        for (Py_ssize_t r0 = 0, k = 0; r0 < n; r0 += run, k++)
            os[k] = tp_from_bits(absmax_loop(zs + r0, (r0 + run < n ? r0 + run : n) - r0));
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&out);
    PyBuffer_Release(&z);
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

TP_LOOP static Py_ssize_t
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
    int flags = PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | (writable ? PyBUF_WRITABLE : 0);
    if (PyObject_GetBuffer(obj, view, flags) < 0)
        return -1;
    if (view->ndim != 1 || view->itemsize != 1 || view->format == NULL || strcmp(view->format, format) != 0) {
        PyErr_Format(PyExc_TypeError, "pack24: %s must be a C-contiguous 1-d %s array", name,
                     format[0] == '?' ? "bool" : "uint8");
        PyBuffer_Release(view);
        return -1;
    }
    return 0;
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

TP_LOOP static void
unpack24_loop(const unsigned char *restrict raw, Py_ssize_t frames, Py_ssize_t channels,
              double *restrict out, Py_ssize_t width)
{
    for (Py_ssize_t c = 0; c < channels; c++) {
        const unsigned char *b = raw + 3 * c;
        double *o = out + c * width;
        Py_ssize_t step = 3 * channels;
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
        }
    }
}

static PyObject *
unpack24_rows(PyObject *self, PyObject *args)
{
    PyObject *o_raw, *o_out, *result = NULL;
    Py_ssize_t frames, channels;
    Py_buffer raw = {0}, out = {0};
    if (!PyArg_ParseTuple(args, "OnnO:unpack24_rows", &o_raw, &frames, &channels, &o_out))
        return NULL;
    if (get_bytes(o_raw, &raw, 0, "B", "raw") < 0 || get_doubles(o_out, &out, 1, 2, "out") < 0)
        goto done;
    if (frames < 0 || channels < 1 || out.shape[0] != channels || out.shape[1] < frames
        || raw.shape[0] < 3 * frames * channels + 1) {
        PyErr_SetString(PyExc_ValueError, "unpack24_rows: raw (> 3*frames*channels,) uint8, out (channels, >= frames)");
        goto done;
    }
    {
        const unsigned char *rs = raw.buf;
        double *os = out.buf;
        Py_ssize_t width = out.shape[1];
        Py_BEGIN_ALLOW_THREADS
        unpack24_loop(rs, frames, channels, os, width);
        Py_END_ALLOW_THREADS
    }
    result = Py_None;
    Py_INCREF(result);
done:
    PyBuffer_Release(&out);
    PyBuffer_Release(&raw);
    return result;
}

static PyMethodDef methods[] = {
    {"cascade", cascade, METH_VARARGS,
     "cascade(sos, x, zi, y): filter x (C, N) through sos (S, 6) into y, updating zi (C, S, 2) in place;\n"
     "C-contiguous float64 buffers; the same arithmetic as scipy.signal.sosfilt."},
    {"linear", linear, METH_VARARGS,
     "linear(b, a, x, zi, y[, square]): filter x (C, N) through b/a (K+1,), a[0] == 1, into y, updating\n"
     "zi (C, K) in place; C-contiguous float64 buffers; the same arithmetic as scipy.signal.lfilter.\n"
     "With square true, y holds the squares of the output (each y*y, rounded once)."},
    {"fold_rows", fold_rows, METH_VARARGS,
     "fold_rows(z, start, step, s, d): sums and differences of mirrored samples of the rows of z\n"
     "(float32) that start at start + r*step; see chainrun/dsp/fold.py."},
    {"absmax_sum", absmax_sum, METH_VARARGS,
     "absmax_sum(a, b) -> max(|a| + |b|) over two float32 buffers of one length (NaN if any is NaN)."},
    {"absmax_runs", absmax_runs, METH_VARARGS,
     "absmax_runs(z, run, out): out[k] = max |z| over z[k*run : (k+1)*run] (float32 in, float64 out)."},
    {"pack24_row", pack24_row, METH_VARARGS,
     "pack24_row(y, scale, r, channel, counted, safe, lo, hi, out, offset, stride, big_endian) -> count:\n"
     "quantise one float64 row (dither r[:, channel] or None, rint, clip to [lo, hi] unless safe) into\n"
     "3-byte codes at out[offset::stride]; the count of clipped samples not in counted, or -1 for a\n"
     "row holding NaN or infinity (left unfinished); see chainrun/audio/quantise.py."},
    {"unpack24_rows", unpack24_rows, METH_VARARGS,
     "unpack24_rows(raw, frames, channels, out): packed little-endian 3-byte interleaved samples into\n"
     "out[:, :frames] (float64, channels x width) as code / 2**23; see chainrun/audio/reader.py."},
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
