/*
 * Optional compiled kernel of the exact reference irradiance (built by setup.py when a C
 * compiler is available; envsample.reference.boundary holds the numpy code used otherwise).
 *
 * row_sums        : per-row float64 sums of the map (first moment, absolute power).
 * ggx_rects       : the integrand of the glossy reference (envsample.reference.glossy)
 *                   integrated over (theta, phi) rectangles by 2x2 Gauss-Legendre.
 * irradiance_rows : the boundary form of E(n) = integral of L(w) max(0, n.w) dw
 *                   (Stokes' theorem on the sphere, Arvo 1995; derivation in
 *                   envsample/reference/irradiance.py) restricted to the map rows
 *                   row0 .. row1-1, for every normal, accumulated into out.
 *
 * Organisation: the map is streamed row by row (row outer, normals inner), so each row's
 * prefix sums (15 doubles per column) are built once and stay in cache while every normal
 * reads them.  Per map row r and normal n the row contributes
 *   (a) its share of the two latitude-edge terms (edges r and r+1; the jump
 *       L(r-1) - L(r) of an edge is split between the rows, so only the row's own
 *       antiderivatives in phi are needed),
 *   (b) the meridian-edge segments of the row that are wholly lit (one prefix difference
 *       of cos(phi_j) G_j and sin(phi_j) G_j, G_j = L_j - L_(j-1)),
 *   (c) where the horizon great circle crosses the row: its arcs (each within one cell)
 *       and the lit part of the meridian segments it cuts.
 * Everything that depends only on n_z (the lit half-width beta of each latitude edge,
 * its arccos and the horizon's arc parameter at the crossing) is computed once per group
 * of normals sharing n_z and n_h, for instance a row of a lat-long grid of normals.
 * Rows wholly below a normal's horizon are skipped, wholly lit rows use the row totals,
 * and a constant row needs no table and no walk along the horizon.
 *
 * The horizon of n (n_h > 0, n_z != 0) is a graph over the relative azimuth
 * psi = phi - phi_n; on each half (sin psi >= 0 and its mirror image) the angle along
 * the great circle is sigma(psi) = atan2(-cos psi, |n_z| |sin psi|), increasing with |psi|
 * from -pi/2 to pi/2, so an arc's length is a difference of sigma.  The partition of the
 * meridians between "wholly lit", "cut" and "unlit" segments, the cells of the horizon arcs
 * and the lit intervals of the latitude edges all come from one set of column indices per
 * (normal, edge), so they agree exactly whatever the rounding.
 *
 * All sums are float64; the caller sums the partial results of fixed row ranges in a fixed
 * order, so results are bit-identical between runs whatever the number of threads.
 * Only the CPython buffer protocol is used (no numpy headers).
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>
#include <stdint.h>
#include <string.h>

#define EDGE_EMPTY 0
#define EDGE_PARTIAL 1
#define EDGE_FULL 2

/* Lit interval of one latitude edge for one group of normals (shared n_z, n_h). */
typedef struct {
    int state;
    double x;     /* cos(beta) */
    double sinb;  /* sin(beta), from (1 - x)(1 + x) */
    double b;     /* beta in column units (beta * W / 2 pi) */
    double sigma; /* arc parameter of the horizon where it crosses the edge */
} edge_t;

/* One normal: horizontal direction and its column position. */
typedef struct {
    double hx, hy;   /* cos, sin of phi_n */
    double nx, ny;   /* n_h cos phi_n, n_h sin phi_n */
    double u;        /* (phi_n + pi) * W / (2 pi) */
    Py_ssize_t f0;   /* floor(u) */
    Py_ssize_t rfull, lfull; /* meridians right and left of f0 in a full circle (sum W) */
} normal_t;

/* Column indices (unwrapped) of one lit interval: meridians jm+1 .. jp are lit. */
typedef struct {
    Py_ssize_t jm, jp;
    double pm, pp;       /* interval ends in column units */
    double sm, cm, sp, cp; /* sin, cos of phi at the ends */
} span_t;

