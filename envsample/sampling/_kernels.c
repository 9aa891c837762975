/*
 * Optional compiled kernels for envsample (built by setup.py when a C compiler is
 * available; envsample falls back to its numpy code otherwise).
 *
 * alias_sweep    : alias table by the sequential sweep of Huebschle-Schneider &
 *                  Sanders (2022), O(n) over index lists, with the current heavy item's
 *                  residual kept in double precision.
 * build_rows     : per row of a 2D table, its conditional CDF and its own alias table
 *                  (the second level of a two-level alias table); each row's sweep
 *                  runs in cache and the rows are split across threads.
 * sample_table   : cell choice (inverse CDF or two-level alias) + in-cell mapping +
 *                  pdf, the same arithmetic as envsample.sampling.table.EnvTable.sample.
 *
 * Only the CPython buffer protocol is used (no numpy headers); the Python side
 * passes C-contiguous arrays of the documented dtypes and checks their sizes.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>
#include <pthread.h>
#include <stdint.h>
#include <stdlib.h>

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
    if (p == 0.0) return 0.0f; /* a cell of zero weight is never kept (no denormal leftovers) */
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

/* ------------------------------------------------------------------ build_rows
 * One row of n cells (weights wt, float32, row sum acc in double):
 *   cdf  (n + 1 floats, or NULL): running sums / acc, exact 0 and 1 at the ends, the uniform
 *        CDF for a row of zero total;
 *   prob, alias (n entries each, or NULL): the row's own alias table, built by the sweep of
 *        alias_sweep above with p = n * wt / acc; alias entries are column indices (uint16).
 * A cell of zero weight gets probability exactly 0; a row of zero total the uniform table. */
static void cdf_row(const float *wt, Py_ssize_t n, double acc, float *cdf) {
    cdf[0] = 0.0f;
    if (acc > 0.0) {
        double inv = 1.0 / acc, run = 0.0;
        for (Py_ssize_t j = 0; j < n; j++) {
            run += (double)wt[j];
            cdf[j + 1] = (float)(run * inv);
        }
    } else {
        for (Py_ssize_t j = 0; j < n; j++) cdf[j + 1] = (float)((double)(j + 1) / (double)n);
    }
    cdf[n] = 1.0f;
}

static void alias_row(const float *wt, Py_ssize_t n, double acc, float *prob, uint16_t *alias, int32_t *list) {
    if (!(acc > 0.0 && isfinite(acc))) {
        for (Py_ssize_t k = 0; k < n; k++) { prob[k] = 1.0f; alias[k] = (uint16_t)k; }
        return;
    }
    const double c = (double)n / acc;
    Py_ssize_t nl = 0, nh = 0;
    for (Py_ssize_t k = 0; k < n; k++) {
        int light = (double)wt[k] * c < 1.0;
        list[nl] = (int32_t)k;
        list[n - 1 - nh] = (int32_t)k;
        nl += light;
        nh += !light;
    }
    Py_ssize_t i = 0, j = 0;
    if (nh > 0) {
        Py_ssize_t hk = list[n - 1];
        double w = (double)wt[hk] * c, err = 0.0;
        for (;;) {
            if (w >= 1.0) {
                if (i >= nl) break;
                Py_ssize_t lk = list[i++];
                double p = (double)wt[lk] * c;
                float s = round_toward(p, err);
                err += (double)s - p;
                prob[lk] = s;
                alias[lk] = (uint16_t)hk;
                w -= 1.0 - p;
            } else {
                if (j + 1 >= nh) break;
                Py_ssize_t nk = list[n - 2 - j];
                double keep = w < 0.0 ? 0.0 : w;
                float s = round_toward(keep, -err);
                prob[hk] = s;
                alias[hk] = (uint16_t)nk;
                w = (double)wt[nk] * c - (1.0 - keep);
                err = (double)s - keep;
                hk = nk;
                j++;
            }
        }
    }
    for (Py_ssize_t t = i; t < nl; t++) { prob[list[t]] = 1.0f; alias[list[t]] = (uint16_t)list[t]; }
    for (Py_ssize_t t = j; t < nh; t++) { Py_ssize_t k = list[n - 1 - t]; prob[k] = 1.0f; alias[k] = (uint16_t)k; }
}

