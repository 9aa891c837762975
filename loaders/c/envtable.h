/*
 * envtable.h -- reference loader for envsample sampling tables (binary format v2).
 *
 * One header, C99, libc + libm only.  Include it anywhere for the declarations; in
 * exactly one C or C++ file write
 *
 *     #define ENVTABLE_IMPLEMENTATION
 *     #include "envtable.h"
 *
 * to compile the implementation.  The format is documented byte by byte in
 * docs/table-format.md of the envsample repository; this file follows that text.
 *
 * What it does
 *   envtab_open / envtab_open_memory : read and verify a PREFIX.bin written by
 *       `envsample build --raw` (magic, version, header checksum, file size, every
 *       array's dtype, shape, offset and XXH64 checksum, index ranges and CDF ends).
 *   envtab_sample : a direction, its pdf (per steradian) and its cell from two
 *       uniforms, by CDF inversion (monotone) or the two-level alias table (O(1)).
 *   envtab_pdf    : the pdf of any direction (for MIS), and envtab_cell_of its cell.
 *   envtab_radiance : the embedded radiance of a direction, when the table has it.
 * Both in-cell mappings (equal-area, uv-linear), both up axes (y, z) and the
 * rotation are handled.  All arithmetic is in double precision as the format asks.
 *
 * Conventions: directions are unit vectors (x, y, z) in the table's frame; row 0 is
 * the zenith; radians inside (the header stores rotation in degrees).  The arrays
 * are used in place: a little-endian host is required (envtab_open refuses others).
 *
 * References: Walker (1977) and Vose (1991), alias tables; Pharr, Jakob and
 * Humphreys (2016), Physically Based Rendering 3rd ed., sec. 13.6.7 and 14.2.4;
 * Y. Collet, xxHash XXH64 specification v0.1.1.  Licence: MIT, as envsample.
 */
#ifndef ENVTABLE_H
#define ENVTABLE_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#define ENVTAB_VERSION 2
#define ENVTAB_HEADER_BYTES 576

enum envtab_mapping { ENVTAB_EQUAL_AREA = 0, ENVTAB_UV_LINEAR = 1 };
enum envtab_up { ENVTAB_UP_Y = 0, ENVTAB_UP_Z = 1 };
enum envtab_method { ENVTAB_INVERSE = 1, ENVTAB_ALIAS = 2 };
enum envtab_flags { ENVTAB_MIS_ONLY = 1, ENVTAB_HAS_RADIANCE = 2 };
/* envtab_open options */
enum envtab_open_flags { ENVTAB_SKIP_CHECKSUMS = 1 };

typedef struct envtab_table {
    uint32_t width, height;             /* table grid w x h (cells) */
    uint32_t image_width, image_height; /* the map's size */
    uint32_t mapping;                   /* enum envtab_mapping */
    uint32_t up;                        /* enum envtab_up */
    double rotation_deg;                /* about the up axis */
    uint32_t methods;                   /* bits of enum envtab_method the table holds */
    uint32_t flags;                     /* bits of enum envtab_flags */
    double sampled_integral;            /* integral of the sampled function (map units x sr) */
    /* arrays (NULL when absent), little-endian, C order */
    const float *marginal_cdf;          /* h + 1 */
    const float *conditional_cdf;       /* h x (w + 1) */
    const float *row_alias_probability; /* h */
    const uint32_t *row_alias_index;    /* h */
    const float *alias_probability;     /* h x w */
    const uint16_t *alias_index;        /* h x w, columns */
    const float *cell_pdf;              /* h x w, per steradian */
    const float *radiance;              /* H x W x 3, or NULL */
    /* derived at open */
    double *cos_edges;                  /* h + 1: cos(pi i / h), exact +-1 at the ends */
    double *row_solid_angle;            /* h: solid angle of one cell of each row, sr */
    unsigned char *owned;               /* the file's bytes when envtab_open read them */
} envtab_table;

typedef struct envtab_sample_t {
    double direction[3]; /* unit vector */
    double pdf;          /* per steradian */
    int64_t cell;        /* row * width + col */
} envtab_sample_t;

/* Read and verify a table binary; 0 on success, else -1 with a one-line message in err. */
int envtab_open(const char *path, envtab_table *t, unsigned flags, char *err, size_t errlen);
/* Verify a table already in memory (e.g. mmap'ed; it must outlive t); no copy is made. */
int envtab_open_memory(const void *data, size_t size, envtab_table *t, unsigned flags, char *err, size_t errlen);
void envtab_close(envtab_table *t);