typedef struct {
    const void *L;
    int dbl;
    Py_ssize_t H, W;
    const double *mu, *s, *theta, *cph, *sph;
    double cw, dphi, dtheta, bpi;
} map_t;

static inline void pix(const map_t *m, Py_ssize_t r, Py_ssize_t j, double v[3]) {
    Py_ssize_t k = (r * m->W + j) * 3;
    if (m->dbl) {
        const double *p = (const double *)m->L + k;
        v[0] = p[0]; v[1] = p[1]; v[2] = p[2];
    } else {
        const float *p = (const float *)m->L + k;
        v[0] = (double)p[0]; v[1] = (double)p[1]; v[2] = (double)p[2];
    }
}

static inline Py_ssize_t floordiv(Py_ssize_t a, Py_ssize_t b) {
    Py_ssize_t q = a / b;
    return (a % b != 0 && ((a < 0) != (b < 0))) ? q - 1 : q;
}

static void edge_data(const map_t *m, Py_ssize_t k, double nz, double nh, edge_t *e) {
    double mu = m->mu[k], s = m->s[k];
    double x;
    if (nh == 0.0) { /* polar normal: the horizon is the equator; an edge on it is unlit */
        x = (nz * mu > 0.0) ? -2.0 : 2.0;
    } else if (s == 0.0) { /* a pole */
        double t = nz * mu;
        x = t > 0.0 ? -2.0 : (t < 0.0 ? 2.0 : 0.0);
    } else {
        x = -(nz * mu) / (nh * s);
    }
    if (x >= 1.0) {
        e->state = EDGE_EMPTY; e->x = 1.0; e->sinb = 0.0; e->b = 0.0; e->sigma = -M_PI_2;
    } else if (x <= -1.0) {
        e->state = EDGE_FULL; e->x = -1.0; e->sinb = 0.0; e->b = m->bpi; e->sigma = M_PI_2;
    } else {
        e->state = EDGE_PARTIAL;
        e->x = x;
        e->sinb = sqrt((1.0 - x) * (1.0 + x));
        e->b = acos(x) * m->cw;
        e->sigma = atan2(-x, fabs(nz) * e->sinb);
    }
}

static void span_of(const normal_t *q, const edge_t *e, span_t *sp) {
    if (e->state == EDGE_EMPTY) {
        sp->jm = sp->jp = q->f0;
    } else if (e->state == EDGE_FULL) {
        sp->jp = q->f0 + q->rfull;
        sp->jm = q->f0 - q->lfull;
    } else {
        sp->pp = q->u + e->b;
        sp->pm = q->u - e->b;
        sp->jp = (Py_ssize_t)floor(sp->pp);
        Py_ssize_t jm = (Py_ssize_t)floor(sp->pm);
        sp->jm = jm < q->f0 - q->lfull ? q->f0 - q->lfull : jm;
        sp->sp = q->hy * e->x + q->hx * e->sinb;
        sp->cp = q->hx * e->x - q->hy * e->sinb;
        sp->sm = q->hy * e->x - q->hx * e->sinb;
        sp->cm = q->hx * e->x + q->hy * e->sinb;
    }
}

/* Row tables, per column j (TAB doubles): exclusive prefixes at meridian j of
   L dsin(phi), -L dcos(phi), L dphi (cells 0..j-1); inclusive prefixes over meridians
   0..j of cos(phi_j) G_j and sin(phi_j) G_j; then L of cell j.  Entry W holds the totals. */
#define TAB 18

