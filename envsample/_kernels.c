/*
 * Optional compiled kernels for envsample (built by setup.py when a C compiler is
 * available; envsample falls back to its numpy code otherwise).
 *
 * alias_sweep    : alias table by the sequential sweep of Huebschle-Schneider &
 *                  Sanders (2022), in place and O(n), with the current heavy item's
 *                  residual kept in double precision.
 * sample_table   : cell choice (inverse CDF or alias) + in-cell mapping + pdf, the
 *                  same arithmetic as envsample.table.EnvTable.sample.
 *
 * Only the CPython buffer protocol is used (no numpy headers); the Python side
 * passes C-contiguous arrays of the documented dtypes and checks their sizes.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>
#include <stdint.h>

/* alias_sweep(weights: float32 or float64 [h*ncol], is_double, row_scale: float64[h], ncol,
 *             prob: float32[n] (out), alias: int32[n] (out))
 * Cell weight = weights[k] * row_scale[k / ncol]; p = n * weight / sum(weight) in double. */
typedef struct {
    const void *w;
    int dbl;
    const double *scale;
    Py_ssize_t ncol, n;
    double c;
    const int32_t *alias;
} sweep_ctx;

typedef struct {
    Py_ssize_t k, row, col;
} cursor;

static inline double weight_at(const sweep_ctx *x, Py_ssize_t k, Py_ssize_t row) {
    double v = x->dbl ? ((const double *)x->w)[k] : (double)((const float *)x->w)[k];
    return v * x->scale[row];
}

static inline void cursor_step(const sweep_ctx *x, cursor *q) {
    q->k++;
    if (++q->col == x->ncol) { q->col = 0; q->row++; }
}

/* advance q (inclusive) to the next cell that is not final and is light (want_light) or heavy */
static inline void cursor_seek(const sweep_ctx *x, cursor *q, int want_light) {
    while (q->k < x->n) {
        if (x->alias[q->k] == -1) {
            int light = weight_at(x, q->k, q->row) * x->c < 1.0;
            if (light == want_light) return;
        }
        cursor_step(x, q);
    }
}

/* float32 neighbour of p (p in [0, 1]) that moves a running error err = sum(s - p)
   toward zero: round down when err > 0, up when err < 0, nearest when err == 0. */
static inline float round_toward(double p, double err) {
    float s = (float)p;
    if (err > 0.0 && (double)s > p) s = nextafterf(s, 0.0f);
    else if (err < 0.0 && (double)s < p) s = nextafterf(s, 2.0f);
    return s;
}