/* Draw from two uniforms in [0, 1) (clamped; NaN is treated as 0).  method is ENVTAB_INVERSE
   or ENVTAB_ALIAS; returns 0, or -1 when the table does not hold that method. */
int envtab_sample(const envtab_table *t, int method, double u0, double u1, envtab_sample_t *out);
/* The solid-angle pdf of drawing direction d (any length > 0), per steradian. */
double envtab_pdf(const envtab_table *t, const double d[3]);
/* The table cell (row, col) containing direction d. */
void envtab_cell_of(const envtab_table *t, const double d[3], uint32_t *row, uint32_t *col);
/* The embedded radiance (nearest pixel) of direction d into rgb[3]; -1 if the table has none. */
int envtab_radiance(const envtab_table *t, const double d[3], float rgb[3]);
/* XXH64 of len bytes with a seed (the format uses seed 0). */
uint64_t envtab_xxh64(const void *data, size_t len, uint64_t seed);

#ifdef __cplusplus
}
#endif

#ifdef ENVTABLE_IMPLEMENTATION

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define ENVTAB_PI 3.14159265358979323846
#define ENVTAB_EDGE 1e-7
#define ENVTAB_BELOW_ONE (1.0 - 1.0 / 9007199254740992.0) /* 1 - 2^-53, the largest double below 1 */
#define ENVTAB_FIXED_BYTES 128
#define ENVTAB_SLOT_BYTES 48
#define ENVTAB_SLOTS 8
#define ENVTAB_DIR_END (ENVTAB_FIXED_BYTES + ENVTAB_SLOTS * ENVTAB_SLOT_BYTES)