/* ------------------------------------------------------------------ rows across threads
 * parallel_rows calls fn(ctx, r0, r1) on contiguous ranges of rows [0, h), one per thread (at
 * most MAX_THREADS; a thread that cannot be started runs its range here).  fn returns nonzero
 * when it ran out of memory.  Rows are independent, so any thread count gives the same bits. */
typedef int (*rows_fn)(void *ctx, Py_ssize_t r0, Py_ssize_t r1);
typedef struct { rows_fn fn; void *ctx; Py_ssize_t r0, r1; int failed; } span_job;
enum { MAX_THREADS = 16 };

static void *span_worker(void *arg) {
    span_job *j = (span_job *)arg;
    j->failed = j->fn(j->ctx, j->r0, j->r1);
    return NULL;
}

/* returns nonzero if any range failed; call without the GIL */
static int parallel_rows(rows_fn fn, void *ctx, Py_ssize_t h, int threads) {
    span_job jobs[MAX_THREADS];
    pthread_t tid[MAX_THREADS];
    int started[MAX_THREADS] = {0}, failed = 0;
    if (threads < 1) threads = 1;
    if (threads > MAX_THREADS) threads = MAX_THREADS;
    if (threads > h) threads = (int)h;
    for (int t = 0; t < threads; t++) {
        jobs[t] = (span_job){fn, ctx, h * t / threads, h * (t + 1) / threads, 0};
        if (t > 0) started[t] = pthread_create(&tid[t], NULL, span_worker, &jobs[t]) == 0;
    }
    span_worker(&jobs[0]);
    for (int t = 1; t < threads; t++) {
        if (started[t]) pthread_join(tid[t], NULL);
        else span_worker(&jobs[t]);
    }
    for (int t = 0; t < threads; t++) failed |= jobs[t].failed;
    return failed;
}

typedef struct {
    const float *wt;
    const double *scale;
    float *cdf, *prob;
    uint16_t *alias;
    double *totals;
    Py_ssize_t n;
} rows_ctx;

static int rows_span(void *arg, Py_ssize_t r0, Py_ssize_t r1) {
    const rows_ctx *c = (const rows_ctx *)arg;
    const Py_ssize_t n = c->n;
    int32_t *list = NULL;
    if (c->prob != NULL) {
        list = (int32_t *)malloc((size_t)n * sizeof(int32_t));
        if (list == NULL) return 1;
    }
    for (Py_ssize_t r = r0; r < r1; r++) {
        const float *src = c->wt + r * n;
        double acc = 0.0;
        for (Py_ssize_t k = 0; k < n; k++) acc += (double)src[k];
        c->totals[r] = acc * c->scale[r];
        if (c->cdf != NULL) cdf_row(src, n, acc, c->cdf + r * (n + 1));
        if (c->prob != NULL) alias_row(src, n, acc, c->prob + r * n, c->alias + r * n, list);
    }
    free(list);
    return 0;
}

/* build_rows(weights f32[h*w], row_scale f64[h], h, w, cdf f32[h*(w+1)] or b"", prob f32[h*w] or b"",
 *            alias u16[h*w] or b"", totals f64[h] (out: row sum * row_scale), threads)
 * Empty output buffers skip that part (a table with one cell-choice method). */