static PyObject *alias_sweep(PyObject *self, PyObject *args) {
    Py_buffer wb, sb, pb, ab;
    int dbl;
    Py_ssize_t ncol;
    if (!PyArg_ParseTuple(args, "y*iy*nw*w*", &wb, &dbl, &sb, &ncol, &pb, &ab)) return NULL;
    Py_ssize_t n = pb.len / (Py_ssize_t)sizeof(float);
    Py_ssize_t esize = dbl ? (Py_ssize_t)sizeof(double) : (Py_ssize_t)sizeof(float);
    if (n <= 0 || ncol <= 0 || n % ncol != 0 || ab.len != n * (Py_ssize_t)sizeof(int32_t) || wb.len != n * esize ||
        sb.len != (n / ncol) * (Py_ssize_t)sizeof(double)) {
        PyBuffer_Release(&wb); PyBuffer_Release(&sb); PyBuffer_Release(&pb); PyBuffer_Release(&ab);
        PyErr_SetString(PyExc_ValueError, "alias_sweep: buffer sizes do not match");
        return NULL;
    }
    float *prob = (float *)pb.buf;
    int32_t *alias = (int32_t *)ab.buf;
    sweep_ctx x = {wb.buf, dbl, (const double *)sb.buf, ncol, n, 1.0, alias};
    int all_zero = 0;
    Py_BEGIN_ALLOW_THREADS
    /* Kahan-Neumaier sum: a naive sum of 33 M cells drifts by ~1e-12 relative, which
       the sweep would hand, times n, to the last heavy cell. */
    double total = 0.0, comp = 0.0;
    {
        cursor q = {0, 0, 0};
        for (; q.k < n; cursor_step(&x, &q)) {
            double v = weight_at(&x, q.k, q.row), t = total + v;
            comp += fabs(total) >= fabs(v) ? (total - t) + v : (v - t) + total;
            total = t;
        }
        total += comp;
    }
    for (Py_ssize_t k = 0; k < n; k++) alias[k] = -1; /* -1: not yet final */
    if (!(total > 0.0) || !isfinite(total)) {
        all_zero = 1;
    } else {
        x.c = (double)n / total;
        cursor li = {0, 0, 0}, hj = {0, 0, 0};
        cursor_seek(&x, &li, 1);
        cursor_seek(&x, &hj, 0);
        if (hj.k < n) {
            /* w: exact residual of the current heavy.  err: mass the current heavy has
               gained from float32 rounding of the probabilities stored so far in its run.
               Each stored value is the float32 neighbour that keeps |err| smallest, so a
               heavy serving many lights stays exact to about one float32 ulp. */
            double w = weight_at(&x, hj.k, hj.row) * x.c, err = 0.0;
            for (;;) {
                if (w >= 1.0) {
                    if (li.k >= n) break; /* no light left: the current heavy keeps the rest */
                    double p = weight_at(&x, li.k, li.row) * x.c;
                    float s = round_toward(p, err);
                    err += (double)s - p; /* the heavy receives 1 - s instead of 1 - p */
                    prob[li.k] = s;
                    alias[li.k] = (int32_t)hj.k;
                    w -= 1.0 - p;
                    cursor_step(&x, &li);
                    cursor_seek(&x, &li, 1);
                } else {
                    cursor nx = hj;
                    cursor_step(&x, &nx);
                    cursor_seek(&x, &nx, 0);
                    if (nx.k >= n) break; /* rounding: no heavy left */
                    double keep = w < 0.0 ? 0.0 : w;
                    /* the heavy's own bucket: keep + err would make its mass exact */
                    float s = round_toward(keep, -err);
                    prob[hj.k] = s < 0.0f ? 0.0f : s;
                    alias[hj.k] = (int32_t)nx.k;
                    w = weight_at(&x, nx.k, nx.row) * x.c - (1.0 - keep);
                    /* the next heavy receives 1 - s instead of 1 - keep */
                    err = (double)s - keep;
                    hj = nx;
                }
            }
        }
    }
    /* whatever is not final keeps itself (all cells when the weights are all zero) */
    for (Py_ssize_t k = 0; k < n; k++) {
        if (alias[k] == -1) {
            prob[k] = 1.0f;
            alias[k] = (int32_t)k;
        }
    }
    Py_END_ALLOW_THREADS
    (void)all_zero;
    PyBuffer_Release(&wb); PyBuffer_Release(&sb); PyBuffer_Release(&pb); PyBuffer_Release(&ab);
    Py_RETURN_NONE;
}

static inline double clamp_unit(double u) {
    const double top = 0x1.fffffffffffffp-1; /* nextafter(1, 0) */
    if (!(u >= 0.0)) return 0.0;
    return u > top ? top : u;
}

static inline double clamp_edge(double f, double e) {
    if (f < e) return e;
    if (f > 1.0 - e) return 1.0 - e;
    return f;
}

/* sample_table(u f64[N*2], method 0=inverse 1=alias, marginal f32[h+1], conditional f32[h*(w+1)],
 *              prob f32[h*w], alias i32[h*w], pdf f32[h*w], cos_edges f64[h+1], row_sa f64[h],
 *              h, w, rot, mapping 0=equal-area 1=uv-linear, axes (6 ints: index,sign per world axis),
 *              out dirs f64[N*3], out pdf f64[N], out cells i64[N], edge)                         */
