/*
 * placer's compiled search loops: Metropolis local search and branch and bound.
 *
 * Both work on *orbits*: groups of slots that always hold the same device (one slot
 * each without a symmetry constraint, a mirrored pair under one). Positions are
 * integers (twice the offset from the core centre, in pitches), so every first and
 * second moment sum is an exact integer and "zero linear error" is exactly zero.
 *
 * For a pair (a, b) with n_a, n_b units, N device units in all, S1/S2 the first and
 * second moment sums of a device and T the first-moment sum of all device units:
 *   D1 = n_b S1_a - n_a S1_b                        linear: |D1| h / (n_a n_b)
 *   Q  = N (n_b S2_a - n_a S2_b) - (D1 T' + T D1')  quadratic: (g2/2)|Q| h^2 / (N n_a n_b)
 * which is the second-moment difference about the centre of all device units (the
 * quantity placer's grade reports). Q is formed in 128-bit integers.
 *
 * Device index n_dev stands for the spare (dummy) slots.
 *
 * References
 * [1] S. Kirkpatrick, C. D. Gelatt, M. P. Vecchi, "Optimization by simulated annealing",
 *     Science 220(4598), 671-680, 1983. doi:10.1126/science.220.4598.671
 * [2] D. Blackman, S. Vigna, "Scrambled linear pseudorandom number generators",
 *     ACM Trans. Math. Softw. 47(4), 2021. doi:10.1145/3460772 (xoshiro256**)
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

/* Bit d of an orbit's device mask. Masks exist only up to 62 devices (row bands); past
 * that every mask is all ones (-1), and a shift by 64 or more would be undefined. */
static inline int allows(int64_t mask, int64_t d)
{
    return d >= 63 ? mask == -1 || (mask >> 63 & 1) : (int)((mask >> d) & 1);
}

typedef __int128 i128;

#define NM 6            /* integer monomials per orbit: 1, u, v, uu, uv, vv */
#define NH 9            /* higher monomials: order 3 (4) and order 4 (5) */
#define NK 8            /* keys: lin, quad, hi3, hi4, edge, sigma, weighted, unused */
#define K_LIN 0
#define K_QUAD 1
#define K_HI3 2
#define K_HI4 3
#define K_EDGE 4
#define K_SIG 5
#define K_WSUM 6

/* ------------------------------------------------------------------ random numbers */

typedef struct { uint64_t s[4]; } rng_t;

static uint64_t splitmix(uint64_t *x) {
    uint64_t z = (*x += 0x9E3779B97F4A7C15ULL);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
    return z ^ (z >> 31);
}

static void rng_seed(rng_t *r, uint64_t seed) {
    for (int i = 0; i < 4; i++) r->s[i] = splitmix(&seed);
}

static inline uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }

static inline uint64_t rng_next(rng_t *r) {           /* [2] xoshiro256** */
    uint64_t *s = r->s;
    uint64_t out = rotl(s[1] * 5, 7) * 9, t = s[1] << 17;
    s[2] ^= s[0]; s[3] ^= s[1]; s[1] ^= s[2]; s[0] ^= s[3]; s[2] ^= t; s[3] = rotl(s[3], 45);
    return out;
}

static inline double rng_unit(rng_t *r) { return (rng_next(r) >> 11) * 0x1.0p-53; }

static inline int64_t rng_below(rng_t *r, int64_t n) {
    return (int64_t)(((unsigned __int128)rng_next(r) * (uint64_t)n) >> 64);
}