static PyObject *build_rows(PyObject *self, PyObject *args) {
    Py_buffer wb, sb, cb, pb, ab, tb;
    Py_ssize_t h, w;
    int threads;
    if (!PyArg_ParseTuple(args, "y*y*nnw*w*w*w*i", &wb, &sb, &h, &w, &cb, &pb, &ab, &tb, &threads)) return NULL;
    Py_buffer *all[] = {&wb, &sb, &cb, &pb, &ab, &tb};
    int want_cdf = cb.len > 0, want_alias = pb.len > 0;
    int ok = h > 0 && w > 0 && w <= 65536 && wb.len == (Py_ssize_t)(h * w * sizeof(float)) &&
             sb.len == (Py_ssize_t)(h * sizeof(double)) && tb.len == (Py_ssize_t)(h * sizeof(double)) &&
             (!want_cdf || cb.len == (Py_ssize_t)(h * (w + 1) * sizeof(float))) &&
             (want_alias ? (pb.len == (Py_ssize_t)(h * w * sizeof(float)) &&
                            ab.len == (Py_ssize_t)(h * w * sizeof(uint16_t)))
                         : ab.len == 0);
    if (!ok) {
        for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
        PyErr_SetString(PyExc_ValueError, "build_rows: buffer sizes do not match the table");
        return NULL;
    }
    rows_ctx ctx = {(const float *)wb.buf, (const double *)sb.buf, want_cdf ? (float *)cb.buf : NULL,
                    want_alias ? (float *)pb.buf : NULL, want_alias ? (uint16_t *)ab.buf : NULL, (double *)tb.buf, w};
    int failed;
    Py_BEGIN_ALLOW_THREADS
    failed = parallel_rows(rows_span, &ctx, h, threads);
    Py_END_ALLOW_THREADS
    for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
    if (failed) return PyErr_NoMemory();
    Py_RETURN_NONE;
}

/* ------------------------------------------------------------------ luminance_rows
 * One pass over an (H, W, 3) float32 map: the luminance (float32, clamped at 0; mode 0 = the weights,
 * 1 = the largest channel, 2 = the channel mean), the per-row per-channel float64 sums, the smallest
 * value and the count of non-finite values.  Rows are split across threads. */
typedef struct {
    const float *rgb;
    float *lum;
    double *sums, *lowest; /* lowest: per row */
    Py_ssize_t *bad;       /* per row */
    Py_ssize_t w;
    int mode;
    float wr, wg, wb;
} lum_ctx;

static int lum_span(void *arg, Py_ssize_t r0, Py_ssize_t r1) {
    const lum_ctx *c = (const lum_ctx *)arg;
    for (Py_ssize_t r = r0; r < r1; r++) {
        const float *px = c->rgb + r * c->w * 3;
        float *out = c->lum + r * c->w;
        double sr = 0.0, sg = 0.0, sb = 0.0;
        float lo = INFINITY;
        Py_ssize_t bad = 0;
        for (Py_ssize_t j = 0; j < c->w; j++) {
            const float R = px[3 * j], G = px[3 * j + 1], Bl = px[3 * j + 2];
            sr += R; sg += G; sb += Bl;
            float y = c->mode == 0 ? R * c->wr + G * c->wg + Bl * c->wb
                    : c->mode == 1 ? (R > G ? (R > Bl ? R : Bl) : (G > Bl ? G : Bl)) : (R + G + Bl) / 3.0f;
            out[j] = y > 0.0f ? y : 0.0f;
            lo = R < lo ? R : lo; lo = G < lo ? G : lo; lo = Bl < lo ? Bl : lo;
        }
        if (!isfinite(sr) || !isfinite(sg) || !isfinite(sb))
            for (Py_ssize_t k = 0; k < 3 * c->w; k++) bad += !isfinite(px[k]);
        c->sums[3 * r] = sr; c->sums[3 * r + 1] = sg; c->sums[3 * r + 2] = sb;
        c->lowest[r] = (double)lo;
        c->bad[r] = bad;
    }
    return 0;
}

/* luminance_rows(rgb f32[H*W*3], H, W, mode, (wr, wg, wb), lum f32[H*W] (out), sums f64[H*3] (out), threads)
 *   -> (lowest value, number of non-finite values) */