static PyObject *sample_table(PyObject *self, PyObject *args) {
    Py_buffer ub, mb, cb, pb, ab, fb, eb, sb, db, ob, kb;
    int method, mapping, i0, s0, i1, s1, i2, s2;
    Py_ssize_t h, w;
    double rot, edge;
    if (!PyArg_ParseTuple(args, "y*iy*y*y*y*y*y*y*nndi(iiiiii)w*w*w*d", &ub, &method, &mb, &cb, &pb, &ab, &fb,
                          &eb, &sb, &h, &w, &rot, &mapping, &i0, &s0, &i1, &s1, &i2, &s2, &db, &ob, &kb, &edge))
        return NULL;
    Py_ssize_t N = ub.len / (Py_ssize_t)(2 * sizeof(double));
    int ok = h > 0 && w > 0 && mb.len == (Py_ssize_t)((h + 1) * sizeof(float)) &&
             cb.len == (Py_ssize_t)(h * (w + 1) * sizeof(float)) && pb.len == (Py_ssize_t)(h * w * sizeof(float)) &&
             ab.len == (Py_ssize_t)(h * w * sizeof(int32_t)) && fb.len == (Py_ssize_t)(h * w * sizeof(float)) &&
             eb.len == (Py_ssize_t)((h + 1) * sizeof(double)) && sb.len == (Py_ssize_t)(h * sizeof(double)) &&
             db.len == (Py_ssize_t)(N * 3 * sizeof(double)) && ob.len == (Py_ssize_t)(N * sizeof(double)) &&
             kb.len == (Py_ssize_t)(N * sizeof(int64_t)) && i0 >= 0 && i0 < 3 && i1 >= 0 && i1 < 3 && i2 >= 0 &&
             i2 < 3;
    if (!ok) {
        Py_buffer *all[] = {&ub, &mb, &cb, &pb, &ab, &fb, &eb, &sb, &db, &ob, &kb};
        for (int k = 0; k < 11; k++) PyBuffer_Release(all[k]);
        PyErr_SetString(PyExc_ValueError, "sample_table: buffer sizes do not match the table");
        return NULL;
    }
    const double *u = (const double *)ub.buf;
    const float *marg = (const float *)mb.buf, *cond = (const float *)cb.buf, *prob = (const float *)pb.buf;
    const int32_t *alias = (const int32_t *)ab.buf;
    const float *cpdf = (const float *)fb.buf;
    const double *cosE = (const double *)eb.buf, *rowsa = (const double *)sb.buf;
    double *dirs = (double *)db.buf, *opdf = (double *)ob.buf;
    int64_t *cells = (int64_t *)kb.buf;
    const int idx[3] = {i0, i1, i2};
    const double sgn[3] = {(double)s0, (double)s1, (double)s2};
    const double two_pi_w = 2.0 * M_PI / (double)w, pi_h = M_PI / (double)h;
    const double uvscale = (double)(h * w) / (2.0 * M_PI * M_PI);
    const Py_ssize_t n = h * w;
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t s = 0; s < N; s++) {
        Py_ssize_t row, col;
        double fu, fv;
        if (method == 0) {
            double u0 = clamp_unit(u[2 * s]), u1 = clamp_unit(u[2 * s + 1]);
            /* largest row with marg[row] <= u0 */
            Py_ssize_t lo = 0, hi = h;
            while (hi - lo > 1) {
                Py_ssize_t mid = (lo + hi) >> 1;
                if ((double)marg[mid] <= u0) lo = mid; else hi = mid;
            }
            row = lo;
            double a = marg[row], b = marg[row + 1];
            fv = b - a > 0.0 ? (u0 - a) / (b - a) : 0.0;
            const float *cr = cond + row * (w + 1);
            lo = 0; hi = w;
            while (hi - lo > 1) {
                Py_ssize_t mid = (lo + hi) >> 1;
                if ((double)cr[mid] <= u1) lo = mid; else hi = mid;
            }
            col = lo;
            a = cr[col]; b = cr[col + 1];
            fu = b - a > 0.0 ? (u1 - a) / (b - a) : 0.0;
            if (fu > 1.0) fu = 1.0;
            if (fv > 1.0) fv = 1.0;
            if (fu < 0.0) fu = 0.0;
            if (fv < 0.0) fv = 0.0;
        } else {
            double x = clamp_unit(u[2 * s]) * (double)n;
            Py_ssize_t k = (Py_ssize_t)x;
            if (k > n - 1) k = n - 1;
            double frac = x - (double)k, p = (double)prob[k];
            Py_ssize_t cell;
            double q, rest;
            if (frac < p) { cell = k; q = p; rest = frac; }
            else { cell = alias[k]; q = 1.0 - p; rest = frac - p; }
            fu = q > 0.0 ? rest / q : 0.0;
            if (fu > 0x1.fffffffffffffp-1) fu = 0x1.fffffffffffffp-1;
            double v1 = u[2 * s + 1];
            fv = v1 < 0.0 ? 0.0 : (v1 > 1.0 ? 1.0 : v1);
            row = cell / w;
            col = cell - row * w;
        }
        fu = clamp_edge(fu, edge);
        fv = clamp_edge(fv, edge);
        Py_ssize_t cell = row * w + col;
        double phi = ((double)col + fu) * two_pi_w + (rot - M_PI);
        double pdf = (double)cpdf[cell], cos_t, sin_t;
        if (mapping == 0) {
            double c0 = cosE[row];
            cos_t = (cosE[row + 1] - c0) * fv + c0;
            double t = (1.0 - cos_t) * (1.0 + cos_t);
            sin_t = sqrt(t > 0.0 ? t : 0.0);
        } else {
            double theta = pi_h * ((double)row + fv);
            cos_t = cos(theta);
            sin_t = sin(theta);
            pdf = pdf * (rowsa[row] * uvscale) / sin_t;
        }
        double comp[3] = {sin_t * cos(phi), sin_t * sin(phi), cos_t};
        double *d = dirs + 3 * s;
        d[0] = sgn[0] * comp[idx[0]];
        d[1] = sgn[1] * comp[idx[1]];
        d[2] = sgn[2] * comp[idx[2]];
        opdf[s] = pdf;
        cells[s] = (int64_t)cell;
    }
    Py_END_ALLOW_THREADS
    Py_buffer *all[] = {&ub, &mb, &cb, &pb, &ab, &fb, &eb, &sb, &db, &ob, &kb};
    for (int k = 0; k < 11; k++) PyBuffer_Release(all[k]);
    Py_RETURN_NONE;
}