static uint32_t envtab__u32(const unsigned char *p) {
    return (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24;
}
static uint64_t envtab__u64(const unsigned char *p) { return (uint64_t)envtab__u32(p) | (uint64_t)envtab__u32(p + 4) << 32; }
static double envtab__f64(const unsigned char *p) {
    uint64_t bits = envtab__u64(p);
    double d;
    memcpy(&d, &bits, sizeof d);
    return d;
}

/* ---------------------------------------------------------------- XXH64 (Collet, spec v0.1.1) */
#define ENVTAB_P1 0x9E3779B185EBCA87ULL
#define ENVTAB_P2 0xC2B2AE3D27D4EB4FULL
#define ENVTAB_P3 0x165667B19E3779F9ULL
#define ENVTAB_P4 0x85EBCA77C2B2AE63ULL
#define ENVTAB_P5 0x27D4EB2F165667C5ULL
static uint64_t envtab__rotl(uint64_t x, int r) { return (x << r) | (x >> (64 - r)); }
static uint64_t envtab__round(uint64_t acc, uint64_t lane) {
    acc += lane * ENVTAB_P2;
    return envtab__rotl(acc, 31) * ENVTAB_P1;
}
static uint64_t envtab__merge(uint64_t acc, uint64_t v) {
    acc ^= envtab__round(0, v);
    return acc * ENVTAB_P1 + ENVTAB_P4;
}

uint64_t envtab_xxh64(const void *data, size_t len, uint64_t seed) {
    const unsigned char *p = (const unsigned char *)data, *end = p + len;
    uint64_t h;
    if (len >= 32) {
        uint64_t v1 = seed + ENVTAB_P1 + ENVTAB_P2, v2 = seed + ENVTAB_P2, v3 = seed, v4 = seed - ENVTAB_P1;
        const unsigned char *limit = end - 32;
        do {
            v1 = envtab__round(v1, envtab__u64(p));
            v2 = envtab__round(v2, envtab__u64(p + 8));
            v3 = envtab__round(v3, envtab__u64(p + 16));
            v4 = envtab__round(v4, envtab__u64(p + 24));
            p += 32;
        } while (p <= limit);
        h = envtab__rotl(v1, 1) + envtab__rotl(v2, 7) + envtab__rotl(v3, 12) + envtab__rotl(v4, 18);
        h = envtab__merge(h, v1);
        h = envtab__merge(h, v2);
        h = envtab__merge(h, v3);
        h = envtab__merge(h, v4);
    } else {
        h = seed + ENVTAB_P5;
    }
    h += (uint64_t)len;
    for (; p + 8 <= end; p += 8) {
        h ^= envtab__round(0, envtab__u64(p));
        h = envtab__rotl(h, 27) * ENVTAB_P1 + ENVTAB_P4;
    }
    if (p + 4 <= end) {
        h ^= (uint64_t)envtab__u32(p) * ENVTAB_P1;
        h = envtab__rotl(h, 23) * ENVTAB_P2 + ENVTAB_P3;
        p += 4;
    }
    for (; p < end; p++) {
        h ^= (uint64_t)(*p) * ENVTAB_P5;
        h = envtab__rotl(h, 11) * ENVTAB_P1;
    }
    h ^= h >> 33;
    h *= ENVTAB_P2;
    h ^= h >> 29;
    h *= ENVTAB_P3;
    h ^= h >> 32;
    return h;
}

/* ---------------------------------------------------------------- opening */
static int envtab__fail(char *err, size_t errlen, const char *what) {
    if (err != NULL && errlen > 0) snprintf(err, errlen, "%s", what);
    return -1;
}

static int envtab__little_endian(void) {
    const uint16_t one = 1;
    unsigned char b;
    memcpy(&b, &one, 1);
    return b == 1;
}

int envtab_open_memory(const void *data, size_t size, envtab_table *t, unsigned flags, char *err, size_t errlen) {
    static const unsigned char magic[8] = {0x89, 'E', 'N', 'V', 'T', 'B', 'L', '\n'};
    /* dtype code and element size of each slot, in slot order */
    static const uint32_t codes[ENVTAB_SLOTS] = {1, 1, 1, 3, 1, 2, 1, 1};
    static const size_t itemsize[4] = {0, 4, 2, 4};
    const unsigned char *b = (const unsigned char *)data;
    const void *ptr[ENVTAB_SLOTS] = {NULL};
    uint64_t shape[ENVTAB_SLOTS][3];
    char msg[160];
    memset(t, 0, sizeof *t);
    if (!envtab__little_endian()) return envtab__fail(err, errlen, "this loader needs a little-endian host");
    if (size < ENVTAB_HEADER_BYTES || memcmp(b, magic, 8) != 0)
        return envtab__fail(err, errlen, "not an envsample table binary (bad magic or shorter than its header)");
    if (envtab_xxh64(b, ENVTAB_DIR_END, 0) != envtab__u64(b + ENVTAB_DIR_END))
        return envtab__fail(err, errlen, "header fails its checksum (modified or corrupt)");
    if (envtab__u32(b + 8) != ENVTAB_VERSION || envtab__u32(b + 12) != ENVTAB_HEADER_BYTES ||
        envtab__u32(b + 72) != ENVTAB_SLOTS || envtab__u32(b + 76) != ENVTAB_SLOT_BYTES)
        return envtab__fail(err, errlen, "table binary of another format version");
    if (envtab__u64(b + 16) != (uint64_t)size)
        return envtab__fail(err, errlen, "file size differs from the header's (truncated or padded)");
    t->width = envtab__u32(b + 24);
    t->height = envtab__u32(b + 28);
    t->image_width = envtab__u32(b + 32);
    t->image_height = envtab__u32(b + 36);
    t->mapping = envtab__u32(b + 40);
    t->up = envtab__u32(b + 44);
    t->rotation_deg = envtab__f64(b + 48);
    t->methods = envtab__u32(b + 56);
    t->flags = envtab__u32(b + 60);
    t->sampled_integral = envtab__f64(b + 64);
    if (t->width < 1 || t->height < 1 || t->width > 65536 || t->mapping > 1 || t->up > 1 || t->methods < 1 ||
        t->methods > 3 || !isfinite(t->rotation_deg))
        return envtab__fail(err, errlen, "header has an empty grid or an unknown mapping, up axis or method");
    const uint64_t w = t->width, h = t->height, W = t->image_width, H = t->image_height;
    const uint64_t want[ENVTAB_SLOTS][3] = {{h + 1, 0, 0}, {h, w + 1, 0}, {h, 0, 0}, {h, 0, 0},
                                           {h, w, 0},     {h, w, 0},     {h, w, 0}, {H, W, 3}};
    const int needed[ENVTAB_SLOTS] = {(t->methods & 1) ? 1 : 0, (t->methods & 1) ? 1 : 0, t->methods & 2 ? 1 : 0, t->methods & 2 ? 1 : 0,
                                      t->methods & 2 ? 1 : 0, t->methods & 2 ? 1 : 0, 1,
                                      t->flags & ENVTAB_HAS_RADIANCE ? 1 : 0};
    for (int k = 0; k < ENVTAB_SLOTS; k++) {
        const unsigned char *s = b + ENVTAB_FIXED_BYTES + k * ENVTAB_SLOT_BYTES;
        uint32_t code = envtab__u32(s), ndim = envtab__u32(s + 4);
        uint64_t off = envtab__u64(s + 24), n = envtab__u64(s + 32), digest = envtab__u64(s + 40);
        if (code == 0) {
            if (needed[k]) return envtab__fail(err, errlen, "an array the header's options need is missing");
            continue;
        }
        uint64_t count = 1;
        for (uint32_t d = 0; d < 3; d++) {
            shape[k][d] = d < ndim ? envtab__u32(s + 8 + 4 * d) : 0;
            if (shape[k][d] != want[k][d]) {
                snprintf(msg, sizeof msg, "array in slot %d has the wrong shape for a %ux%u table", k,
                         (unsigned)w, (unsigned)h);
                return envtab__fail(err, errlen, msg);
            }
            if (d < ndim) count *= shape[k][d];
        }
        if (code != codes[k] || ndim < 1 || ndim > 3 || n != count * itemsize[code] || off % 64 != 0 ||
            off < ENVTAB_HEADER_BYTES || off > (uint64_t)size || n > (uint64_t)size - off) {
            snprintf(msg, sizeof msg, "array in slot %d has a wrong dtype, or an offset or size outside the file", k);
            return envtab__fail(err, errlen, msg);
        }
        if (!(flags & ENVTAB_SKIP_CHECKSUMS) && envtab_xxh64(b + off, (size_t)n, 0) != digest) {
            snprintf(msg, sizeof msg, "array in slot %d fails its checksum (modified or corrupt)", k);
            return envtab__fail(err, errlen, msg);
        }
        ptr[k] = b + off;
    }
    t->marginal_cdf = (const float *)ptr[0];
    t->conditional_cdf = (const float *)ptr[1];
    t->row_alias_probability = (const float *)ptr[2];
    t->row_alias_index = (const uint32_t *)ptr[3];
    t->alias_probability = (const float *)ptr[4];
    t->alias_index = (const uint16_t *)ptr[5];
    t->cell_pdf = (const float *)ptr[6];
    t->radiance = (const float *)ptr[7];
    /* memory safety: every index a draw can follow lies inside its array */
    if (t->row_alias_index != NULL) {
        for (uint64_t i = 0; i < h; i++)
            if (t->row_alias_index[i] >= h) return envtab__fail(err, errlen, "row_alias_index out of range");
        for (uint64_t k = 0; k < h * w; k++)
            if (t->alias_index[k] >= w) return envtab__fail(err, errlen, "alias_index out of range");
    }
    if (t->marginal_cdf != NULL) {
        if (t->marginal_cdf[0] != 0.0f || t->marginal_cdf[h] != 1.0f)
            return envtab__fail(err, errlen, "marginal_cdf does not run from 0 to 1");
        for (uint64_t i = 0; i < h; i++)
            if (t->conditional_cdf[i * (w + 1)] != 0.0f || t->conditional_cdf[i * (w + 1) + w] != 1.0f)
                return envtab__fail(err, errlen, "conditional_cdf does not run from 0 to 1");
    }
    t->cos_edges = (double *)malloc((size_t)(h + 1) * sizeof(double));
    t->row_solid_angle = (double *)malloc((size_t)h * sizeof(double));
    if (t->cos_edges == NULL || t->row_solid_angle == NULL) {
        envtab_close(t);
        return envtab__fail(err, errlen, "out of memory");
    }
    const double dtheta = ENVTAB_PI / (double)h;
    for (uint64_t i = 0; i <= h; i++) t->cos_edges[i] = cos(ENVTAB_PI * (double)i / (double)h);
    t->cos_edges[0] = 1.0;
    t->cos_edges[h] = -1.0;
    for (uint64_t i = 0; i < h; i++)
        t->row_solid_angle[i] = 2.0 * sin(((double)i + 0.5) * dtheta) * sin(dtheta / 2.0) * (2.0 * ENVTAB_PI / (double)w);
    return 0;
}

int envtab_open(const char *path, envtab_table *t, unsigned flags, char *err, size_t errlen) {
    char msg[256];
    unsigned char head[ENVTAB_HEADER_BYTES];
    memset(t, 0, sizeof *t);
    FILE *f = fopen(path, "rb");
    if (f == NULL) {
        snprintf(msg, sizeof msg, "%s: cannot open the file", path);
        return envtab__fail(err, errlen, msg);
    }
    size_t got = fread(head, 1, sizeof head, f);
    uint64_t size = got == sizeof head ? envtab__u64(head + 16) : 0;
    unsigned char *data = NULL;
    if (got == sizeof head && size >= sizeof head && size <= (uint64_t)SIZE_MAX) data = (unsigned char *)malloc((size_t)size);
    if (data == NULL) {
        fclose(f);
        snprintf(msg, sizeof msg, "%s: not a table binary, or too large for this machine", path);
        return envtab__fail(err, errlen, msg);
    }
    memcpy(data, head, sizeof head);
    size_t rest = fread(data + sizeof head, 1, (size_t)size - sizeof head, f);
    int extra = fgetc(f) != EOF; /* a longer file than its header says is refused too */
    fclose(f);
    int rc = -1;
    if (rest != (size_t)size - sizeof head || extra) {
        snprintf(msg, sizeof msg, "%s: file size differs from the header's (truncated or padded)", path);
        envtab__fail(err, errlen, msg);
    } else {
        rc = envtab_open_memory(data, (size_t)size, t, flags, msg, sizeof msg);
        if (rc != 0) {
            char full[512];
            snprintf(full, sizeof full, "%s: %s", path, msg);
            envtab__fail(err, errlen, full);
        }
    }
    if (rc != 0) {
        free(data);
        return -1;
    }
    t->owned = data;
    return 0;
}

void envtab_close(envtab_table *t) {
    free(t->cos_edges);
    free(t->row_solid_angle);
    free(t->owned);
    memset(t, 0, sizeof *t);
}

/* ---------------------------------------------------------------- sampling */
static double envtab__clamp_unit(double u) {
    if (!(u >= 0.0)) return 0.0; /* also NaN */
    return u > ENVTAB_BELOW_ONE ? ENVTAB_BELOW_ONE : u;
}
static double envtab__clamp_edge(double f) { return f < ENVTAB_EDGE ? ENVTAB_EDGE : (f > 1.0 - ENVTAB_EDGE ? 1.0 - ENVTAB_EDGE : f); }

/* one alias level over n buckets: returns the chosen index, *fresh the leftover fraction */
static uint64_t envtab__alias(double u, uint64_t n, const float *prob, const void *alias, int wide, double *fresh) {
    double x = envtab__clamp_unit(u) * (double)n;
    uint64_t k = (uint64_t)x;
    if (k > n - 1) k = n - 1;
    double f = x - (double)k, p = (double)prob[k], q, rest, fr;
    uint64_t pick;
    if (f < p) { pick = k; q = p; rest = f; }
    else { pick = wide ? ((const uint32_t *)alias)[k] : ((const uint16_t *)alias)[k]; q = 1.0 - p; rest = f - p; }
    fr = q > 0.0 ? rest / q : 0.0;
    *fresh = fr > ENVTAB_BELOW_ONE ? ENVTAB_BELOW_ONE : (fr < 0.0 ? 0.0 : fr);
    return pick;
}

/* largest index i < n with cdf[i] <= u (cdf[0] = 0 <= u < 1 = cdf[n]); *frac the position within */
static uint64_t envtab__invert(const float *cdf, uint64_t n, double u, double *frac) {
    uint64_t lo = 0, hi = n;
    while (hi - lo > 1) {
        uint64_t mid = (lo + hi) >> 1;
        if ((double)cdf[mid] <= u) lo = mid; else hi = mid;
    }
    double a = cdf[lo], b = cdf[lo + 1], f = b - a > 0.0 ? (u - a) / (b - a) : 0.0;
    *frac = f < 0.0 ? 0.0 : (f > 1.0 ? 1.0 : f);
    return lo;
}

static void envtab__world(const envtab_table *t, double cf, double cr, double ca, double out[3]) {
    /* frames (forward, right, up): y-up (-z, +x, +y); z-up (+y, +x, +z) */
    if (t->up == ENVTAB_UP_Y) { out[0] = cr; out[1] = ca; out[2] = -cf; }
    else { out[0] = cr; out[1] = cf; out[2] = ca; }
}

int envtab_sample(const envtab_table *t, int method, double u0, double u1, envtab_sample_t *out) {
    const uint64_t w = t->width, h = t->height;
    uint64_t row, col;
    double fu, fv;
    if (method == ENVTAB_INVERSE && t->marginal_cdf != NULL) {
        u0 = envtab__clamp_unit(u0);
        u1 = envtab__clamp_unit(u1);
        row = envtab__invert(t->marginal_cdf, h, u0, &fv);
        col = envtab__invert(t->conditional_cdf + row * (w + 1), w, u1, &fu);
    } else if (method == ENVTAB_ALIAS && t->alias_probability != NULL) {
        row = envtab__alias(u0, h, t->row_alias_probability, t->row_alias_index, 1, &fv);
        col = envtab__alias(u1, w, t->alias_probability + row * w, t->alias_index + row * w, 0, &fu);
    } else {
        return -1;
    }
    fu = envtab__clamp_edge(fu);
    fv = envtab__clamp_edge(fv);
    const uint64_t cell = row * w + col;
    const double rot = t->rotation_deg * (ENVTAB_PI / 180.0);
    double phi = ((double)col + fu) * (2.0 * ENVTAB_PI / (double)w) + (rot - ENVTAB_PI);
    double pdf = (double)t->cell_pdf[cell], cos_t, sin_t;
    if (t->mapping == ENVTAB_EQUAL_AREA) {
        double c0 = t->cos_edges[row];
        cos_t = (t->cos_edges[row + 1] - c0) * fv + c0;
        double s2 = (1.0 - cos_t) * (1.0 + cos_t);
        sin_t = sqrt(s2 > 0.0 ? s2 : 0.0);
    } else {
        double theta = (ENVTAB_PI / (double)h) * ((double)row + fv);
        cos_t = cos(theta);
        sin_t = sin(theta);
        pdf = pdf * (t->row_solid_angle[row] * ((double)(h * w) / (2.0 * ENVTAB_PI * ENVTAB_PI))) / sin_t;
    }
    envtab__world(t, sin_t * cos(phi), sin_t * sin(phi), cos_t, out->direction);
    out->pdf = pdf;
    out->cell = (int64_t)cell;
    return 0;
}

/* (u, v) of a direction: u in [0, 1) from the azimuth, v in [0, 1] from the polar angle */
static void envtab__uv(const envtab_table *t, const double d[3], double *u, double *v) {
    double cf, cr = d[0], ca;
    if (t->up == ENVTAB_UP_Y) { cf = -d[2]; ca = d[1]; }
    else { cf = d[1]; ca = d[2]; }
    double theta = atan2(hypot(cf, cr), ca);
    double phi = atan2(cr, cf) - t->rotation_deg * (ENVTAB_PI / 180.0);
    double uu = phi / (2.0 * ENVTAB_PI) + 0.5;
    uu -= floor(uu);
    *u = uu >= 1.0 ? 0.0 : uu;
    *v = theta / ENVTAB_PI;
}

void envtab_cell_of(const envtab_table *t, const double d[3], uint32_t *row, uint32_t *col) {
    double u, v;
    envtab__uv(t, d, &u, &v);
    uint64_t r = (uint64_t)(v * (double)t->height), c = (uint64_t)(u * (double)t->width);
    *row = (uint32_t)(r < t->height ? r : t->height - 1);
    *col = (uint32_t)(c < t->width ? c : t->width - 1);
}

double envtab_pdf(const envtab_table *t, const double d[3]) {
    double u, v;
    envtab__uv(t, d, &u, &v);
    uint64_t r = (uint64_t)(v * (double)t->height), c = (uint64_t)(u * (double)t->width);
    if (r >= t->height) r = t->height - 1;
    if (c >= t->width) c = t->width - 1;
    double pdf = (double)t->cell_pdf[r * t->width + c];
    if (t->mapping == ENVTAB_EQUAL_AREA) return pdf;
    double sin_t = sin(ENVTAB_PI * v);
    if (!(sin_t > 0.0)) return 0.0;
    return pdf * t->row_solid_angle[r] * (double)((uint64_t)t->height * t->width) / (2.0 * ENVTAB_PI * ENVTAB_PI * sin_t);
}

int envtab_radiance(const envtab_table *t, const double d[3], float rgb[3]) {
    if (t->radiance == NULL) return -1;
    double u, v;
    envtab__uv(t, d, &u, &v);
    uint64_t r = (uint64_t)(v * (double)t->image_height), c = (uint64_t)(u * (double)t->image_width);
    if (r >= t->image_height) r = t->image_height - 1;
    if (c >= t->image_width) c = t->image_width - 1;
    const float *px = t->radiance + 3 * (r * t->image_width + c);
    rgb[0] = px[0];
    rgb[1] = px[1];
    rgb[2] = px[2];
    return 0;
}

#endif /* ENVTABLE_IMPLEMENTATION */
#endif /* ENVTABLE_H */