static PyObject *luminance_rows(PyObject *self, PyObject *args) {
    (void)self;
    Py_buffer rb, lb, sb;
    Py_ssize_t H, W;
    int mode, threads;
    double wr, wg, wb;
    if (!PyArg_ParseTuple(args, "y*nni(ddd)w*w*i", &rb, &H, &W, &mode, &wr, &wg, &wb, &lb, &sb, &threads)) return NULL;
    Py_buffer *all[] = {&rb, &lb, &sb};
    if (H <= 0 || W <= 0 || mode < 0 || mode > 2 || rb.len != (Py_ssize_t)(H * W * 3 * sizeof(float)) ||
        lb.len != (Py_ssize_t)(H * W * sizeof(float)) || sb.len != (Py_ssize_t)(H * 3 * sizeof(double))) {
        for (int k = 0; k < 3; k++) PyBuffer_Release(all[k]);
        PyErr_SetString(PyExc_ValueError, "luminance_rows: buffer sizes do not match the map");
        return NULL;
    }
    double *row_low = (double *)PyMem_RawMalloc((size_t)H * sizeof(double));
    Py_ssize_t *row_bad = (Py_ssize_t *)PyMem_RawMalloc((size_t)H * sizeof(Py_ssize_t));
    if (row_low == NULL || row_bad == NULL) {
        PyMem_RawFree(row_low); PyMem_RawFree(row_bad);
        for (int k = 0; k < 3; k++) PyBuffer_Release(all[k]);
        return PyErr_NoMemory();
    }
    lum_ctx ctx = {(const float *)rb.buf, (float *)lb.buf, (double *)sb.buf, row_low, row_bad, W, mode,
                   (float)wr, (float)wg, (float)wb};
    double lowest = INFINITY;
    Py_ssize_t bad = 0;
    Py_BEGIN_ALLOW_THREADS
    parallel_rows(lum_span, &ctx, H, threads);
    for (Py_ssize_t r = 0; r < H; r++) {
        if (row_low[r] < lowest) lowest = row_low[r];
        bad += row_bad[r];
    }
    Py_END_ALLOW_THREADS
    PyMem_RawFree(row_low);
    PyMem_RawFree(row_bad);
    for (int k = 0; k < 3; k++) PyBuffer_Release(all[k]);
    return Py_BuildValue("(dn)", lowest, bad);
}

/* ------------------------------------------------------------------ check_rows
 * The per-row consistency checks of envsample.sampling.checks, one pass per row:
 * status[r] = 0 ok, 1 pdf negative or non-finite, 2 conditional CDF not a CDF (ends, order,
 * finite), 3 conditional CDF steps differ from pdf / row sum, 4 alias probability outside
 * [0, 1], 5 alias index >= w, 6 alias-encoded probabilities differ from pdf / row sum.
 * "Differ" = |got - want| > atol + rtol * want, or got != 0 where want == 0. */
typedef struct {
    const float *pdf, *cdf, *prob;
    const uint16_t *alias;
    double atol, rtol;
    double *sums;
    int32_t *status;
    Py_ssize_t w;
} check_job;

static inline int differs(double got, double want, double atol, double rtol) {
    /* branch-free: got != 0 where want == 0, else |got - want| beyond the tolerance */
    return (want == 0.0) ? (got != 0.0) : (fabs(got - want) > atol + rtol * want);
}

static int check_one_row(const check_job *jb, Py_ssize_t r, double *enc) {
    const Py_ssize_t w = jb->w;
    const float *pdf = jb->pdf + r * w;
    double s = 0.0;
    int bad_pdf = 0;
    for (Py_ssize_t j = 0; j < w; j++) {
        float v = pdf[j];
        bad_pdf |= !(v >= 0.0f) || !isfinite(v);
        s += (double)v;
    }
    if (bad_pdf) return 1;
    jb->sums[r] = s;
    const double inv_s = s > 0.0 ? 1.0 / s : 0.0, inv_w = 1.0 / (double)w;
    if (jb->cdf != NULL) {
        const float *c = jb->cdf + r * (w + 1);
        if (c[0] != 0.0f || c[w] != 1.0f) return 2;
        int bad = 0;
        for (Py_ssize_t j = 0; j < w; j++) bad |= !(c[j + 1] >= c[j]) || !isfinite(c[j + 1]);
        if (bad) return 2;
        if (s > 0.0)
            for (Py_ssize_t j = 0; j < w; j++)
                bad |= differs((double)c[j + 1] - (double)c[j], (double)pdf[j] * inv_s, jb->atol, jb->rtol);
        if (bad) return 3;
    }
    if (jb->prob != NULL) {
        const float *p = jb->prob + r * w;
        const uint16_t *a = jb->alias + r * w;
        int bad_p = 0, bad_a = 0;
        for (Py_ssize_t j = 0; j < w; j++) {
            bad_p |= !(p[j] >= 0.0f && p[j] <= 1.0f);
            bad_a |= (Py_ssize_t)a[j] >= w;
        }
        if (bad_p) return 4;
        if (bad_a) return 5;
        if (s > 0.0) {
            int bad = 0;
            for (Py_ssize_t j = 0; j < w; j++) enc[j] = (double)p[j] * inv_w;
            for (Py_ssize_t j = 0; j < w; j++) enc[a[j]] += (1.0 - (double)p[j]) * inv_w;
            for (Py_ssize_t j = 0; j < w; j++) bad |= differs(enc[j], (double)pdf[j] * inv_s, jb->atol, jb->rtol);
            if (bad) return 6;
        }
    }
    return 0;
}