/* row_cdfs(weights f32[h*w], row_scale f64[h], out f32[h*(w+1)], totals f64[h]) */
static PyObject *row_cdfs(PyObject *self, PyObject *args) {
    Py_buffer wb, sb, ob, tb;
    Py_ssize_t h, w;
    if (!PyArg_ParseTuple(args, "y*y*w*w*nn", &wb, &sb, &ob, &tb, &h, &w)) return NULL;
    if (h <= 0 || w <= 0 || wb.len != (Py_ssize_t)(h * w * sizeof(float)) || sb.len != (Py_ssize_t)(h * sizeof(double)) ||
        ob.len != (Py_ssize_t)(h * (w + 1) * sizeof(float)) || tb.len != (Py_ssize_t)(h * sizeof(double))) {
        PyBuffer_Release(&wb); PyBuffer_Release(&sb); PyBuffer_Release(&ob); PyBuffer_Release(&tb);
        PyErr_SetString(PyExc_ValueError, "row_cdfs: buffer sizes do not match");
        return NULL;
    }
    const float *wt = (const float *)wb.buf;
    const double *scale = (const double *)sb.buf;
    float *out = (float *)ob.buf;
    double *tot = (double *)tb.buf;
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t r = 0; r < h; r++) {
        const float *src = wt + r * w;
        float *dst = out + r * (w + 1);
        double acc = 0.0;
        for (Py_ssize_t j = 0; j < w; j++) acc += (double)src[j];
        tot[r] = acc * scale[r];
        dst[0] = 0.0f;
        if (acc > 0.0) {
            double inv = 1.0 / acc, run = 0.0;
            for (Py_ssize_t j = 0; j < w; j++) {
                run += (double)src[j];
                dst[j + 1] = (float)(run * inv);
            }
        } else {
            for (Py_ssize_t j = 0; j < w; j++) dst[j + 1] = (float)((double)(j + 1) / (double)w);
        }
        dst[w] = 1.0f;
    }
    Py_END_ALLOW_THREADS
    PyBuffer_Release(&wb); PyBuffer_Release(&sb); PyBuffer_Release(&ob); PyBuffer_Release(&tb);
    Py_RETURN_NONE;
}

static PyMethodDef methods[] = {
    {"alias_sweep", alias_sweep, METH_VARARGS, "In-place O(n) alias table construction (sweeping method)."},
    {"sample_table", sample_table, METH_VARARGS, "Draw directions and pdfs from a table."},
    {"row_cdfs", row_cdfs, METH_VARARGS, "Conditional CDFs of every row, float64 accumulation."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_kernels", "Optional compiled kernels for envsample.", -1,
                                    methods};

PyMODINIT_FUNC PyInit__kernels(void) { return PyModule_Create(&module); }