static void build_row(const map_t *m, Py_ssize_t r, double *t) {
    Py_ssize_t W = m->W;
    double a[9] = {0}, q[6] = {0}, v[3], prev[3];
    pix(m, r, W - 1, prev);
    for (Py_ssize_t j = 0; j < W; j++) {
        double *row = t + j * TAB;
        pix(m, r, j, v);
        double ds = m->sph[j + 1] - m->sph[j], dc = m->cph[j] - m->cph[j + 1];
        for (int c = 0; c < 3; c++) {
            double g = v[c] - prev[c];
            row[c] = a[c];
            row[3 + c] = a[3 + c];
            row[6 + c] = a[6 + c];
            q[c] += m->cph[j] * g;
            q[3 + c] += m->sph[j] * g;
            row[9 + c] = q[c];
            row[12 + c] = q[3 + c];
            row[15 + c] = v[c];
            a[c] += v[c] * ds;
            a[3 + c] += v[c] * dc;
            a[6 + c] += v[c] * m->dphi;
            prev[c] = v[c];
        }
    }
    double *end = t + W * TAB;
    for (int c = 0; c < 9; c++) end[c] = a[c];
    for (int c = 0; c < 6; c++) end[9 + c] = q[c];
    for (int c = 0; c < 3; c++) end[15 + c] = 0.0;
}

static int row_is_constant(const map_t *m, Py_ssize_t r, double v0[3]) {
    double v[3];
    pix(m, r, 0, v0);
    for (Py_ssize_t j = 1; j < m->W; j++) {
        pix(m, r, j, v);
        if (v[0] != v0[0] || v[1] != v0[1] || v[2] != v0[2]) return 0;
    }
    return 1;
}

/* Integrals of L(phi) (cos phi, sin phi, 1) d phi over the lit interval of an edge, 9 values
   (3 weights x 3 channels); lc is the row's value when the row is constant, else NULL. */
static void lat_integrals(const map_t *m, const double *t, const double *lc, const edge_t *e,
                          const span_t *sp, double f[9]) {
    Py_ssize_t W = m->W;
    if (e->state == EDGE_FULL) {
        for (int c = 0; c < 3; c++) {
            f[c] = lc ? 0.0 : t[W * TAB + c];
            f[3 + c] = lc ? 0.0 : t[W * TAB + 3 + c];
            f[6 + c] = lc ? 2.0 * M_PI * lc[c] : t[W * TAB + 6 + c];
        }
        return;
    }
    if (lc) {
        double len = (sp->pp - sp->pm) * m->dphi;
        for (int c = 0; c < 3; c++) {
            f[c] = lc[c] * (sp->sp - sp->sm);
            f[3 + c] = lc[c] * (sp->cm - sp->cp);
            f[6 + c] = lc[c] * len;
        }
        return;
    }
    const double *tot = t + W * TAB;
    for (int c = 0; c < 9; c++) f[c] = 0.0;
    for (int side = 0; side < 2; side++) {
        Py_ssize_t J = side ? sp->jp : sp->jm;
        double pos = side ? sp->pp : sp->pm, sn = side ? sp->sp : sp->sm, cs = side ? sp->cp : sp->cm;
        double sgn = side ? 1.0 : -1.0;
        Py_ssize_t q = floordiv(J, W), j = J - q * W;
        const double *row = t + j * TAB;
        double off = (pos - (double)J) * m->dphi, dsn = sn - m->sph[j], dcs = m->cph[j] - cs;
        for (int c = 0; c < 3; c++) {
            double l = row[15 + c];
            f[c] += sgn * (row[c] + (double)q * tot[c] + l * dsn);
            f[3 + c] += sgn * (row[3 + c] + (double)q * tot[3 + c] + l * dcs);
            f[6 + c] += sgn * (row[6 + c] + (double)q * tot[6 + c] + l * off);
        }
    }
}

/* Sums over the lit meridians jm+1 .. jp of cos(phi_j) G_j and sin(phi_j) G_j, 6 values. */
static void mer_sums(const map_t *m, const double *t, const edge_t *e, const span_t *sp, double g[6]) {
    Py_ssize_t W = m->W;
    const double *tot = t + W * TAB;
    if (e->state == EDGE_EMPTY) {
        for (int c = 0; c < 6; c++) g[c] = 0.0;
        return;
    }
    if (e->state == EDGE_FULL) {
        for (int c = 0; c < 6; c++) g[c] = tot[9 + c];
        return;
    }
    Py_ssize_t qp = floordiv(sp->jp, W), jp = sp->jp - qp * W;
    Py_ssize_t qm = floordiv(sp->jm, W), jm = sp->jm - qm * W;
    for (int c = 0; c < 6; c++)
        g[c] = (t[jp * TAB + 9 + c] + (double)qp * tot[9 + c]) - (t[jm * TAB + 9 + c] + (double)qm * tot[9 + c]);
}