static int check_span(void *arg, Py_ssize_t r0, Py_ssize_t r1) {
    const check_job *jb = (const check_job *)arg;
    double *enc = NULL;
    if (jb->prob != NULL) {
        enc = (double *)malloc((size_t)jb->w * sizeof(double));
        if (enc == NULL) return 1;
    }
    for (Py_ssize_t r = r0; r < r1; r++) jb->status[r] = check_one_row(jb, r, enc);
    free(enc);
    return 0;
}

/* check_rows(pdf f32[h*w], h, w, cdf f32[h*(w+1)] or b"", prob f32[h*w] or b"", alias u16[h*w] or b"",
 *            atol, rtol, sums f64[h] (out: row sums of pdf), status i32[h] (out), threads) */
static PyObject *check_rows(PyObject *self, PyObject *args) {
    (void)self;
    Py_buffer fb, cb, pb, ab, sb, tb;
    Py_ssize_t h, w;
    double atol, rtol;
    int threads;
    if (!PyArg_ParseTuple(args, "y*nny*y*y*ddw*w*i", &fb, &h, &w, &cb, &pb, &ab, &atol, &rtol, &sb, &tb, &threads))
        return NULL;
    Py_buffer *all[] = {&fb, &cb, &pb, &ab, &sb, &tb};
    int want_cdf = cb.len > 0, want_alias = pb.len > 0;
    int ok = h > 0 && w > 0 && fb.len == (Py_ssize_t)(h * w * sizeof(float)) &&
             sb.len == (Py_ssize_t)(h * sizeof(double)) && tb.len == (Py_ssize_t)(h * sizeof(int32_t)) &&
             (!want_cdf || cb.len == (Py_ssize_t)(h * (w + 1) * sizeof(float))) &&
             (want_alias ? (pb.len == (Py_ssize_t)(h * w * sizeof(float)) &&
                            ab.len == (Py_ssize_t)(h * w * sizeof(uint16_t)))
                         : ab.len == 0);
    if (!ok) {
        for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
        PyErr_SetString(PyExc_ValueError, "check_rows: buffer sizes do not match the table");
        return NULL;
    }
    check_job ctx = {(const float *)fb.buf, want_cdf ? (const float *)cb.buf : NULL,
                     want_alias ? (const float *)pb.buf : NULL, want_alias ? (const uint16_t *)ab.buf : NULL,
                     atol, rtol, (double *)sb.buf, (int32_t *)tb.buf, w};
    int failed;
    Py_BEGIN_ALLOW_THREADS
    failed = parallel_rows(check_span, &ctx, h, threads);
    Py_END_ALLOW_THREADS
    for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
    if (failed) return PyErr_NoMemory();
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

/* One alias draw from bucket count n: bucket k = min(floor(u * n), n - 1) (u clamped to [0, 1)),
 * f = u * n - k; keep k when f < prob[k], else take alias[k]; the leftover fraction, rescaled
 * to [0, 1), is returned in *fresh.  All in double precision. */
static inline Py_ssize_t alias_pick(double u, Py_ssize_t n, const float *prob, Py_ssize_t *k_out, double *fresh) {
    double x = clamp_unit(u) * (double)n;
    Py_ssize_t k = (Py_ssize_t)x;
    if (k > n - 1) k = n - 1;
    *k_out = k;
    double f = x - (double)k, p = (double)prob[k], q, rest;
    Py_ssize_t keep = f < p;
    if (keep) { q = p; rest = f; } else { q = 1.0 - p; rest = f - p; }
    double fr = q > 0.0 ? rest / q : 0.0;
    *fresh = fr > 0x1.fffffffffffffp-1 ? 0x1.fffffffffffffp-1 : (fr < 0.0 ? 0.0 : fr);
    return keep;
}

/* sample_table(u f64[N*2], method 0=inverse 1=alias, marginal f32[h+1], conditional f32[h*(w+1)],
 *              row_prob f32[h], row_alias u32[h], prob f32[h*w], alias u16[h*w], pdf f32[h*w],
 *              cos_edges f64[h+1], row_sa f64[h], h, w, rot, mapping 0=equal-area 1=uv-linear,
 *              axes (6 ints: index,sign per world axis), out dirs f64[N*3], out pdf f64[N],
 *              out cells i64[N], edge)
 * The arrays of the method not used may be empty. */
static PyObject *sample_table(PyObject *self, PyObject *args) {
    Py_buffer ub, mb, cb, rpb, rab, pb, ab, fb, eb, sb, db, ob, kb;
    int method, mapping, i0, s0, i1, s1, i2, s2;
    Py_ssize_t h, w;
    double rot, edge;
    if (!PyArg_ParseTuple(args, "y*iy*y*y*y*y*y*y*y*y*nndi(iiiiii)w*w*w*d", &ub, &method, &mb, &cb, &rpb, &rab, &pb,
                          &ab, &fb, &eb, &sb, &h, &w, &rot, &mapping, &i0, &s0, &i1, &s1, &i2, &s2, &db, &ob, &kb,
                          &edge))
        return NULL;
    Py_buffer *all[] = {&ub, &mb, &cb, &rpb, &rab, &pb, &ab, &fb, &eb, &sb, &db, &ob, &kb};
    const int nbuf = (int)(sizeof(all) / sizeof(all[0]));
    Py_ssize_t N = ub.len / (Py_ssize_t)(2 * sizeof(double));
    int ok = h > 0 && w > 0 && fb.len == (Py_ssize_t)(h * w * sizeof(float)) &&
             eb.len == (Py_ssize_t)((h + 1) * sizeof(double)) && sb.len == (Py_ssize_t)(h * sizeof(double)) &&
             db.len == (Py_ssize_t)(N * 3 * sizeof(double)) && ob.len == (Py_ssize_t)(N * sizeof(double)) &&
             kb.len == (Py_ssize_t)(N * sizeof(int64_t)) && i0 >= 0 && i0 < 3 && i1 >= 0 && i1 < 3 && i2 >= 0 &&
             i2 < 3;
    if (method == 0)
        ok = ok && mb.len == (Py_ssize_t)((h + 1) * sizeof(float)) &&
             cb.len == (Py_ssize_t)(h * (w + 1) * sizeof(float));
    else
        ok = ok && rpb.len == (Py_ssize_t)(h * sizeof(float)) && rab.len == (Py_ssize_t)(h * sizeof(uint32_t)) &&
             pb.len == (Py_ssize_t)(h * w * sizeof(float)) && ab.len == (Py_ssize_t)(h * w * sizeof(uint16_t));
    if (!ok) {
        for (int k = 0; k < nbuf; k++) PyBuffer_Release(all[k]);
        PyErr_SetString(PyExc_ValueError, "sample_table: buffer sizes do not match the table");
        return NULL;
    }
    const double *u = (const double *)ub.buf;
    const float *marg = (const float *)mb.buf, *cond = (const float *)cb.buf, *prob = (const float *)pb.buf;
    const float *rprob = (const float *)rpb.buf;
    const uint32_t *ralias = (const uint32_t *)rab.buf;
    const uint16_t *alias = (const uint16_t *)ab.buf;
    const float *cpdf = (const float *)fb.buf;
    const double *cosE = (const double *)eb.buf, *rowsa = (const double *)sb.buf;
    double *dirs = (double *)db.buf, *opdf = (double *)ob.buf;
    int64_t *cells = (int64_t *)kb.buf;
    const int idx[3] = {i0, i1, i2};
    const double sgn[3] = {(double)s0, (double)s1, (double)s2};
    const double two_pi_w = 2.0 * M_PI / (double)w, pi_h = M_PI / (double)h;
    const double uvscale = (double)(h * w) / (2.0 * M_PI * M_PI);
    /* Samples go in blocks: each stage issues the block's independent memory reads
       (prefetches, or one bisection step for every lane) before any of them is needed,
       so cache misses overlap instead of queueing one sample at a time. */
    enum { B = 32 };
    Py_ssize_t bad = 0;
    Py_BEGIN_ALLOW_THREADS
    /* NaN or Inf in u is refused by the caller with the count this returns; it is counted
       block by block as u is read (the outputs are then discarded) */
    const Py_ssize_t steps_h = (Py_ssize_t)ceil(log2((double)h)), steps_w = (Py_ssize_t)ceil(log2((double)w));
    for (Py_ssize_t s0 = 0; s0 < N; s0 += B) {
        const int m = (int)(N - s0 < B ? N - s0 : B);
        for (int t = 0; t < 2 * m; t++) bad += !isfinite(u[2 * s0 + t]);
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
            /* two-level alias: u0 picks the row from the row table (its leftover fraction is fv),
               u1 the column from that row's table (its leftover fraction is fu).  The row table
               is small (in cache); the rows' tables are prefetched for the whole block first. */
            for (int t = 0; t < m; t++) {
                Py_ssize_t k;
                int keep = (int)alias_pick(u[2 * (s0 + t)], h, rprob, &k, &fvv[t]);
                rowv[t] = keep ? k : (Py_ssize_t)ralias[k];
                double x = clamp_unit(u[2 * (s0 + t) + 1]) * (double)w;
                Py_ssize_t kc = (Py_ssize_t)x;
                if (kc > w - 1) kc = w - 1;
                __builtin_prefetch(prob + rowv[t] * w + kc);
                __builtin_prefetch(alias + rowv[t] * w + kc);
            }
            for (int t = 0; t < m; t++) {
                Py_ssize_t k;
                const Py_ssize_t base = rowv[t] * w;
                int keep = (int)alias_pick(u[2 * (s0 + t) + 1], w, prob + base, &k, &fuv[t]);
                colv[t] = keep ? k : (Py_ssize_t)alias[base + k];
                __builtin_prefetch(cpdf + base + colv[t]);
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
    for (int k = 0; k < nbuf; k++) PyBuffer_Release(all[k]);
    return PyLong_FromSsize_t(bad);
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
        cdf_row(src, w, acc, dst);
    }
    Py_END_ALLOW_THREADS
    PyBuffer_Release(&wb); PyBuffer_Release(&sb); PyBuffer_Release(&ob); PyBuffer_Release(&tb);
    Py_RETURN_NONE;
}

static PyMethodDef methods[] = {
    {"alias_sweep", alias_sweep, METH_VARARGS, "O(n) alias table construction (sweeping method)."},
    {"build_rows", build_rows, METH_VARARGS, "Per-row conditional CDFs and alias tables, rows split across threads."},
    {"luminance_rows", luminance_rows, METH_VARARGS, "Luminance, per-row channel sums, lowest value, non-finite count."},
    {"check_rows", check_rows, METH_VARARGS, "Per-row consistency checks of a loaded table."},
    {"sample_table", sample_table, METH_VARARGS, "Draw directions and pdfs from a table."},
    {"row_cdfs", row_cdfs, METH_VARARGS, "Conditional CDFs of every row, float64 accumulation."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_kernels", "Optional compiled kernels for envsample.", -1,
                                    methods, NULL, NULL, NULL, NULL};

PyMODINIT_FUNC PyInit__kernels(void) { return PyModule_Create(&module); }
