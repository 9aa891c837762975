/*
 * Optional compiled kernels for envsample (built by setup.py when a C compiler is
 * available; envsample falls back to its numpy code otherwise).
 *
 * alias_sweep    : alias table by the sequential sweep of Huebschle-Schneider &
 *                  Sanders (2022), O(n) over index lists, with the current heavy item's
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
 *             total: sum of the cell weights (float64, pairwise-summed by the caller),
 *             prob: float32[n] (out), alias: int32[n] (out))
 * Cell weight = weights[k] * row_scale[k / ncol]; p = n * weight / sum(weight) in double.
 *
 * One branch-free pass lists the light cells (p < 1) from the front of a scratch
 * buffer and the heavy ones (p >= 1) from its back, both in index order; the sweep
 * then walks the two lists, so every memory access is sequential. */
typedef struct {
    const void *w;
    int dbl;
    const double *scale;
    Py_ssize_t ncol;
    double c;
} sweep_ctx;

/* p of cell k; *row tracks k's row for ascending k */
static inline double p_at(const sweep_ctx *x, Py_ssize_t k, Py_ssize_t *row) {
    while (k >= (*row + 1) * x->ncol) (*row)++;
    double v = x->dbl ? ((const double *)x->w)[k] : (double)((const float *)x->w)[k];
    return v * x->scale[*row] * x->c;
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
    double total;
    if (!PyArg_ParseTuple(args, "y*iy*ndw*w*", &wb, &dbl, &sb, &ncol, &total, &pb, &ab)) return NULL;
    Py_ssize_t n = pb.len / (Py_ssize_t)sizeof(float);
    Py_ssize_t esize = dbl ? (Py_ssize_t)sizeof(double) : (Py_ssize_t)sizeof(float);
    if (n <= 0 || ncol <= 0 || n % ncol != 0 || ab.len != n * (Py_ssize_t)sizeof(int32_t) || wb.len != n * esize ||
        sb.len != (n / ncol) * (Py_ssize_t)sizeof(double)) {
        PyBuffer_Release(&wb); PyBuffer_Release(&sb); PyBuffer_Release(&pb); PyBuffer_Release(&ab);
        PyErr_SetString(PyExc_ValueError, "alias_sweep: buffer sizes do not match");
        return NULL;
    }
    int32_t *list = (int32_t *)PyMem_RawMalloc((size_t)n * sizeof(int32_t));
    if (list == NULL) {
        PyBuffer_Release(&wb); PyBuffer_Release(&sb); PyBuffer_Release(&pb); PyBuffer_Release(&ab);
        return PyErr_NoMemory();
    }
    float *prob = (float *)pb.buf;
    int32_t *alias = (int32_t *)ab.buf;
    sweep_ctx x = {wb.buf, dbl, (const double *)sb.buf, ncol, 1.0};
    Py_BEGIN_ALLOW_THREADS
    if (total > 0.0 && isfinite(total)) {
        x.c = (double)n / total;
        Py_ssize_t nl = 0, nh = 0, row = 0;
        for (Py_ssize_t k = 0; k < n; k++) {
            int light = p_at(&x, k, &row) < 1.0;
            list[nl] = (int32_t)k;
            list[n - 1 - nh] = (int32_t)k;
            nl += light;
            nh += !light;
        }
        Py_ssize_t i = 0, j = 0;
        if (nh > 0) {
            /* w: exact residual of the current heavy.  err = sum(s - p) over the float32
               probabilities stored in its run: each is the float32 neighbour that keeps
               |err| smallest, so a heavy serving many lights stays exact to ~1 ulp. */
            Py_ssize_t lrow = 0, hrow = 0;
            Py_ssize_t hk = list[n - 1];
            double w = p_at(&x, hk, &hrow), err = 0.0;
            for (;;) {
                if (w >= 1.0) {
                    if (i >= nl) break; /* no light left: the current heavy keeps the rest */
                    Py_ssize_t lk = list[i++];
                    double p = p_at(&x, lk, &lrow);
                    float s = round_toward(p, err);
                    err += (double)s - p; /* the heavy receives 1 - s instead of 1 - p */
                    prob[lk] = s;
                    alias[lk] = (int32_t)hk;
                    w -= 1.0 - p;
                } else {
                    if (j + 1 >= nh) break; /* rounding: no heavy left */
                    Py_ssize_t nk = list[n - 2 - j];
                    double keep = w < 0.0 ? 0.0 : w;
                    /* the heavy's own bucket: keep + err would make its mass exact */
                    float s = round_toward(keep, -err);
                    prob[hk] = s;
                    alias[hk] = (int32_t)nk;
                    w = p_at(&x, nk, &hrow) - (1.0 - keep);
                    err = (double)s - keep; /* the next heavy receives 1 - s, not 1 - keep */
                    hk = nk;
                    j++;
                }
            }
        }
        /* what the sweep did not reach keeps itself: lights left by rounding, the last heavies */
        for (Py_ssize_t t = i; t < nl; t++) { prob[list[t]] = 1.0f; alias[list[t]] = list[t]; }
        for (Py_ssize_t t = j; t < nh; t++) { Py_ssize_t k = list[n - 1 - t]; prob[k] = 1.0f; alias[k] = (int32_t)k; }
    } else {
        for (Py_ssize_t k = 0; k < n; k++) { prob[k] = 1.0f; alias[k] = (int32_t)k; }
    }
    Py_END_ALLOW_THREADS
    PyMem_RawFree(list);
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
    /* Samples go in blocks: each stage issues the block's independent memory reads
       (prefetches, or one bisection step for every lane) before any of them is needed,
       so cache misses overlap instead of queueing one sample at a time. */
    enum { B = 32 };
    Py_BEGIN_ALLOW_THREADS
    const Py_ssize_t steps_h = (Py_ssize_t)ceil(log2((double)h)), steps_w = (Py_ssize_t)ceil(log2((double)w));
    for (Py_ssize_t s0 = 0; s0 < N; s0 += B) {
        const int m = (int)(N - s0 < B ? N - s0 : B);
        Py_ssize_t rowv[B], colv[B];
        double fuv[B], fvv[B];
        if (method == 0) {
            double u0[B], u1[B];
            Py_ssize_t lo[B], hi[B];
            for (int t = 0; t < m; t++) {
                u0[t] = clamp_unit(u[2 * (s0 + t)]);
                u1[t] = clamp_unit(u[2 * (s0 + t) + 1]);
                lo[t] = 0; hi[t] = h;
            }
            /* largest row with marg[row] <= u0 (lanes with hi - lo == 1 are fixed points) */
            for (Py_ssize_t st = 0; st < steps_h; st++)
                for (int t = 0; t < m; t++) {
                    Py_ssize_t mid = (lo[t] + hi[t]) >> 1;
                    if ((double)marg[mid] <= u0[t]) lo[t] = mid; else hi[t] = mid;
                }
            for (int t = 0; t < m; t++) {
                Py_ssize_t row = lo[t];
                double a = marg[row], b2 = marg[row + 1];
                double fv = b2 - a > 0.0 ? (u0[t] - a) / (b2 - a) : 0.0;
                fvv[t] = fv < 0.0 ? 0.0 : (fv > 1.0 ? 1.0 : fv);
                rowv[t] = row;
                lo[t] = 0; hi[t] = w;
            }
            for (Py_ssize_t st = 0; st < steps_w; st++)
                for (int t = 0; t < m; t++) {
                    Py_ssize_t mid = (lo[t] + hi[t]) >> 1;
                    if ((double)cond[rowv[t] * (w + 1) + mid] <= u1[t]) lo[t] = mid; else hi[t] = mid;
                }
            for (int t = 0; t < m; t++) {
                const float *cr = cond + rowv[t] * (w + 1);
                Py_ssize_t col = lo[t];
                double a = cr[col], b2 = cr[col + 1];
                double fu = b2 - a > 0.0 ? (u1[t] - a) / (b2 - a) : 0.0;
                fuv[t] = fu < 0.0 ? 0.0 : (fu > 1.0 ? 1.0 : fu);
                colv[t] = col;
                __builtin_prefetch(cpdf + rowv[t] * w + col);
            }
        } else {
            Py_ssize_t kv[B];
            double frac[B];
            for (int t = 0; t < m; t++) {
                double x = clamp_unit(u[2 * (s0 + t)]) * (double)n;
                Py_ssize_t k = (Py_ssize_t)x;
                if (k > n - 1) k = n - 1;
                kv[t] = k;
                frac[t] = x - (double)k;
                __builtin_prefetch(prob + k);
                __builtin_prefetch(alias + k);
            }
            for (int t = 0; t < m; t++) {
                Py_ssize_t k = kv[t], cell;
                double p = (double)prob[k], q, rest;
                if (frac[t] < p) { cell = k; q = p; rest = frac[t]; }
                else { cell = alias[k]; q = 1.0 - p; rest = frac[t] - p; }
                double fu = q > 0.0 ? rest / q : 0.0;
                if (fu > 0x1.fffffffffffffp-1) fu = 0x1.fffffffffffffp-1;
                fuv[t] = fu;
                double v1 = u[2 * (s0 + t) + 1];
                fvv[t] = v1 < 0.0 ? 0.0 : (v1 > 1.0 ? 1.0 : v1);
                rowv[t] = cell / w;
                colv[t] = cell - rowv[t] * w;
                __builtin_prefetch(cpdf + cell);
            }
        }
        for (int t = 0; t < m; t++) {
            const Py_ssize_t s = s0 + t, row = rowv[t], col = colv[t];
            const double fu = clamp_edge(fuv[t], edge), fv = clamp_edge(fvv[t], edge);
            Py_ssize_t cell = row * w + col;
            double phi = ((double)col + fu) * two_pi_w + (rot - M_PI);
            double pdf = (double)cpdf[cell], cos_t, sin_t;
            if (mapping == 0) {
                double c0 = cosE[row];
                cos_t = (cosE[row + 1] - c0) * fv + c0;
                double tt = (1.0 - cos_t) * (1.0 + cos_t);
                sin_t = sqrt(tt > 0.0 ? tt : 0.0);
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
    {"alias_sweep", alias_sweep, METH_VARARGS, "O(n) alias table construction (sweeping method)."},
    {"sample_table", sample_table, METH_VARARGS, "Draw directions and pdfs from a table."},
    {"row_cdfs", row_cdfs, METH_VARARGS, "Conditional CDFs of every row, float64 accumulation."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_kernels", "Optional compiled kernels for envsample.", -1,
                                    methods, NULL, NULL, NULL, NULL};

PyMODINIT_FUNC PyInit__kernels(void) { return PyModule_Create(&module); }