/* The horizon within row r on one side: meridians j = j0+1 .. j1 (unwrapped), from the
   crossing with sigma s_start to the one with s_end; dir = +1 on the side sin psi > 0
   (sigma grows along the walk), -1 on the mirror side.  Adds arcs x L and the cut
   meridian segments' n.(w x t) G x lit length to acc. */
static void walk(const map_t *m, const double *t, const normal_t *q, double nz, Py_ssize_t r, Py_ssize_t j0,
                 Py_ssize_t j1, double s_start, double s_end, double dir, double acc[3]) {
    Py_ssize_t W = m->W;
    double anz = fabs(nz), snz = nz > 0.0 ? 1.0 : -1.0;
    double th0 = m->theta[r], th1 = m->theta[r + 1];
    double prev = s_start;
    Py_ssize_t jj = floordiv(j0, W);
    jj = j0 - jj * W; /* column of the first arc */
    for (Py_ssize_t j = j0 + 1; j <= j1; j++) {
        Py_ssize_t k = jj + 1 == W ? 0 : jj + 1; /* meridian j */
        double c = q->nx * m->cph[k] + q->ny * m->sph[k];
        double nm = q->ny * m->cph[k] - q->nx * m->sph[k];
        double sg = atan2(-c, anz * fabs(nm));
        double arc = dir * (sg - prev);
        double thc = atan2(anz, -snz * c);
        double len = nz > 0.0 ? thc - th0 : th1 - thc;
        const double *a = t + jj * TAB + 15, *b = t + k * TAB + 15;
        for (int ch = 0; ch < 3; ch++) acc[ch] += a[ch] * arc + nm * (b[ch] - a[ch]) * len;
        prev = sg;
        jj = k;
    }
    double arc = dir * (s_end - prev);
    const double *a = t + jj * TAB + 15;
    for (int ch = 0; ch < 3; ch++) acc[ch] += a[ch] * arc;
}

typedef struct {
    const map_t *m;
    const double *t;   /* row table (NULL for a constant row) */
    const double *lc;  /* constant row value or NULL */
    Py_ssize_t r, row_eq;
} row_t;