static double now_monotonic(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* ------------------------------------------------------------------ buffers */

typedef struct { Py_buffer b; int held; } buf_t;

/* A C-contiguous buffer of at least min_items items of the given kind: 'q' int64, 'd'
 * float64, 'b' one byte (bool, int8 or uint8). Anything else is a ValueError, never a
 * reinterpretation of the bytes. */
static int get_buf(PyObject *obj, buf_t *out, int writable, char kind,
                   Py_ssize_t min_items, const char *name) {
    int flags = PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | (writable ? PyBUF_WRITABLE : 0);
    Py_ssize_t itemsize = kind == 'b' ? 1 : 8;
    out->held = 0;
    if (min_items < 0) {
        PyErr_Format(PyExc_ValueError, "%s: negative size %zd", name, min_items);
        return -1;
    }
    if (PyObject_GetBuffer(obj, &out->b, flags) < 0) return -1;
    out->held = 1;
    const char *f = out->b.format ? out->b.format : "B";
    while (*f == '<' || *f == '=' || *f == '@' || *f == '!' || *f == '>') f++;
    int ok = out->b.itemsize == itemsize && f[0] != '\0' && f[1] == '\0' &&
             (kind == 'd' ? f[0] == 'd' : kind == 'q' ? (f[0] == 'q' || f[0] == 'l')
                                                      : (f[0] == '?' || f[0] == 'b' || f[0] == 'B'));
    if (!ok) {
        PyErr_Format(PyExc_ValueError, "%s: expected %s items, got format '%s'", name,
                     kind == 'd' ? "float64" : kind == 'q' ? "int64" : "one-byte",
                     out->b.format ? out->b.format : "B");
        return -1;
    }
    if (out->b.len / itemsize < min_items) {
        PyErr_Format(PyExc_ValueError, "%s: expected at least %zd items, got %zd", name,
                     min_items, out->b.len / itemsize);
        return -1;
    }
    return 0;
}

/* Every one of the first n values of an int64 buffer in [lo, hi): the loops index with
 * them, so a value outside would read or write outside an array. */
static int check_range(const buf_t *bf, Py_ssize_t n, int64_t lo, int64_t hi,
                       const char *name) {
    const int64_t *a = bf->b.buf;
    for (Py_ssize_t i = 0; i < n; i++)
        if (a[i] < lo || a[i] >= hi) {
            PyErr_Format(PyExc_ValueError, "%s[%zd] = %lld is outside [%lld, %lld)", name, i,
                         (long long)a[i], (long long)lo, (long long)hi);
            return -1;
        }
    return 0;
}

/* Sizes read from the integer parameters: non-negative and small enough that every
 * product of sizes the entry points form stays far inside int64 and size_t. */
#define MAX_COUNT ((int64_t)1 << 31)
static int check_size(int64_t v, int64_t lo, const char *name) {
    if (v < lo || v > MAX_COUNT) {
        PyErr_Format(PyExc_ValueError, "%s = %lld is outside [%lld, %lld]", name,
                     (long long)v, (long long)lo, (long long)MAX_COUNT);
        return -1;
    }
    return 0;
}

static void drop(buf_t *bufs, int n) {
    for (int i = 0; i < n; i++) if (bufs[i].held) { PyBuffer_Release(&bufs[i].b); bufs[i].held = 0; }
}

/* ------------------------------------------------------------------ the problem */

typedef struct {
    int64_t n_orb, n_dev, n_pairs, n_slots, order, N;
    const int64_t *orb_m;       /* n_orb x NM */
    const double *orb_h;        /* n_orb x NH */
    const int64_t *orb_size;    /* slots per orbit */
    const int64_t *orb_slot;    /* n_orb x 2: its slots (-1 when size 1) */
    const int64_t *pairs;       /* n_pairs x 2 */
    const int64_t *counts;      /* units per device (n_dev), spare count last */
    double hx, hy;              /* half pitch: position = doubled offset * h */
    double g2half;              /* half the Hessian norm (ppm / um^2) */
    double g1;                  /* linear gradient (ppm / um), weighted objective */
    const int64_t *base;        /* (n_dev + 1) x NM sums of pinned orbits */
    const double *base_h;       /* (n_dev + 1) x NH */
    int i64;                    /* the quadratic sums fit in 64 bits (see fits_64) */
} prob_t;

static const int BIN[5][5] = {{1, 0, 0, 0, 0}, {1, 1, 0, 0, 0}, {1, 2, 1, 0, 0},
                              {1, 3, 3, 1, 0}, {1, 4, 6, 4, 1}};

/* Raw moment sum of x^i y^l of device d (i + l <= 4) from the integer and float sums. */
static inline double raw(const int64_t *S, const double *H, int i, int l) {
    int k = i + l;
    if (k == 0) return (double)S[0];
    if (k == 1) return (double)(i ? S[1] : S[2]);
    if (k == 2) return (double)(i == 2 ? S[3] : (i == 1 ? S[4] : S[5]));
    if (k == 3) return H[l];              /* xxx, xxy, xyy, yyy */
    return H[4 + l];                      /* xxxx ... yyyy */
}

/* Frobenius norm of the order-k central moment difference of devices a and b (um^k). */
static double central_diff(const prob_t *P, const int64_t *Sa, const double *Ha,
                           const int64_t *Sb, const double *Hb, double cx, double cy, int k) {
    double acc = 0.0;
    for (int j = 0; j <= k; j++) {           /* component x^(k-j) y^j */
        double da = 0.0, db = 0.0;
        for (int i = 0; i <= k - j; i++)
            for (int l = 0; l <= j; l++) {
                double c = BIN[k - j][i] * BIN[j][l] * pow(-cx, k - j - i) * pow(-cy, j - l);
                da += c * raw(Sa, Ha, i, l);
                db += c * raw(Sb, Hb, i, l);
            }
        double d = (da / (double)Sa[0] - db / (double)Sb[0]) * pow(P->hx, k - j) * pow(P->hy, j);
        acc += BIN[k][j] * d * d;
    }
    return sqrt(acc);
}

/* Whether every quadratic sum of pair_terms fits in 64 bits: with r2 the largest squared
 * (doubled) radius of an orbit or pinned sum and N units, each product is at most
 * N^3 r2 in size and the three of a difference at most 6 N^3 r2. */
static int fits_64(const prob_t *P) {
    double r2 = 1.0;
    for (int64_t o = 0; o < P->n_orb; o++) {
        const int64_t *m = P->orb_m + NM * o;
        r2 = fmax(r2, (double)(m[3] + m[5]));
    }
    for (int64_t d = 0; d <= P->n_dev; d++) {
        const int64_t *m = P->base + NM * d;
        r2 = fmax(r2, (double)(m[3] + m[5]));
    }
    double n = (double)P->N;
    return 6.0 * n * n * n * r2 < 0x1p62;
}

/* Linear (um), quadratic (ppm) and higher-order (um^k) terms of one pair. */
static void pair_terms(const prob_t *P, const int64_t *S, const double *H, const int64_t *T,
                       int64_t p, double *lin, double *quad, double *hi3, double *hi4) {
    int64_t a = P->pairs[2 * p], b = P->pairs[2 * p + 1];
    const int64_t *Sa = S + NM * a, *Sb = S + NM * b;
    int64_t na = Sa[0], nb = Sb[0], N = P->N;
    int64_t du = nb * Sa[1] - na * Sb[1], dv = nb * Sa[2] - na * Sb[2];
    double den = (double)na * (double)nb;
    *lin = sqrt(P->hx * P->hx * (double)du * (double)du + P->hy * P->hy * (double)dv * (double)dv)
           / den;
    double xx, xy, yy;
    if (P->i64) {               /* the same exact integers, in 64 bits where they fit */
        int64_t qxx = N * (nb * Sa[3] - na * Sb[3]) - 2 * du * T[0];
        int64_t qxy = N * (nb * Sa[4] - na * Sb[4]) - (du * T[1] + dv * T[0]);
        int64_t qyy = N * (nb * Sa[5] - na * Sb[5]) - 2 * dv * T[1];
        xx = P->hx * P->hx * (double)qxx; xy = P->hx * P->hy * (double)qxy;
        yy = P->hy * P->hy * (double)qyy;
    } else {
        i128 qxx = (i128)N * ((i128)nb * Sa[3] - (i128)na * Sb[3]) - (i128)2 * du * T[0];
        i128 qxy = (i128)N * ((i128)nb * Sa[4] - (i128)na * Sb[4]) - ((i128)du * T[1] + (i128)dv * T[0]);
        i128 qyy = (i128)N * ((i128)nb * Sa[5] - (i128)na * Sb[5]) - (i128)2 * dv * T[1];
        xx = P->hx * P->hx * (double)qxx; xy = P->hx * P->hy * (double)qxy;
        yy = P->hy * P->hy * (double)qyy;
    }
    *quad = P->g2half * sqrt(xx * xx + 2.0 * xy * xy + yy * yy) / ((double)N * den);
    *hi3 = *hi4 = 0.0;
    if (P->order >= 3) {
        double cx = (double)T[0] / (double)N, cy = (double)T[1] / (double)N;
        const double *Ha = H + NH * a, *Hb = H + NH * b;
        *hi3 = central_diff(P, Sa, Ha, Sb, Hb, cx, cy, 3);
        if (P->order >= 4) *hi4 = central_diff(P, Sa, Ha, Sb, Hb, cx, cy, 4);
    }
}

/* ------------------------------------------------------------------ local search state */

typedef struct {
    const prob_t *P;
    int64_t *dev_of;        /* device of each orbit */
    int64_t *S;             /* (n_dev + 1) x NM sums */
    double *H;              /* (n_dev + 1) x NH */
    int64_t T[2];           /* first-moment sum of all device units */
    double *pk;             /* n_pairs x NK per-pair key values */
    int64_t *edge_cnt;      /* device units on open edges */
    const uint8_t *orb_edge;/* open-edge slots per orbit */
    int64_t edge_total;
    /* correlated field */
    int field;
    const double *sx, *sy;  /* slot positions, um */
    double corr_len;
    int kernel;             /* 0 exponential, 1 gaussian */
    double *G;              /* n_slots x (n_dev + 1): K E */
    double *cov;            /* (n_dev + 1)^2 */
    double *ncount;         /* units per device (spare: at least 1) */
    double sigma;
    const int64_t *pinned;  /* device pinned to each slot, -1 */
} state_t;

static inline double kern(const state_t *st, int64_t i, int64_t j) {
    double dx = st->sx[i] - st->sx[j], dy = st->sy[i] - st->sy[j];
    double u = sqrt(dx * dx + dy * dy) / st->corr_len;
    return st->kernel ? exp(-u * u) : exp(-u);
}

static void add_orbit(state_t *st, int64_t o, int64_t d, int sign) {
    const prob_t *P = st->P;
    int64_t *S = st->S + NM * d;
    const int64_t *m = P->orb_m + NM * o;
    for (int i = 0; i < NM; i++) S[i] += sign * m[i];
    if (P->order >= 3) {
        double *H = st->H + NH * d;
        const double *h = P->orb_h + NH * o;
        for (int i = 0; i < NH; i++) H[i] += sign * h[i];
    }
    if (d < P->n_dev) { st->T[0] += sign * m[1]; st->T[1] += sign * m[2]; }
    if (st->orb_edge && d < P->n_dev) {
        st->edge_cnt[d] += sign * st->orb_edge[o];
        st->edge_total += sign * st->orb_edge[o];
    }
}

static double edge_gap(const state_t *st, const int64_t *cnt, int64_t total) {
    const prob_t *P = st->P;
    if (!st->orb_edge) return 0.0;
    double share = (double)total / (double)P->N, worst = 0.0;
    for (int64_t d = 0; d < P->n_dev; d++) {
        double g = fabs((double)cnt[d] / (double)P->counts[d] - share);
        if (g > worst) worst = g;
    }
    return worst;
}

/* Fill the per-pair keys from the sums; returns nothing, keys in st->pk. */
static void all_pairs(state_t *st) {
    const prob_t *P = st->P;
    for (int64_t p = 0; p < P->n_pairs; p++) {
        double *k = st->pk + NK * p;
        pair_terms(P, st->S, st->H, st->T, p, &k[K_LIN], &k[K_QUAD], &k[K_HI3], &k[K_HI4]);
        k[K_WSUM] = P->g1 * k[K_LIN] + k[K_QUAD];
        if (st->field) {
            int64_t a = P->pairs[2 * p], b = P->pairs[2 * p + 1], D1 = P->n_dev + 1;
            double v = st->cov[a * D1 + a] + st->cov[b * D1 + b] - 2.0 * st->cov[a * D1 + b];
            k[K_SIG] = st->sigma * sqrt(v > 0 ? v : 0.0);
        } else k[K_SIG] = 0.0;
    }
}

/* Worst (max) and smoothed value of key j over pairs (edge: over devices). */
static void key_of(const state_t *st, const double *pk, int j, double edge, double *worst,
                   double *smooth, double lam) {
    const prob_t *P = st->P;
    if (j == K_EDGE) { *worst = edge; *smooth = edge; return; }
    double mx = 0.0, sum = 0.0;
    for (int64_t p = 0; p < P->n_pairs; p++) {
        double v = pk[NK * p + j];
        if (v > mx) mx = v;
        sum += v;
    }
    *worst = mx;
    *smooth = mx + (P->n_pairs ? lam * sum / (double)P->n_pairs : 0.0);
}

/* A key's worst pair, which pair that is (-1: every value zero) and its sum over pairs:
 * kept for the current state so that a trial move rescans only the pairs it touched. */
typedef struct { double mx, sum; int64_t arg; } agg_t;

static void agg_full(const prob_t *P, const double *pk, int j, agg_t *g) {
    g->mx = 0.0; g->sum = 0.0; g->arg = -1;
    for (int64_t p = 0; p < P->n_pairs; p++) {
        double v = pk[NK * p + j];
        if (v > g->mx) { g->mx = v; g->arg = p; }
        g->sum += v;
    }
}

/* Worst and summed value of key j after a trial move: the touched pairs (list tl, marked
 * with stamp == mark) hold their new values in pk2, the others keep theirs in pk. The
 * worst untouched value is the current worst unless the move touched that pair. */
static void agg_trial(const prob_t *P, const double *pk, const double *pk2, const int64_t *tl,
                      int64_t nt, const int64_t *stamp, int64_t mark, const agg_t *g, int j,
                      double *worst, double *sum) {
    double m = 0.0, s = g->sum, u = 0.0;
    for (int64_t i = 0; i < nt; i++) {
        int64_t p = tl[i];
        double v = pk2[NK * p + j];
        if (v > m) m = v;
        s += v - pk[NK * p + j];
    }
    if (g->arg < 0 || stamp[g->arg] != mark) u = g->mx;
    else
        for (int64_t p = 0; p < P->n_pairs; p++)
            if (stamp[p] != mark && pk[NK * p + j] > u) u = pk[NK * p + j];
    *worst = m > u ? m : u;
    *sum = s;
}

/* The field's K E comes in from Python (an FFT convolution on the grid); the covariance
 * of the device means is E' (K E). */
static void field_build(state_t *st, const double *G0) {
    const prob_t *P = st->P;
    int64_t S = P->n_slots, D1 = P->n_dev + 1;
    memcpy(st->G, G0, sizeof(double) * S * D1);
    memset(st->cov, 0, sizeof(double) * D1 * D1);
    for (int64_t o = 0; o < P->n_orb; o++) {
        int64_t d = st->dev_of[o];
        for (int i = 0; i < P->orb_size[o]; i++) {
            int64_t slot = P->orb_slot[2 * o + i];
            for (int64_t e = 0; e < D1; e++) st->cov[d * D1 + e] += st->G[slot * D1 + e] / st->ncount[d];
        }
    }
    /* pinned units (not orbits) */
    for (int64_t slot = 0; slot < S; slot++) {
        int64_t d = st->pinned ? st->pinned[slot] : -1;
        if (d < 0) continue;
        for (int64_t e = 0; e < D1; e++) st->cov[d * D1 + e] += st->G[slot * D1 + e] / st->ncount[d];
    }
    for (int64_t d = 0; d < D1; d++)                  /* symmetric up to rounding */
        for (int64_t e = d + 1; e < D1; e++) {
            double m = 0.5 * (st->cov[d * D1 + e] + st->cov[e * D1 + d]);
            st->cov[d * D1 + e] = st->cov[e * D1 + d] = m;
        }
}

/* A proposed move: orbits leave device a for b (list s) and leave b for a (list t). */
typedef struct { int64_t s[3], t[3], ns, a, b; } move_t;

static int slots_of(const prob_t *P, const int64_t *orbs, int64_t n, int64_t *out) {
    int k = 0;
    for (int64_t i = 0; i < n; i++)
        for (int j = 0; j < P->orb_size[orbs[i]]; j++) out[k++] = P->orb_slot[2 * orbs[i] + j];
    return k;
}

/* Covariance after the move (into cov2); q = d'Kd and g = d'G with d the indicator of the
 * slots a gains minus those it gives up. */
static void field_trial(const state_t *st, const move_t *mv, double *cov2) {
    const prob_t *P = st->P;
    int64_t D1 = P->n_dev + 1, gain[6], lose[6];
    int ng = slots_of(P, mv->t, mv->ns, gain), nl = slots_of(P, mv->s, mv->ns, lose);
    double q = 0.0;
    for (int i = 0; i < ng; i++) for (int j = 0; j < ng; j++) q += kern(st, gain[i], gain[j]);
    for (int i = 0; i < nl; i++) for (int j = 0; j < nl; j++) q += kern(st, lose[i], lose[j]);
    for (int i = 0; i < ng; i++) for (int j = 0; j < nl; j++) q -= 2.0 * kern(st, gain[i], lose[j]);
    memcpy(cov2, st->cov, sizeof(double) * D1 * D1);
    int64_t a = mv->a, b = mv->b;
    double na = st->ncount[a], nb = st->ncount[b];
    for (int64_t e = 0; e < D1; e++) {
        double g = 0.0;
        for (int i = 0; i < ng; i++) g += st->G[gain[i] * D1 + e];
        for (int i = 0; i < nl; i++) g -= st->G[lose[i] * D1 + e];
        cov2[a * D1 + e] += g / na; cov2[e * D1 + a] += g / na;
        cov2[b * D1 + e] -= g / nb; cov2[e * D1 + b] -= g / nb;
    }
    cov2[a * D1 + a] += q / (na * na);
    cov2[b * D1 + b] += q / (nb * nb);
    cov2[a * D1 + b] -= q / (na * nb);
    cov2[b * D1 + a] -= q / (na * nb);
}

static void field_accept(state_t *st, const move_t *mv, const double *cov2) {
    const prob_t *P = st->P;
    int64_t D1 = P->n_dev + 1, gain[6], lose[6];
    int ng = slots_of(P, mv->t, mv->ns, gain), nl = slots_of(P, mv->s, mv->ns, lose);
    double na = st->ncount[mv->a], nb = st->ncount[mv->b];
    for (int64_t i = 0; i < P->n_slots; i++) {
        double kd = 0.0;
        for (int j = 0; j < ng; j++) kd += kern(st, i, gain[j]);
        for (int j = 0; j < nl; j++) kd -= kern(st, i, lose[j]);
        st->G[i * D1 + mv->a] += kd / na;
        st->G[i * D1 + mv->b] -= kd / nb;
    }
    memcpy(st->cov, cov2, sizeof(double) * D1 * D1);
}

static void apply_move(state_t *st, const move_t *mv) {
    for (int64_t i = 0; i < mv->ns; i++) {
        add_orbit(st, mv->s[i], mv->a, -1); add_orbit(st, mv->s[i], mv->b, +1);
        st->dev_of[mv->s[i]] = mv->b;
        add_orbit(st, mv->t[i], mv->b, -1); add_orbit(st, mv->t[i], mv->a, +1);
        st->dev_of[mv->t[i]] = mv->a;
    }
}

/*
 * anneal(orb_m, orb_h, orb_size, orb_slot, orb_key, key_grid, movable, orb_edge, slot_xy,
 *        counts, pairs, base, base_h, dev_of, fparams, iparams, caps, out, field,
 *        pinned) -> status
 *
 * field: K E of the start state (n_slots x (n_dev + 1)) when the sigma key is used;
 * pinned: the device pinned to each grid slot, -1; allow: per orbit, a bit for each
 * device (bit n_dev: spare) that may take it.
 *
 * Metropolis on one stage: minimise key `stage` (smoothed worst pair) while every key
 * with a finite cap stays within it. dev_of (per orbit) is the start and, on return,
 * the best state found. status: 0 budget spent or floor reached, 1 deadline, 2 signal.
 * out: [best worst key, moves tried, moves accepted, keys of the best state (NK)].
 */
static PyObject *py_anneal(PyObject *self, PyObject *args) {
    PyObject *o[21];
    if (!PyArg_ParseTuple(args, "OOOOOOOOOOOOOOOOOOOOO", &o[0], &o[1], &o[2], &o[3], &o[4],
                          &o[5], &o[6], &o[7], &o[8], &o[9], &o[10], &o[11], &o[12], &o[13],
                          &o[14], &o[15], &o[16], &o[17], &o[18], &o[19], &o[20]))
        return NULL;
    buf_t bf[21];
    memset(bf, 0, sizeof(bf));
    if (get_buf(o[15], &bf[15], 0, 'q', 15, "iparams") < 0 || get_buf(o[14], &bf[14], 0, 'd', 16, "fparams") < 0)
        { drop(bf, 21); return NULL; }
    const int64_t *ip = bf[15].b.buf;
    const double *fp = bf[14].b.buf;
    int64_t n_orb = ip[0], n_dev = ip[1], n_pairs = ip[2], n_slots = ip[3], order = ip[4];
    int64_t n_moves = ip[5], stage = ip[7], two_share = ip[8], grid_w = ip[9], grid_h = ip[10];
    int64_t use_field = ip[11], kernel = ip[12], N = ip[13], three_share = ip[14];
    uint64_t seed = (uint64_t)ip[6];
    int64_t D1 = n_dev + 1;
    if (check_size(n_orb, 0, "n_orb") < 0 || check_size(n_dev, 1, "n_dev") < 0 ||
        check_size(n_pairs, 0, "n_pairs") < 0 || check_size(n_slots, 0, "n_slots") < 0 ||
        check_size(grid_w, 0, "grid_w") < 0 || check_size(grid_h, 0, "grid_h") < 0 ||
        check_size(N, 1, "N") < 0) { drop(bf, 21); return NULL; }
    if (get_buf(o[0], &bf[0], 0, 'q', NM * n_orb, "orb_m") < 0 ||
        get_buf(o[1], &bf[1], 0, 'd', NH * n_orb, "orb_h") < 0 ||
        get_buf(o[2], &bf[2], 0, 'q', n_orb, "orb_size") < 0 ||
        get_buf(o[3], &bf[3], 0, 'q', 2 * n_orb, "orb_slot") < 0 ||
        get_buf(o[4], &bf[4], 0, 'q', 2 * n_orb, "orb_key") < 0 ||
        get_buf(o[5], &bf[5], 0, 'q', grid_w * grid_h, "key_grid") < 0 ||
        get_buf(o[6], &bf[6], 0, 'b', n_orb, "movable") < 0 ||
        get_buf(o[8], &bf[8], 0, 'd', 2 * n_slots, "slot_xy") < 0 ||
        get_buf(o[9], &bf[9], 0, 'q', D1, "counts") < 0 ||
        get_buf(o[10], &bf[10], 0, 'q', 2 * n_pairs, "pairs") < 0 ||
        get_buf(o[11], &bf[11], 0, 'q', NM * D1, "base") < 0 ||
        get_buf(o[12], &bf[12], 0, 'd', NH * D1, "base_h") < 0 ||
        get_buf(o[13], &bf[13], 1, 'q', n_orb, "dev_of") < 0 ||
        get_buf(o[16], &bf[16], 0, 'd', NK, "caps") < 0 ||
        get_buf(o[17], &bf[17], 1, 'd', 3 + NK, "out") < 0 ||
        get_buf(o[19], &bf[19], 0, 'q', n_slots, "pinned") < 0 ||
        get_buf(o[20], &bf[20], 0, 'q', n_orb, "allow") < 0) { drop(bf, 21); return NULL; }
    if (check_range(&bf[2], n_orb, 1, 3, "orb_size") < 0 ||
        check_range(&bf[3], 2 * n_orb, -1, n_slots, "orb_slot") < 0 ||
        check_range(&bf[5], grid_w * grid_h, -1, n_orb, "key_grid") < 0 ||
        check_range(&bf[10], 2 * n_pairs, 0, n_dev, "pairs") < 0 ||
        check_range(&bf[13], n_orb, 0, D1, "dev_of") < 0 ||
        check_range(&bf[19], n_slots, -1, D1, "pinned") < 0) { drop(bf, 21); return NULL; }
    const int64_t *allow = bf[20].b.buf;
    const uint8_t *orb_edge = NULL;
    if (o[7] != Py_None) {
        if (get_buf(o[7], &bf[7], 0, 'b', n_orb, "orb_edge") < 0) { drop(bf, 21); return NULL; }
        orb_edge = bf[7].b.buf;
    }
    const double *G0 = NULL;
    if (use_field) {
        if (get_buf(o[18], &bf[18], 0, 'd', n_slots * D1, "field") < 0) { drop(bf, 21); return NULL; }
        G0 = bf[18].b.buf;
    }
    prob_t P = {n_orb, n_dev, n_pairs, n_slots, order, N, bf[0].b.buf, bf[1].b.buf,
                bf[2].b.buf, bf[3].b.buf, bf[10].b.buf, bf[9].b.buf, fp[0], fp[1], fp[2],
                fp[3], bf[11].b.buf, bf[12].b.buf};
    P.i64 = fits_64(&P);
    double lam = fp[4], t_end = fp[5], deadline = fp[6], floor = fp[7];
    const int64_t *orb_key = bf[4].b.buf, *key_grid = bf[5].b.buf;
    const uint8_t *movable = bf[6].b.buf;
    const double *caps = bf[16].b.buf, *slot_xy = bf[8].b.buf;
    int64_t *dev_of = bf[13].b.buf;
    double *out = bf[17].b.buf;

    state_t st;
    memset(&st, 0, sizeof(st));
    st.P = &P;
    st.dev_of = malloc(sizeof(int64_t) * (n_orb ? n_orb : 1));
    st.S = calloc(NM * D1, sizeof(int64_t));
    st.H = calloc(NH * D1, sizeof(double));
    st.pk = calloc(NK * (n_pairs ? n_pairs : 1), sizeof(double));
    st.edge_cnt = calloc(D1, sizeof(int64_t));
    st.orb_edge = orb_edge;
    double *pk2 = calloc(NK * (n_pairs ? n_pairs : 1), sizeof(double));
    int64_t *best = malloc(sizeof(int64_t) * (n_orb ? n_orb : 1));
    /* movable orbits, and per device its movable single-slot orbits (two-for-two moves);
     * a device's list can hold every single-slot orbit, since devices trade them */
    int64_t *mov = malloc(sizeof(int64_t) * (n_orb ? n_orb : 1)), n_mov = 0;
    int64_t *where = malloc(sizeof(int64_t) * (n_orb ? n_orb : 1));
    int64_t *lst_len = calloc(D1, sizeof(int64_t));
    double *cov2 = NULL;
    int64_t *lst = NULL, *stamp = NULL, *tl = NULL, *dp = NULL, *dp_start = NULL;
    if (!st.dev_of || !st.S || !st.H || !st.pk || !st.edge_cnt || !pk2 || !best || !mov ||
        !where || !lst_len) goto no_memory;
    memcpy(st.dev_of, dev_of, sizeof(int64_t) * n_orb);
    memcpy(st.S, P.base, sizeof(int64_t) * NM * D1);
    memcpy(st.H, P.base_h, sizeof(double) * NH * D1);
    for (int64_t d = 0; d < n_dev; d++) { st.T[0] += P.base[NM * d + 1]; st.T[1] += P.base[NM * d + 2]; }
    int64_t n_single = 0;
    for (int64_t i = 0; i < n_orb; i++) {
        add_orbit(&st, i, dev_of[i], +1);
        if (movable[i]) { mov[n_mov++] = i; n_single += P.orb_size[i] == 1; }
    }
    int64_t cap1 = n_single ? n_single : 1;
    lst = malloc(sizeof(int64_t) * D1 * cap1);
    if (!lst) goto no_memory;
    for (int64_t i = 0; i < n_mov; i++) {
        int64_t oo = mov[i];
        if (P.orb_size[oo] != 1) { where[oo] = -1; continue; }
        int64_t d = dev_of[oo];
        where[oo] = lst_len[d];
        lst[d * cap1 + lst_len[d]++] = oo;
    }
    st.pinned = bf[19].b.buf;
    if (use_field) {
        st.field = 1;
        st.sx = slot_xy; st.sy = slot_xy + n_slots;
        st.corr_len = fp[8]; st.kernel = (int)kernel; st.sigma = fp[9];
        st.G = malloc(sizeof(double) * n_slots * D1);
        st.cov = malloc(sizeof(double) * D1 * D1);
        cov2 = malloc(sizeof(double) * D1 * D1);
        st.ncount = malloc(sizeof(double) * D1);
        if (!st.G || !st.cov || !cov2 || !st.ncount) goto no_memory;
        for (int64_t d = 0; d < D1; d++) st.ncount[d] = P.counts[d] > 0 ? (double)P.counts[d] : 1.0;
        field_build(&st, G0);
    }
    all_pairs(&st);
    double edge = edge_gap(&st, st.edge_cnt, st.edge_total);
    double cur_w, cur_s;
    key_of(&st, st.pk, (int)stage, edge, &cur_w, &cur_s, lam);
    double best_w = cur_w, best_s = cur_s;
    memcpy(best, st.dev_of, sizeof(int64_t) * n_orb);
    double best_keys[NK];
    for (int j = 0; j < NK; j++) {
        double w, s; key_of(&st, st.pk, j, edge, &w, &s, lam); best_keys[j] = w;
    }
    rng_t rng;
    rng_seed(&rng, seed);
    int status = 0;
    int64_t tried = 0, accepted = 0;
    double t0 = -1.0;
    int64_t n_gather = 0;
    double gather[64];
    /* the pairs of each device (dp, from dp_start[d]), the touched-pair list and marks */
    stamp = calloc(n_pairs ? n_pairs : 1, sizeof(int64_t));
    tl = malloc(sizeof(int64_t) * (n_pairs ? n_pairs : 1));
    dp = malloc(sizeof(int64_t) * (2 * n_pairs ? 2 * n_pairs : 1));
    dp_start = calloc(D1 + 1, sizeof(int64_t));
    if (!stamp || !tl || !dp || !dp_start) goto no_memory;
    for (int64_t p = 0; p < n_pairs; p++) {
        dp_start[P.pairs[2 * p] + 1]++; dp_start[P.pairs[2 * p + 1] + 1]++;
    }
    for (int64_t d = 0; d < D1; d++) dp_start[d + 1] += dp_start[d];
    {
        int64_t *fill = calloc(D1, sizeof(int64_t));
        if (!fill) goto no_memory;
        for (int64_t p = 0; p < n_pairs; p++)
            for (int e = 0; e < 2; e++) {
                int64_t d = P.pairs[2 * p + e];
                dp[dp_start[d] + fill[d]++] = p;
            }
        free(fill);
    }
    int64_t mark = 0;
    /* the correlated field changes every pair's sigma: such stages evaluate every pair */
    int full = st.field && (stage == K_SIG || isfinite(caps[K_SIG]));
    agg_t agg[NK];
    int need[NK];
    for (int j = 0; j < NK; j++) {
        need[j] = j != K_EDGE && (j == stage || (isfinite(caps[j]) && j != K_SIG)
                                  || (j == K_SIG && isfinite(caps[K_SIG])));
        agg_full(&P, st.pk, j, &agg[j]);
    }
    /* temperature factor t_end^(it / (n_moves - 1)), kept by one product a move */
    double cool = 1.0, ratio = pow(t_end, 1.0 / (double)(n_moves > 1 ? n_moves - 1 : 1));

    for (int64_t it = 0; it < n_moves && n_mov >= 2; it++, cool *= ratio) {
        if ((it & 4095) == 0) {
            if (now_monotonic() > deadline) { status = 1; break; }
            if (PyErr_CheckSignals() < 0) { PyErr_Clear(); status = 2; break; }
        }
        if (best_w <= floor) break;
        move_t mv;
        int two = two_share > 0 && (int64_t)rng_below(&rng, 1000) < two_share;
        int64_t o1 = mov[rng_below(&rng, n_mov)], o2 = mov[rng_below(&rng, n_mov)];
        int64_t a = st.dev_of[o1], b = st.dev_of[o2];
        if (a == b || P.orb_size[o1] != P.orb_size[o2]) continue;
        mv.a = a; mv.b = b; mv.s[0] = o1; mv.t[0] = o2; mv.ns = 1;
        if (two && P.orb_size[o1] == 1) {
            /* a gives o1 and s2, takes o2 and t2, with pos(o1) + pos(s2) = pos(o2) + pos(t2) */
            int64_t du = orb_key[2 * o2] - orb_key[2 * o1], dv = orb_key[2 * o2 + 1] - orb_key[2 * o1 + 1];
            int found = 0;
            for (int tries = 0; tries < 6 && lst_len[a] > 1; tries++) {
                int64_t s2 = lst[a * cap1 + rng_below(&rng, lst_len[a])];
                if (s2 == o1) continue;
                int64_t gx = orb_key[2 * s2] - du, gy = orb_key[2 * s2 + 1] - dv;
                if (gx < 0 || gy < 0 || gx >= grid_w || gy >= grid_h) continue;
                int64_t t2 = key_grid[gy * grid_w + gx];
                if (t2 < 0 || t2 == o2 || t2 == o1 || !movable[t2] || P.orb_size[t2] != 1
                    || st.dev_of[t2] != b) continue;
                mv.s[1] = s2; mv.t[1] = t2; mv.ns = 2; found = 1;
                break;
            }
            if (!found) continue;
            if (three_share > 0 && (int64_t)rng_below(&rng, 1000) < three_share
                && lst_len[a] > 2 && lst_len[b] > 2) {
                /* or three for three: a also gives s3 and b also gives t2 (which a takes
                 * instead of the t2 above) and t3, with
                 * pos(o1) + pos(s2) + pos(s3) = pos(o2) + pos(t2) + pos(t3);
                 * if no such t3 turns up, the two-for-two stands */
                int64_t s2 = mv.s[1];
                for (int tries = 0; tries < 6; tries++) {
                    int64_t s3 = lst[a * cap1 + rng_below(&rng, lst_len[a])];
                    int64_t t2 = lst[b * cap1 + rng_below(&rng, lst_len[b])];
                    if (s3 == o1 || s3 == s2 || t2 == o2) continue;
                    int64_t gx = orb_key[2 * o1] + orb_key[2 * s2] + orb_key[2 * s3]
                                 - orb_key[2 * o2] - orb_key[2 * t2];
                    int64_t gy = orb_key[2 * o1 + 1] + orb_key[2 * s2 + 1]
                                 + orb_key[2 * s3 + 1] - orb_key[2 * o2 + 1] - orb_key[2 * t2 + 1];
                    if (gx < 0 || gy < 0 || gx >= grid_w || gy >= grid_h) continue;
                    int64_t t3 = key_grid[gy * grid_w + gx];
                    if (t3 < 0 || t3 == o2 || t3 == t2 || !movable[t3] || P.orb_size[t3] != 1
                        || st.dev_of[t3] != b) continue;
                    mv.s[2] = s3; mv.t[1] = t2; mv.t[2] = t3; mv.ns = 3;
                    break;
                }
            }
        }
        {   /* every orbit must allow the device it receives (row bands) */
            int ok = 1;
            for (int64_t i = 0; i < mv.ns; i++)
                if (!allows(allow[mv.t[i]], a) || !allows(allow[mv.s[i]], b)) ok = 0;
            if (!ok) continue;
        }
        tried++;
        /* trial sums: apply, evaluate the pairs the move touches, undo if refused */
        apply_move(&st, &mv);
        int64_t nt = 0;
        mark++;
        if (full || a == n_dev || b == n_dev) {     /* a spare moved: the centre moved */
            for (int64_t p = 0; p < n_pairs; p++) { tl[nt++] = p; stamp[p] = mark; }
        } else {
            int64_t ends[2] = {a, b};
            for (int e = 0; e < 2; e++)
                for (int64_t i = dp_start[ends[e]]; i < dp_start[ends[e] + 1]; i++) {
                    int64_t p = dp[i];
                    if (stamp[p] != mark) { stamp[p] = mark; tl[nt++] = p; }
                }
        }
        for (int64_t i = 0; i < nt; i++) {
            int64_t p = tl[i];
            double *k = pk2 + NK * p;
            pair_terms(&P, st.S, st.H, st.T, p, &k[K_LIN], &k[K_QUAD], &k[K_HI3], &k[K_HI4]);
            k[K_WSUM] = P.g1 * k[K_LIN] + k[K_QUAD];
            k[K_EDGE] = st.pk[NK * p + K_EDGE];
            k[K_SIG] = st.pk[NK * p + K_SIG];
        }
        double edge2 = edge_gap(&st, st.edge_cnt, st.edge_total);
        int feasible = 1;
        double w2 = 0.0, s2 = 0.0;
        for (int j = 0; j < NK && feasible; j++) {
            if (!isfinite(caps[j]) || j == K_SIG) continue;
            double w, sm;
            if (j == K_EDGE) w = edge2;
            else agg_trial(&P, st.pk, pk2, tl, nt, stamp, mark, &agg[j], j, &w, &sm);
            if (w > caps[j]) feasible = 0;
        }
        if (feasible && st.field && (stage == K_SIG || isfinite(caps[K_SIG]))) {
            field_trial(&st, &mv, cov2);              /* full: every pair is touched */
            for (int64_t p = 0; p < n_pairs; p++) {
                int64_t pa = P.pairs[2 * p], pb = P.pairs[2 * p + 1];
                double v = cov2[pa * D1 + pa] + cov2[pb * D1 + pb] - 2.0 * cov2[pa * D1 + pb];
                pk2[NK * p + K_SIG] = st.sigma * sqrt(v > 0 ? v : 0.0);
            }
            if (isfinite(caps[K_SIG])) {
                double w, sm;
                agg_trial(&P, st.pk, pk2, tl, nt, stamp, mark, &agg[K_SIG], K_SIG, &w, &sm);
                if (w > caps[K_SIG]) feasible = 0;
            }
        }
        int take = 0;
        if (feasible) {
            if (stage == K_EDGE) { w2 = edge2; s2 = edge2; }
            else {
                double sum;
                agg_trial(&P, st.pk, pk2, tl, nt, stamp, mark, &agg[stage], (int)stage, &w2, &sum);
                s2 = w2 + (n_pairs ? lam * sum / (double)n_pairs : 0.0);
            }
            double de = s2 - cur_s;
            if (t0 < 0) {                      /* temperature from the first uphill steps */
                if (de > 0 && n_gather < 64) gather[n_gather++] = de;
                if (n_gather >= 16 || it > 2000) {
                    double m = 0.0;
                    for (int64_t i = 0; i < n_gather; i++) m += gather[i];
                    t0 = n_gather ? m / (double)n_gather : fmax(fabs(cur_s), 1e-12);
                }
            }
            double temp = (t0 > 0 ? t0 : fmax(fabs(cur_s), 1e-12)) * cool;
            take = de <= 0 || rng_unit(&rng) < exp(-de / (temp > 1e-300 ? temp : 1e-300));
        }
        if (take) {
            accepted++;
            if (st.field) field_accept(&st, &mv, cov2);
            for (int64_t i = 0; i < nt; i++)
                memcpy(st.pk + NK * tl[i], pk2 + NK * tl[i], sizeof(double) * NK);
            for (int j = 0; j < NK; j++)
                if (need[j]) agg_full(&P, st.pk, j, &agg[j]);
            if (stage == K_EDGE) { cur_s = s2; cur_w = w2; }
            else {              /* from the full sums: an unchanged move is then exactly 0 */
                cur_w = agg[stage].mx;
                cur_s = cur_w + (n_pairs ? lam * agg[stage].sum / (double)n_pairs : 0.0);
            }
            edge = edge2;
            /* keep the device lists of single-slot orbits */
            for (int64_t i = 0; i < mv.ns; i++) {
                int64_t mo[2] = {mv.s[i], mv.t[i]}, from[2] = {a, b}, to[2] = {b, a};
                for (int k = 0; k < 2; k++) {
                    int64_t oo = mo[k];
                    if (where[oo] < 0) continue;
                    int64_t f = from[k], g = to[k], pos = where[oo];
                    int64_t last = lst[f * cap1 + lst_len[f] - 1];
                    lst[f * cap1 + pos] = last; where[last] = pos; lst_len[f]--;
                    where[oo] = lst_len[g]; lst[g * cap1 + lst_len[g]++] = oo;
                }
            }
            if (cur_w < best_w - 1e-12 * fmax(1.0, fabs(best_w))
                || (cur_w <= best_w + 1e-12 * fmax(1.0, fabs(best_w)) && cur_s < best_s)) {
                best_w = cur_w; best_s = cur_s;
                memcpy(best, st.dev_of, sizeof(int64_t) * n_orb);
                for (int j = 0; j < NK; j++) {
                    double w, s; key_of(&st, st.pk, j, edge, &w, &s, lam); best_keys[j] = w;
                }
            }
        } else {
            /* undo: the orbits s now belong to b and go back to a, the t back to b */
            move_t un = mv;
            un.a = b; un.b = a;
            apply_move(&st, &un);
        }
    }
    memcpy(dev_of, best, sizeof(int64_t) * n_orb);
    out[0] = best_w; out[1] = (double)tried; out[2] = (double)accepted;
    for (int j = 0; j < NK; j++) out[3 + j] = best_keys[j];
    free(st.dev_of); free(st.S); free(st.H); free(st.pk); free(st.edge_cnt); free(pk2);
    free(best); free(mov); free(lst); free(lst_len); free(where);
    free(stamp); free(tl); free(dp); free(dp_start);
    if (use_field) { free(st.G); free(st.cov); free(cov2); free(st.ncount); }
    drop(bf, 21);
    return PyLong_FromLong(status);
no_memory:
    free(st.dev_of); free(st.S); free(st.H); free(st.pk); free(st.edge_cnt); free(pk2);
    free(best); free(mov); free(lst); free(lst_len); free(where);
    free(stamp); free(tl); free(dp); free(dp_start);
    free(st.G); free(st.cov); free(cov2); free(st.ncount);
    drop(bf, 21);
    return PyErr_NoMemory();
}

/* ------------------------------------------------------------------ branch and bound */

#define NB 14           /* bounded monomials: u, v, uu, uv, vv, then order 3 (4), order 4 (5) */

typedef struct {
    const prob_t *P;
    int64_t n_lev;              /* free orbits, in branching order */
    const int64_t *lev_orb;     /* orbit at each level */
    const int64_t *orb_hi;      /* n_orb x 9 integer higher monomials */
    const int64_t *allow;       /* per orbit: a bit for each device that may take it */
    int64_t *S;                 /* (n_dev + 1) x NM running sums */
    int64_t *Sh;                /* (n_dev + 1) x 9 running higher sums */
    int64_t T[2];
    int64_t *left;              /* units (or spare slots) still to place, per device */
    const int64_t *cls;         /* interchange class of each device (-1 none) */
    int64_t *first_seen;        /* level at which each device first appeared (-1 not yet) */
    int64_t maxr;
    int64_t *smin, *smax;       /* (n_lev + 1) x (maxr + 1) x NB suffix extremes */
    int64_t *cur, *best;        /* device per level */
    double best_lin, best_key[3], rel;   /* key: quadratic, order 3, order 4 */
    int n_keys;                 /* 1 (quadratic) .. 3 (to order 4) */
    int fixed_centre;           /* no spare slot: the centre of the device units is fixed */
    double cx, cy;              /* that centre, doubled units */
    double deadline;
    int64_t nodes, node_limit;
    int status;                 /* 0 running/proven, 1 deadline, 2 signal, 3 node limit */
    int mode;                   /* 0 lexicographic, 1 linear only, 2 the rest under lin_cap */
    double lin_cap;
    int centre_bound;           /* every pair ranked and the centre fixed (see bounds) */
    int par[2];                 /* parity of every slot's doubled offset in x, y (-1: mixed) */
    int64_t Tall[2];            /* first-moment sum of all device units (fixed centre) */
} bnb_t;

static inline int64_t *SM(const bnb_t *B, int64_t lev, int64_t r, int c, int mx) {
    return (mx ? B->smax : B->smin) + ((lev * (B->maxr + 1) + r) * NB + c);
}

static inline int64_t cur_sum(const bnb_t *B, int64_t d, int c) {
    return c < 5 ? B->S[NM * d + 1 + c] : B->Sh[9 * d + (c - 5)];
}

/* interval of the final sum of bounded monomial c of device d */
static inline void range_of(const bnb_t *B, int64_t lev, int64_t d, int c, double *lo,
                            double *hi) {
    int64_t r = B->left[d];
    if (r > B->maxr) r = B->maxr;
    double base = (double)cur_sum(B, d, c);
    *lo = base + (double)*SM(B, lev, r, c, 0);
    *hi = base + (double)*SM(B, lev, r, c, 1);
}

static inline double dist0(double lo, double hi) {
    if (lo > 0) return lo;
    if (hi < 0) return -hi;
    return 0.0;
}

static inline void imul(double alo, double ahi, double blo, double bhi, double *lo, double *hi) {
    double p1 = alo * blo, p2 = alo * bhi, p3 = ahi * blo, p4 = ahi * bhi;
    *lo = fmin(fmin(p1, p2), fmin(p3, p4));
    *hi = fmax(fmax(p1, p2), fmax(p3, p4));
}

/* index into the bounded monomials of x^i y^l (1 <= i + l <= 4); -1 for the count */
static inline int mono_index(int i, int l) {
    int k = i + l;
    if (k == 0) return -1;
    if (k == 1) return i ? 0 : 1;
    if (k == 2) return 2 + l;
    if (k == 3) return 5 + l;
    return 9 + l;
}

/* lower bound of the order-k central moment difference norm (um^k) of a pair, from the
 * interval of every raw monomial sum; valid when the centre is fixed */
static double central_bound(const bnb_t *B, int64_t lev, int64_t a, int64_t b, int k) {
    const prob_t *P = B->P;
    double na = (double)P->counts[a], nb = (double)P->counts[b], acc = 0.0;
    for (int j = 0; j <= k; j++) {
        double lo = 0.0, hi = 0.0;
        for (int i = 0; i <= k - j; i++)
            for (int l = 0; l <= j; l++) {
                double c = BIN[k - j][i] * BIN[j][l] * pow(-B->cx, k - j - i)
                           * pow(-B->cy, j - l);
                int m = mono_index(i, l);
                double alo, ahi, blo, bhi;
                if (m < 0) { alo = ahi = na; blo = bhi = nb; }
                else { range_of(B, lev, a, m, &alo, &ahi); range_of(B, lev, b, m, &blo, &bhi); }
                /* c (A / na - B / nb) */
                double x0 = c * alo / na, x1 = c * ahi / na, y0 = -c * blo / nb, y1 = -c * bhi / nb;
                lo += fmin(x0, x1) + fmin(y0, y1);
                hi += fmax(x0, x1) + fmax(y0, y1);
            }
        double d = dist0(lo, hi) * pow(P->hx, k - j) * pow(P->hy, j);
        acc += BIN[k][j] * d * d;
    }
    return sqrt(acc);
}

/* Nearest distance from t to a value in [lo, hi] with parity p (-1: any integer). */
static double gap_to(double lo, double hi, double t, int p) {
    double v = t < lo ? lo : (t > hi ? hi : t);
    if (p < 0) {
        double f = floor(v), c = ceil(v);
        double best = INFINITY;
        if (f >= lo) best = fabs(f - t);
        if (c <= hi) best = fmin(best, fabs(c - t));
        return best == INFINITY ? fabs(v - t) : best;
    }
    /* integers of parity p nearest to v, kept inside [lo, hi] (lo, hi have parity p) */
    double k = floor(v);
    if (((int64_t)k % 2 + 2) % 2 != p) k -= 1;
    double best = INFINITY;
    for (int i = 0; i < 3; i++) {
        double x = k + 2 * i;
        if (x >= lo - 1e-9 && x <= hi + 1e-9) best = fmin(best, fabs(x - t));
    }
    if (best == INFINITY) best = fmin(fabs(lo - t), fabs(hi - t));
    return best;
}

/* Lower bounds of the worst linear term and of the later keys over every completion. */
static void bounds(const bnb_t *B, int64_t lev, double *lb_lin, double *lb) {
    const prob_t *P = B->P;
    double hx = P->hx, hy = P->hy, N = (double)P->N;
    double wl = 0.0, w[3] = {0.0, 0.0, 0.0};
    if (B->centre_bound) {
        /* the centre C of all units is a weighted mean of the centroids, so every pair
         * of device d is at least |c_d - C| apart for one partner: the worst pair is at
         * least max_d |c_d - C|; each coordinate sum of d lies in its interval and has a
         * known parity (every slot's doubled offset shares it) */
        for (int64_t d = 0; d < P->n_dev; d++) {
            double n = (double)P->counts[d], g[2];
            for (int c = 0; c < 2; c++) {
                double lo, hi;
                range_of(B, lev, d, c, &lo, &hi);
                int p = B->par[c] < 0 ? -1 : (int)((P->counts[d] * B->par[c]) % 2);
                g[c] = gap_to(lo, hi, n * (double)B->Tall[c] / N, p) / n;
            }
            double dist = sqrt(hx * hx * g[0] * g[0] + hy * hy * g[1] * g[1]);
            if (dist > wl) wl = dist;
        }
    }
    int64_t rem = 0;
    for (int64_t d = 0; d < P->n_dev; d++) rem += B->left[d];
    if (rem > B->maxr) rem = B->maxr;
    double tlo[2], thi[2];
    for (int c = 0; c < 2; c++) {
        tlo[c] = (double)(B->T[c] + *SM(B, lev, rem, c, 0));
        thi[c] = (double)(B->T[c] + *SM(B, lev, rem, c, 1));
    }
    for (int64_t p = 0; p < P->n_pairs; p++) {
        int64_t a = P->pairs[2 * p], b = P->pairs[2 * p + 1];
        double na = (double)P->counts[a], nb = (double)P->counts[b], den = na * nb;
        double alo[5], ahi[5], blo[5], bhi[5];
        for (int c = 0; c < 5; c++) {
            range_of(B, lev, a, c, &alo[c], &ahi[c]);
            range_of(B, lev, b, c, &blo[c], &bhi[c]);
        }
        double dlo[2], dhi[2];       /* D1 = nb S1a - na S1b */
        for (int c = 0; c < 2; c++) {
            dlo[c] = nb * alo[c] - na * bhi[c];
            dhi[c] = nb * ahi[c] - na * blo[c];
        }
        double lx = dist0(dlo[0], dhi[0]) * hx, ly = dist0(dlo[1], dhi[1]) * hy;
        double lin = sqrt(lx * lx + ly * ly) / den;
        if (lin > wl) wl = lin;
        if (B->mode == 1) continue;
        /* completions no worse in linear than allowed: |D1_c| h_c <= L na nb */
        double lim = (B->mode == 2 ? B->lin_cap : B->best_lin) * den * (1 + 1e-12);
        double cxl = lim / hx, cyl = lim / hy;
        dlo[0] = fmax(dlo[0], -cxl); dhi[0] = fmin(dhi[0], cxl);
        dlo[1] = fmax(dlo[1], -cyl); dhi[1] = fmin(dhi[1], cyl);
        if (dlo[0] > dhi[0] || dlo[1] > dhi[1]) { w[0] = INFINITY; continue; }
        double qlo[3], qhi[3];       /* Q = N (nb S2a - na S2b) - (D1 T' + T D1') */
        for (int c = 0; c < 3; c++) {
            qlo[c] = N * (nb * alo[2 + c] - na * bhi[2 + c]);
            qhi[c] = N * (nb * ahi[2 + c] - na * blo[2 + c]);
        }
        double plo, phi, rlo, rhi;
        imul(dlo[0], dhi[0], tlo[0], thi[0], &plo, &phi);
        qlo[0] -= 2 * phi; qhi[0] -= 2 * plo;
        imul(dlo[0], dhi[0], tlo[1], thi[1], &plo, &phi);
        imul(dlo[1], dhi[1], tlo[0], thi[0], &rlo, &rhi);
        qlo[1] -= phi + rhi; qhi[1] -= plo + rlo;
        imul(dlo[1], dhi[1], tlo[1], thi[1], &plo, &phi);
        qlo[2] -= 2 * phi; qhi[2] -= 2 * plo;
        double xx = dist0(qlo[0], qhi[0]) * hx * hx, xy = dist0(qlo[1], qhi[1]) * hx * hy,
               yy = dist0(qlo[2], qhi[2]) * hy * hy;
        double quad = P->g2half * sqrt(xx * xx + 2 * xy * xy + yy * yy) / (N * den);
        if (quad > w[0]) w[0] = quad;
        if (B->fixed_centre)
            for (int k = 3; k < 2 + B->n_keys; k++) {
                double h = central_bound(B, lev, a, b, k);
                if (h > w[k - 2]) w[k - 2] = h;
            }
    }
    *lb_lin = wl * (1 - 1e-12);
    for (int i = 0; i < 3; i++) lb[i] = w[i] * (1 - 1e-9);
}

/* -1, 0, 1: a below, tied with or above b within the relative tie */
static inline int tie_cmp(double a, double b, double rel) {
    if (fabs(a - b) <= rel * fmax(fabs(a), fabs(b))) return 0;
    return a < b ? -1 : 1;
}

/* could a key vector with these lower bounds beat the incumbent's later keys? */
static int could_beat(const bnb_t *B, const double *lb) {
    for (int i = 0; i < B->n_keys; i++) {
        if (lb[i] < B->best_key[i] * (1 - B->rel) && !(lb[i] == 0 && B->best_key[i] == 0))
            return 1;
        if (lb[i] > B->best_key[i] * (1 + B->rel) + 1e-300) return 0;
    }
    return 0;
}

static void leaf(bnb_t *B) {
    const prob_t *P = B->P;
    double wl = 0.0, key[3] = {0.0, 0.0, 0.0}, l, q, h3, h4;
    int64_t D1 = P->n_dev + 1;
    double *H = NULL;
    if (B->n_keys > 1) {
        H = malloc(sizeof(double) * NH * D1);
        if (!H) { B->status = 4; return; }           /* out of memory: stop the search */
        for (int64_t i = 0; i < NH * D1; i++) H[i] = (double)B->Sh[i];
    }
    for (int64_t p = 0; p < P->n_pairs; p++) {
        pair_terms(P, B->S, H, B->T, p, &l, &q, &h3, &h4);
        if (l > wl) wl = l;
        if (q > key[0]) key[0] = q;
        if (h3 > key[1]) key[1] = h3;
        if (h4 > key[2]) key[2] = h4;
    }
    free(H);
    double tol = 1e-12 * fmax(B->best_lin, 1e-300);
    int later = 0;                       /* -1 when the later keys beat the incumbent's */
    for (int i = 0; i < B->n_keys && !later; i++) later = tie_cmp(key[i], B->best_key[i], B->rel);
    int better;
    if (B->mode == 1) better = wl < B->best_lin - tol;
    else if (B->mode == 2) better = wl <= B->lin_cap * (1 + 1e-12) + 1e-300 && later < 0;
    else better = wl < B->best_lin - tol || (wl <= B->best_lin + tol && later < 0);
    if (better) {
        B->best_lin = wl;
        for (int i = 0; i < 3; i++) B->best_key[i] = key[i];
        memcpy(B->best, B->cur, sizeof(int64_t) * B->n_lev);
    }
}

static void descend(bnb_t *B, int64_t lev) {
    const prob_t *P = B->P;
    if (B->status) return;
    if ((++B->nodes & 8191) == 0) {
        if (now_monotonic() > B->deadline) { B->status = 1; return; }
        if (PyErr_CheckSignals() < 0) { PyErr_Clear(); B->status = 2; return; }
        if (B->node_limit > 0 && B->nodes > B->node_limit) { B->status = 3; return; }
    }
    if (lev == B->n_lev) { leaf(B); return; }
    int64_t o = B->lev_orb[lev], size = P->orb_size[o];
    int64_t D1 = P->n_dev + 1;
    int64_t first = B->best[lev];            /* the incumbent's device here first */
    for (int64_t k = -1; k < D1; k++) {
        int64_t d = k < 0 ? first : k;
        if (k >= 0 && d == first) continue;
        if (d < 0 || d >= D1 || B->left[d] < size) continue;
        if (!allows(B->allow[o], d)) continue;
        if (d < P->n_dev && B->cls[d] >= 0 && B->first_seen[d] < 0) {
            int ok = 1;                       /* interchangeable devices appear in order */
            for (int64_t e = 0; e < d; e++)
                if (B->cls[e] == B->cls[d] && B->first_seen[e] < 0) { ok = 0; break; }
            if (!ok) continue;
        }
        const int64_t *m = P->orb_m + NM * o, *mh = B->orb_hi + 9 * o;
        for (int i = 0; i < NM; i++) B->S[NM * d + i] += m[i];
        for (int i = 0; i < 9; i++) B->Sh[9 * d + i] += mh[i];
        if (d < P->n_dev) { B->T[0] += m[1]; B->T[1] += m[2]; }
        B->left[d] -= size;
        int marked = 0;
        if (d < P->n_dev && B->first_seen[d] < 0) { B->first_seen[d] = lev; marked = 1; }
        B->cur[lev] = d;
        double lb_l, lb[3];
        bounds(B, lev + 1, &lb_l, lb);
        int prune;
        if (B->mode == 1) prune = lb_l >= B->best_lin * (1 - 1e-12);
        else if (B->mode == 2) prune = lb_l > B->lin_cap * (1 + 1e-12) + 1e-300
                                       || !could_beat(B, lb);
        else prune = lb_l > B->best_lin * (1 + 1e-12) + 1e-300
                     || (lb_l >= B->best_lin * (1 - 1e-12) && !could_beat(B, lb));
        if (!prune) descend(B, lev + 1);
        if (marked) B->first_seen[d] = -1;
        B->left[d] += size;
        if (d < P->n_dev) { B->T[0] -= m[1]; B->T[1] -= m[2]; }
        for (int i = 0; i < 9; i++) B->Sh[9 * d + i] -= mh[i];
        for (int i = 0; i < NM; i++) B->S[NM * d + i] -= m[i];
        if (B->status) return;
    }
}

/*
 * bnb(orb_m, orb_hi, orb_size, lev_orb, counts_left, pairs, classes, base, base_hi,
 *     best_dev, fparams, iparams, out, allow) -> status
 *
 * Depth-first branch and bound over the free orbits in the order lev_orb, each level
 * giving its orbit to a device (or the spare) with units left. best_dev holds the
 * incumbent's device per level on entry (its keys in fparams) and the best found on
 * return. status 0: the search space is exhausted (the result is optimal).
 * fparams: hx, hy, g2half, incumbent linear, incumbent quadratic, relative tie, deadline,
 *          linear cap (mode 2), incumbent order 3, incumbent order 4
 * iparams: n_orb_total, n_dev, n_pairs, n_levels, N, node_limit, mode (0 lexicographic:
 *          linear then the rest; 1 the linear optimum only; 2 the rest among completions
 *          whose linear term is at most the cap), order (2..4), every pair ranked (0/1),
 *          parity of the doubled x and y offsets of every usable slot (-1: mixed)
 * out: best linear, best quadratic, nodes, best order 3, best order 4
 */
static PyObject *py_bnb(PyObject *self, PyObject *args) {
    PyObject *o[14];
    if (!PyArg_ParseTuple(args, "OOOOOOOOOOOOOO", &o[0], &o[1], &o[2], &o[3], &o[4], &o[5],
                          &o[6], &o[7], &o[8], &o[9], &o[10], &o[11], &o[12], &o[13]))
        return NULL;
    buf_t bf[14];
    memset(bf, 0, sizeof(bf));
    if (get_buf(o[11], &bf[11], 0, 'q', 11, "iparams") < 0 ||
        get_buf(o[10], &bf[10], 0, 'd', 10, "fparams") < 0) { drop(bf, 14); return NULL; }
    const int64_t *ip = bf[11].b.buf;
    const double *fp = bf[10].b.buf;
    int64_t n_orb = ip[0], n_dev = ip[1], n_pairs = ip[2], n_lev = ip[3], N = ip[4];
    int64_t order = ip[7] < 2 ? 2 : (ip[7] > 4 ? 4 : ip[7]);
    int64_t D1 = n_dev + 1;
    if (check_size(n_orb, 0, "n_orb") < 0 || check_size(n_dev, 1, "n_dev") < 0 ||
        check_size(n_pairs, 0, "n_pairs") < 0 || check_size(n_lev, 0, "n_lev") < 0 ||
        check_size(N, 1, "N") < 0) { drop(bf, 14); return NULL; }
    if (get_buf(o[0], &bf[0], 0, 'q', NM * n_orb, "orb_m") < 0 ||
        get_buf(o[1], &bf[1], 0, 'q', 9 * n_orb, "orb_hi") < 0 ||
        get_buf(o[2], &bf[2], 0, 'q', n_orb, "orb_size") < 0 ||
        get_buf(o[3], &bf[3], 0, 'q', n_lev, "lev_orb") < 0 ||
        get_buf(o[4], &bf[4], 0, 'q', D1, "counts_left") < 0 ||
        get_buf(o[5], &bf[5], 0, 'q', 2 * n_pairs, "pairs") < 0 ||
        get_buf(o[6], &bf[6], 0, 'q', D1, "classes") < 0 ||
        get_buf(o[7], &bf[7], 0, 'q', NM * D1, "base") < 0 ||
        get_buf(o[8], &bf[8], 0, 'q', 9 * D1, "base_hi") < 0 ||
        get_buf(o[9], &bf[9], 1, 'q', n_lev, "best_dev") < 0 ||
        get_buf(o[12], &bf[12], 1, 'd', 5, "out") < 0 ||
        get_buf(o[13], &bf[13], 0, 'q', n_orb, "allow") < 0) { drop(bf, 14); return NULL; }
    if (check_range(&bf[2], n_orb, 1, 3, "orb_size") < 0 ||
        check_range(&bf[3], n_lev, 0, n_orb, "lev_orb") < 0 ||
        check_range(&bf[4], D1, 0, MAX_COUNT, "counts_left") < 0 ||
        check_range(&bf[5], 2 * n_pairs, 0, n_dev, "pairs") < 0 ||
        check_range(&bf[6], D1, -1, D1, "classes") < 0) { drop(bf, 14); return NULL; }
    const int64_t *left0 = bf[4].b.buf, *base = bf[7].b.buf, *base_hi = bf[8].b.buf;
    int64_t *counts = malloc(sizeof(int64_t) * D1);
    if (!counts) { drop(bf, 14); return PyErr_NoMemory(); }
    for (int64_t d = 0; d < D1; d++) counts[d] = base[NM * d] + left0[d];
    prob_t P = {n_orb, n_dev, n_pairs, 0, order, N, bf[0].b.buf, NULL, bf[2].b.buf, NULL,
                bf[5].b.buf, counts, fp[0], fp[1], fp[2], 0.0, base, NULL};
    bnb_t B;
    memset(&B, 0, sizeof(B));
    B.P = &P;
    B.n_lev = n_lev;
    B.lev_orb = bf[3].b.buf;
    B.orb_hi = bf[1].b.buf;
    B.allow = bf[13].b.buf;
    B.cls = bf[6].b.buf;
    B.S = malloc(sizeof(int64_t) * NM * D1);
    B.Sh = malloc(sizeof(int64_t) * 9 * D1);
    B.left = malloc(sizeof(int64_t) * D1);
    B.first_seen = malloc(sizeof(int64_t) * D1);
    int64_t *vals = NULL;
    if (!B.S || !B.Sh || !B.left || !B.first_seen) goto no_memory;
    memcpy(B.S, base, sizeof(int64_t) * NM * D1);
    memcpy(B.Sh, base_hi, sizeof(int64_t) * 9 * D1);
    for (int64_t d = 0; d < n_dev; d++) { B.T[0] += base[NM * d + 1]; B.T[1] += base[NM * d + 2]; }
    memcpy(B.left, left0, sizeof(int64_t) * D1);
    for (int64_t d = 0; d < D1; d++) B.first_seen[d] = base[NM * d] > 0 ? 0 : -1;
    B.n_keys = (int)order - 1;
    /* with no spare slot the device units fill every usable slot: a fixed centre */
    B.fixed_centre = counts[n_dev] == 0;
    int64_t Tall[2] = {0, 0};
    for (int64_t d = 0; d < n_dev; d++) { Tall[0] += base[NM * d + 1]; Tall[1] += base[NM * d + 2]; }
    for (int64_t i = 0; i < n_lev; i++) {
        Tall[0] += P.orb_m[NM * B.lev_orb[i] + 1]; Tall[1] += P.orb_m[NM * B.lev_orb[i] + 2];
    }
    B.cx = (double)Tall[0] / (double)N;
    B.cy = (double)Tall[1] / (double)N;
    B.Tall[0] = Tall[0]; B.Tall[1] = Tall[1];
    B.centre_bound = B.fixed_centre && ip[8];
    B.par[0] = (int)ip[9]; B.par[1] = (int)ip[10];
    B.maxr = 0;
    for (int64_t lev = 0; lev < n_lev; lev++) B.maxr += P.orb_size[B.lev_orb[lev]];
    int64_t R = B.maxr + 1;
    B.smin = calloc((n_lev + 1) * R * NB, sizeof(int64_t));
    B.smax = calloc((n_lev + 1) * R * NB, sizeof(int64_t));
    vals = malloc(sizeof(int64_t) * (B.maxr ? B.maxr : 1));
    if (!B.smin || !B.smax || !vals) goto no_memory;
    for (int64_t lev = 0; lev <= n_lev; lev++) {
        for (int c = 0; c < NB; c++) {
            int64_t n = 0;
            for (int64_t k = lev; k < n_lev; k++) {
                int64_t oo = B.lev_orb[k], sz = P.orb_size[oo];
                int64_t v = c < 5 ? P.orb_m[NM * oo + 1 + c] : B.orb_hi[9 * oo + (c - 5)];
                /* a mirrored pair counts as two slots of half its sum each: choosing whole
                 * pairs is one of the choices of halves, so the bound stays valid */
                for (int64_t i = 0; i < sz; i++)
                    vals[n++] = sz == 1 ? v : (i == 0 ? v / 2 : v - v / 2);
            }
            for (int64_t i = 1; i < n; i++) {           /* insertion sort: small n */
                int64_t x = vals[i], j = i - 1;
                while (j >= 0 && vals[j] > x) { vals[j + 1] = vals[j]; j--; }
                vals[j + 1] = x;
            }
            int64_t lo = 0, hi = 0;
            for (int64_t r = 0; r <= B.maxr; r++) {
                if (r > 0 && r <= n) { lo += vals[r - 1]; hi += vals[n - r]; }
                *SM(&B, lev, r, c, 0) = r <= n ? lo : INT64_MIN / 4;
                *SM(&B, lev, r, c, 1) = r <= n ? hi : INT64_MAX / 4;
            }
        }
    }
    free(vals);
    B.cur = calloc(n_lev ? n_lev : 1, sizeof(int64_t));
    if (!B.cur) goto no_memory;
    B.best = bf[9].b.buf;
    B.best_lin = fp[3];
    B.best_key[0] = fp[4];
    B.best_key[1] = fp[8];
    B.best_key[2] = fp[9];
    B.rel = fp[5];
    B.deadline = fp[6];
    B.lin_cap = fp[7];
    B.node_limit = ip[5];
    B.mode = (int)ip[6];
    descend(&B, 0);
    double *out = bf[12].b.buf;
    out[0] = B.best_lin; out[1] = B.best_key[0]; out[2] = (double)B.nodes;
    out[3] = B.best_key[1]; out[4] = B.best_key[2];
    int status = B.status;
    free(counts); free(B.S); free(B.Sh); free(B.left); free(B.first_seen); free(B.smin);
    free(B.smax); free(B.cur);
    drop(bf, 14);
    if (status == 4) return PyErr_NoMemory();
    return PyLong_FromLong(status);
no_memory:
    free(counts); free(B.S); free(B.Sh); free(B.left); free(B.first_seen); free(B.smin);
    free(B.smax); free(B.cur); free(vals);
    drop(bf, 14);
    return PyErr_NoMemory();
}

/* keys(orb_m, orb_h, counts, pairs, dev_of, fparams, iparams, out): the pair terms of one
 * state (lin, quad, hi3, hi4 per pair) -- the same arithmetic the loops rank by. */
static PyObject *py_keys(PyObject *self, PyObject *args) {
    PyObject *o[9];
    if (!PyArg_ParseTuple(args, "OOOOOOOOO", &o[0], &o[1], &o[2], &o[3], &o[4], &o[5], &o[6],
                          &o[7], &o[8]))
        return NULL;
    buf_t bf[9];
    memset(bf, 0, sizeof(bf));
    if (get_buf(o[7], &bf[7], 0, 'q', 5, "iparams") < 0 || get_buf(o[6], &bf[6], 0, 'd', 4, "fparams") < 0)
        { drop(bf, 9); return NULL; }
    const int64_t *ip = bf[7].b.buf;
    const double *fp = bf[6].b.buf;
    int64_t n_orb = ip[0], n_dev = ip[1], n_pairs = ip[2], order = ip[3], N = ip[4];
    int64_t D1 = n_dev + 1;
    if (check_size(n_orb, 0, "n_orb") < 0 || check_size(n_dev, 1, "n_dev") < 0 ||
        check_size(n_pairs, 0, "n_pairs") < 0 || check_size(N, 1, "N") < 0)
        { drop(bf, 9); return NULL; }
    if (get_buf(o[0], &bf[0], 0, 'q', NM * n_orb, "orb_m") < 0 ||
        get_buf(o[1], &bf[1], 0, 'd', NH * n_orb, "orb_h") < 0 ||
        get_buf(o[2], &bf[2], 0, 'q', D1, "counts") < 0 ||
        get_buf(o[3], &bf[3], 0, 'q', 2 * n_pairs, "pairs") < 0 ||
        get_buf(o[4], &bf[4], 0, 'q', n_orb, "dev_of") < 0 ||
        get_buf(o[5], &bf[5], 0, 'q', NM * D1, "base") < 0 ||
        get_buf(o[8], &bf[8], 1, 'd', 4 * n_pairs, "out") < 0) { drop(bf, 9); return NULL; }
    if (check_range(&bf[3], 2 * n_pairs, 0, n_dev, "pairs") < 0 ||
        check_range(&bf[4], n_orb, 0, D1, "dev_of") < 0) { drop(bf, 9); return NULL; }
    prob_t P = {n_orb, n_dev, n_pairs, 0, order, N, bf[0].b.buf, bf[1].b.buf, NULL, NULL,
                bf[3].b.buf, bf[2].b.buf, fp[0], fp[1], fp[2], fp[3], bf[5].b.buf, NULL};
    int64_t *S = malloc(sizeof(int64_t) * NM * D1);
    double *H = calloc(NH * D1, sizeof(double));
    if (!S || !H) { free(S); free(H); drop(bf, 9); return PyErr_NoMemory(); }
    memcpy(S, P.base, sizeof(int64_t) * NM * D1);
    int64_t T[2] = {0, 0};
    const int64_t *dev = bf[4].b.buf;
    for (int64_t i = 0; i < n_orb; i++) {
        int64_t d = dev[i];
        for (int c = 0; c < NM; c++) S[NM * d + c] += P.orb_m[NM * i + c];
        for (int c = 0; c < NH; c++) H[NH * d + c] += P.orb_h[NH * i + c];
    }
    for (int64_t d = 0; d < n_dev; d++) { T[0] += S[NM * d + 1]; T[1] += S[NM * d + 2]; }
    double *out = bf[8].b.buf;
    for (int64_t p = 0; p < n_pairs; p++)
        pair_terms(&P, S, H, T, p, &out[4 * p], &out[4 * p + 1], &out[4 * p + 2], &out[4 * p + 3]);
    free(S); free(H);
    drop(bf, 9);
    Py_RETURN_NONE;
}

static PyMethodDef methods[] = {
    {"anneal", py_anneal, METH_VARARGS, "Metropolis local search over orbit moves."},
    {"bnb", py_bnb, METH_VARARGS, "Branch and bound for the lexicographic optimum."},
    {"keys", py_keys, METH_VARARGS, "Per-pair terms of one state."},
    {NULL, NULL, 0, NULL}};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_native",
                                    "placer's compiled search loops.", -1, methods,
                                    NULL, NULL, NULL, NULL};

PyMODINIT_FUNC PyInit__native(void) { return PyModule_Create(&module); }