/* Contribution (times 2) of row r to the irradiance of one normal. */
static void row_normal(const row_t *R, const normal_t *q, double nz, double nh, const edge_t *et,
                       const edge_t *eb, double acc[3]) {
    const map_t *m = R->m;
    Py_ssize_t r = R->r;
    acc[0] = acc[1] = acc[2] = 0.0;
    if (et->state == EDGE_EMPTY && eb->state == EDGE_EMPTY) return; /* wholly below the horizon */
    span_t st, sb;
    span_of(q, et, &st);
    span_of(q, eb, &sb);
    /* (a) latitude edges r (top, jump enters with -) and r + 1 (bottom, +) */
    const edge_t *es[2] = {et, eb};
    const span_t *ss[2] = {&st, &sb};
    for (int side = 0; side < 2; side++) {
        Py_ssize_t k = r + side;
        double s = m->s[k], mu = m->mu[k];
        if (s == 0.0 || es[side]->state == EDGE_EMPTY) continue;
        double f[9];
        lat_integrals(m, R->t, R->lc, es[side], ss[side], f);
        double wc = -mu * s * q->nx, ws = -mu * s * q->ny, w1 = s * s * nz, sg = side ? 1.0 : -1.0;
        for (int c = 0; c < 3; c++) acc[c] += sg * (wc * f[c] + ws * f[3 + c] + w1 * f[6 + c]);
    }
    if (nh == 0.0) { /* polar normal: the horizon is the equator, in the lit row next to it */
        if (r == R->row_eq)
            for (int c = 0; c < 3; c++) acc[c] += R->lc ? 2.0 * M_PI * R->lc[c] : R->t[m->W * TAB + 6 + c];
        return;
    }
    /* the edge with the smaller lit interval bounds the wholly lit meridian segments */
    int small_is_top = nz < 0.0;
    const edge_t *eS = small_is_top ? et : eb, *eB = small_is_top ? eb : et;
    const span_t *sS = small_is_top ? &st : &sb, *sB = small_is_top ? &sb : &st;
    if (R->t) { /* (b) wholly lit meridian segments (G = 0 in a constant row) */
        double g[6];
        mer_sums(m, R->t, eS, sS, g);
        for (int c = 0; c < 3; c++) acc[c] += m->dtheta * (q->ny * g[c] - q->nx * g[3 + c]);
    }
    if (nz == 0.0) { /* the horizon: two half-meridians, in the cells after the lit meridians */
        Py_ssize_t W = m->W;
        Py_ssize_t jp = sS->jp - floordiv(sS->jp, W) * W, jm = sS->jm - floordiv(sS->jm, W) * W;
        double vp[3], vm[3];
        if (R->lc) { for (int c = 0; c < 3; c++) vp[c] = vm[c] = R->lc[c]; }
        else { for (int c = 0; c < 3; c++) { vp[c] = R->t[jp * TAB + 15 + c]; vm[c] = R->t[jm * TAB + 15 + c]; } }
        for (int c = 0; c < 3; c++) acc[c] += m->dtheta * (vp[c] + vm[c]);
        return;
    }
    if (eS->state == eB->state && eS->state != EDGE_PARTIAL) return; /* no horizon in this row */
    /* (c) the horizon crosses the row where beta_small < |psi| <= beta_big */
    if (R->lc) {
        for (int c = 0; c < 3; c++) acc[c] += 2.0 * R->lc[c] * (eB->sigma - eS->sigma);
        return;
    }
    walk(m, R->t, q, nz, r, sS->jp, sB->jp, eS->sigma, eB->sigma, 1.0, acc);
    walk(m, R->t, q, nz, r, sB->jm, sS->jm, eB->sigma, eS->sigma, -1.0, acc);
}

/* irradiance_rows(L: float32/float64 [H*W*3], is_double, H, W,
 *                 grid: float64 [mu (H+1), s (H+1), theta (H+1), cos phi (W+1), sin phi (W+1)],
 *                 hxy: float64 [N*2] (cos, sin of each normal's azimuth in the map frame),
 *                 gid: int64 [N] (group of each normal), groups: float64 [G*2] (n_z, n_h),
 *                 row0, row1, out: float64 [N*3] (written: this row range's share of E)) */
static PyObject *irradiance_rows(PyObject *self, PyObject *args) {
    (void)self;
    Py_buffer lb, gb, hb, ib, pb, ob;
    int dbl;
    Py_ssize_t H, W, row0, row1;
    if (!PyArg_ParseTuple(args, "y*inny*y*y*y*nnw*", &lb, &dbl, &H, &W, &gb, &hb, &ib, &pb, &row0, &row1, &ob))
        return NULL;
    Py_buffer *all[6] = {&lb, &gb, &hb, &ib, &pb, &ob};
    Py_ssize_t N = ib.len / (Py_ssize_t)sizeof(int64_t), G = pb.len / (Py_ssize_t)(2 * sizeof(double));
    Py_ssize_t esize = dbl ? (Py_ssize_t)sizeof(double) : (Py_ssize_t)sizeof(float);
    if (H < 1 || W < 2 || row0 < 0 || row1 > H || row0 > row1 || lb.len != H * W * 3 * esize ||
        gb.len != (3 * (H + 1) + 2 * (W + 1)) * (Py_ssize_t)sizeof(double) ||
        hb.len != N * 2 * (Py_ssize_t)sizeof(double) || ob.len != N * 3 * (Py_ssize_t)sizeof(double) ||
        pb.len != G * 2 * (Py_ssize_t)sizeof(double)) {
        for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
        PyErr_SetString(PyExc_ValueError, "irradiance_rows: buffer sizes do not match");
        return NULL;
    }
    const int64_t *gid = (const int64_t *)ib.buf;
    for (Py_ssize_t n = 0; n < N; n++) {
        if (gid[n] < 0 || gid[n] >= G) {
            for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
            PyErr_SetString(PyExc_ValueError, "irradiance_rows: group index out of range");
            return NULL;
        }
    }
    double *tab = (double *)PyMem_RawMalloc((size_t)(W + 1) * TAB * sizeof(double));
    edge_t *edges = (edge_t *)PyMem_RawMalloc((size_t)(2 * G + 1) * sizeof(edge_t));
    normal_t *nrm = (normal_t *)PyMem_RawMalloc((size_t)(N + 1) * sizeof(normal_t));
    if (!tab || !edges || !nrm) {
        PyMem_RawFree(tab); PyMem_RawFree(edges); PyMem_RawFree(nrm);
        for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
        return PyErr_NoMemory();
    }
    const double *grid = (const double *)gb.buf, *hxy = (const double *)hb.buf, *grp = (const double *)pb.buf;
    double *out = (double *)ob.buf;
    map_t m;
    m.L = lb.buf; m.dbl = dbl; m.H = H; m.W = W;
    m.mu = grid; m.s = grid + (H + 1); m.theta = grid + 2 * (H + 1);
    m.cph = grid + 3 * (H + 1); m.sph = m.cph + (W + 1);
    m.cw = (double)W / (2.0 * M_PI);
    m.dphi = 2.0 * M_PI / (double)W;
    m.dtheta = M_PI / (double)H;
    m.bpi = M_PI * m.cw;
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t n = 0; n < N; n++) {
        normal_t *q = nrm + n;
        double nh = grp[2 * gid[n] + 1];
        q->hx = hxy[2 * n];
        q->hy = hxy[2 * n + 1];
        q->nx = nh * q->hx;
        q->ny = nh * q->hy;
        q->u = (atan2(q->hy, q->hx) + M_PI) * m.cw;
        q->f0 = (Py_ssize_t)floor(q->u);
        q->rfull = (Py_ssize_t)floor(q->u + m.bpi) - q->f0;
        q->lfull = W - q->rfull;
    }
    for (Py_ssize_t k = 0; k < 3 * N; k++) out[k] = 0.0;
    edge_t *top = edges, *bot = edges + G;
    for (Py_ssize_t g = 0; g < G; g++) edge_data(&m, row0, grp[2 * g], grp[2 * g + 1], top + g);
    for (Py_ssize_t r = row0; r < row1; r++) {
        for (Py_ssize_t g = 0; g < G; g++) edge_data(&m, r + 1, grp[2 * g], grp[2 * g + 1], bot + g);
        double lc[3];
        int constant = row_is_constant(&m, r, lc);
        if (!constant) build_row(&m, r, tab);
        row_t R = {&m, constant ? NULL : tab, constant ? lc : NULL, r, 0};
        for (Py_ssize_t n = 0; n < N; n++) {
            Py_ssize_t g = gid[n];
            double nz = grp[2 * g], nh = grp[2 * g + 1], acc[3];
            R.row_eq = (H % 2) ? (H - 1) / 2 : (nz > 0.0 ? H / 2 - 1 : H / 2);
            row_normal(&R, nrm + n, nz, nh, top + g, bot + g, acc);
            for (int c = 0; c < 3; c++) out[3 * n + c] += 0.5 * acc[c];
        }
        edge_t *tmp = top; top = bot; bot = tmp;
    }
    Py_END_ALLOW_THREADS
    PyMem_RawFree(tab); PyMem_RawFree(edges); PyMem_RawFree(nrm);
    for (int k = 0; k < 6; k++) PyBuffer_Release(all[k]);
    Py_RETURN_NONE;
}

/* row_sums(L: float32/float64 [H*W*3], is_double, H, W, cph, sph: float64 [W+1] each (one buffer),
 *          out: float64 [H*12]): per row and channel, float64 sums of L (sin phi_(j+1) - sin phi_j),
 *          L (cos phi_j - cos phi_(j+1)), L and |L| (the first moment's row factors and the
 *          absolute power of reference_accuracy, in one pass). */
static PyObject *row_sums(PyObject *self, PyObject *args) {
    (void)self;
    Py_buffer lb, cb, ob;
    int dbl;
    Py_ssize_t H, W;
    if (!PyArg_ParseTuple(args, "y*inny*w*", &lb, &dbl, &H, &W, &cb, &ob)) return NULL;
    Py_ssize_t esize = dbl ? (Py_ssize_t)sizeof(double) : (Py_ssize_t)sizeof(float);
    if (H < 1 || W < 1 || lb.len != H * W * 3 * esize || cb.len != 2 * (W + 1) * (Py_ssize_t)sizeof(double) ||
        ob.len != H * 12 * (Py_ssize_t)sizeof(double)) {
        PyBuffer_Release(&lb); PyBuffer_Release(&cb); PyBuffer_Release(&ob);
        PyErr_SetString(PyExc_ValueError, "row_sums: buffer sizes do not match");
        return NULL;
    }
    map_t m;
    m.L = lb.buf; m.dbl = dbl; m.H = H; m.W = W;
    m.cph = (const double *)cb.buf; m.sph = m.cph + (W + 1);
    double *out = (double *)ob.buf;
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t r = 0; r < H; r++) {
        double a[12] = {0}, v[3];
        for (Py_ssize_t j = 0; j < W; j++) {
            pix(&m, r, j, v);
            double ds = m.sph[j + 1] - m.sph[j], dc = m.cph[j] - m.cph[j + 1];
            for (int c = 0; c < 3; c++) {
                a[c] += v[c] * ds;
                a[3 + c] += v[c] * dc;
                a[6 + c] += v[c];
                a[9 + c] += fabs(v[c]);
            }
        }
        for (int k = 0; k < 12; k++) out[r * 12 + k] = a[k];
    }
    Py_END_ALLOW_THREADS
    PyBuffer_Release(&lb); PyBuffer_Release(&cb); PyBuffer_Release(&ob);
    Py_RETURN_NONE;
}

/* ---- glossy reference: GGX (F = 1) f(wi, wo) max(0, n.wi), 2x2 Gauss-Legendre per rectangle ---- */

/* The integrand of envsample.sampling.ggx.GGXReflection.eval times the cosine, in the
   local frame of the normal (z along n): D of Walter et al. (2007), height-correlated Smith
   G2 of Heitz (2014), written as in ggx_d / ggx_lambda / ggx_g2 of envsample.sampling.ggx. */
static inline double ggx_kernel(const double wi[3], const double wo[3], double a2) {
    if (wi[2] <= 0.0 || wo[2] <= 0.0) return 0.0;
    double hx = wi[0] + wo[0], hy = wi[1] + wo[1], hz = wi[2] + wo[2];
    double norm = sqrt(hx * hx + hy * hy + hz * hz);
    if (!(norm > 1e-12)) return 0.0;
    hz /= norm;
    if (hz <= 0.0) return 0.0;
    double denom = hz * hz * (a2 - 1.0) + 1.0;
    double d = a2 / (M_PI * denom * denom);
    double zi = wi[2] * wi[2], zo = wo[2] * wo[2];
    double li = 0.5 * (sqrt(zi + a2 * fmax(0.0, 1.0 - zi)) / fmax(fabs(wi[2]), 1e-300) - 1.0);
    double lo = 0.5 * (sqrt(zo + a2 * fmax(0.0, 1.0 - zo)) / fmax(fabs(wo[2]), 1e-300) - 1.0);
    double g2 = 1.0 / (1.0 + li + lo);
    return d * g2 / (4.0 * (wi[2] * wo[2])) * wi[2];
}

/* ggx_rects(t0, t1, p0, p1: float64[m] (theta, phi rectangles in the map frame),
 *           rot: float64[9] (rows: the normal's local axes in map-frame coordinates),
 *           wo: float64[3] (local), alpha, out: float64[m])
 * out = integral over each rectangle of the kernel, 2x2 Gauss-Legendre in (theta, phi) with
 * the sin(theta) weight (Abramowitz & Stegun 25.4.29 nodes +-1/sqrt 3). */
static PyObject *ggx_rects(PyObject *self, PyObject *args) {
    (void)self;
    Py_buffer b0, b1, b2, b3, rb, wb, ob;
    double alpha;
    if (!PyArg_ParseTuple(args, "y*y*y*y*y*y*dw*", &b0, &b1, &b2, &b3, &rb, &wb, &alpha, &ob)) return NULL;
    Py_buffer *all[7] = {&b0, &b1, &b2, &b3, &rb, &wb, &ob};
    Py_ssize_t m = ob.len / (Py_ssize_t)sizeof(double), bytes = m * (Py_ssize_t)sizeof(double);
    if (b0.len != bytes || b1.len != bytes || b2.len != bytes || b3.len != bytes ||
        rb.len != 9 * (Py_ssize_t)sizeof(double) || wb.len != 3 * (Py_ssize_t)sizeof(double)) {
        for (int k = 0; k < 7; k++) PyBuffer_Release(all[k]);
        PyErr_SetString(PyExc_ValueError, "ggx_rects: buffer sizes do not match");
        return NULL;
    }
    const double *t0 = (const double *)b0.buf, *t1 = (const double *)b1.buf;
    const double *p0 = (const double *)b2.buf, *p1 = (const double *)b3.buf;
    const double *R = (const double *)rb.buf, *wo = (const double *)wb.buf;
    double *out = (double *)ob.buf;
    double a2 = alpha * alpha, g = 1.0 / sqrt(3.0), nodes[2] = {-g, g};
    Py_BEGIN_ALLOW_THREADS
    for (Py_ssize_t k = 0; k < m; k++) {
        double tc = 0.5 * (t0[k] + t1[k]), th = 0.5 * (t1[k] - t0[k]);
        double pc = 0.5 * (p0[k] + p1[k]), ph = 0.5 * (p1[k] - p0[k]);
        double acc = 0.0;
        for (int a = 0; a < 2; a++) {
            double t = tc + th * nodes[a], st = sin(t), ct = cos(t);
            for (int b = 0; b < 2; b++) {
                double p = pc + ph * nodes[b];
                double d0 = st * cos(p), d1 = st * sin(p), d2 = ct;
                double wi[3] = {R[0] * d0 + R[1] * d1 + R[2] * d2, R[3] * d0 + R[4] * d1 + R[5] * d2,
                                R[6] * d0 + R[7] * d1 + R[8] * d2};
                acc += ggx_kernel(wi, wo, a2) * st;
            }
        }
        out[k] = 0.25 * (t1[k] - t0[k]) * (p1[k] - p0[k]) * acc;
    }
    Py_END_ALLOW_THREADS
    for (int k = 0; k < 7; k++) PyBuffer_Release(all[k]);
    Py_RETURN_NONE;
}

static PyMethodDef methods[] = {
    {"irradiance_rows", irradiance_rows, METH_VARARGS,
     "Exact irradiance of a piecewise-constant map, the share of a range of rows (boundary form)."},
    {"row_sums", row_sums, METH_VARARGS, "Per-row float64 sums of the map for its first moment and power."},
    {"ggx_rects", ggx_rects, METH_VARARGS, "GGX (F = 1) kernel integrated over (theta, phi) rectangles, 2x2 Gauss-Legendre."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_kernels",
                                    "Optional compiled kernel of envsample's exact reference irradiance.", -1,
                                    methods, NULL, NULL, NULL, NULL};

PyMODINIT_FUNC PyInit__kernels(void) { return PyModule_Create(&module); }
