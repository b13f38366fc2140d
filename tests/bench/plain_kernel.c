/*
 * plain_kernel.c -- a plain compiled Metropolis kernel, used as a speed yardstick
 * for this project's placement search (tests/bench/plain_kernel.py builds and
 * drives it).  It is written from the benchmark contract alone, as the obvious
 * implementation: per-device running sums, recompute the pairs that touch the two
 * swapped devices, plain scans for the max and mean over all pairs.
 *
 * Geometry: a rows x cols grid, every slot holds one unit; dev[r*cols + c] is the
 * unit's device (0..n_dev-1).  Slot position: x = (c - (cols-1)/2) * hx,
 * y = (r - (rows-1)/2) * hy.  Positions are kept as doubled integer offsets
 * u = 2c - (cols-1), v = 2r - (rows-1) (x = u*hx/2, y = v*hy/2), so the running
 * sums are exact int64 and never drift over millions of moves.
 *
 * Per device d (n_d units): centroid mu_d, second moment M_d = mean (p p^T)
 * (the centroid of all units is the origin, because every slot is filled).
 * Per pair a < b:  lin  = |mu_a - mu_b|,  quad = g2half * ||M_a - M_b||_F.
 * Energy E = max quad + lam * mean quad; moves breaking max lin <= lin_cap are
 * rejected.  Best state = lowest max quad, ties broken by lower E.
 *
 * Return value: 0 on success, -1 bad arguments, -2 start state breaks the cap,
 * -3 out of memory.
 */
#define _POSIX_C_SOURCE 199309L
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

/* ---- xoshiro256** seeded through splitmix64 ---- */
typedef struct { uint64_t s[4]; } rng_t;

static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += 0x9E3779B97F4A7C15ULL);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
    return z ^ (z >> 31);
}

static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }

static uint64_t rng_next(rng_t *r)
{
    uint64_t *s = r->s;
    uint64_t result = rotl(s[1] * 5, 7) * 9;
    uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return result;
}

static void rng_seed(rng_t *r, uint64_t seed)
{
    uint64_t x = seed;
    for (int i = 0; i < 4; i++) r->s[i] = splitmix64(&x);
}

/* uniform double in [0, 1) */
static double rng_unit(rng_t *r) { return (double)(rng_next(r) >> 11) * 0x1.0p-53; }

/* uniform integer in [0, n) (modulo bias is below 2^-50 for grid sizes) */
static int64_t rng_below(rng_t *r, int64_t n) { return (int64_t)(rng_next(r) % (uint64_t)n); }

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* ---- per-device running sums (doubled integer coordinates) ---- */
typedef struct {
    int64_t n, su, sv, suu, suv, svv;
} sums_t;

static void sums_add(sums_t *s, int64_t u, int64_t v, int64_t sign)
{
    s->n += sign;
    s->su += sign * u;
    s->sv += sign * v;
    s->suu += sign * u * u;
    s->suv += sign * u * v;
    s->svv += sign * v * v;
}

/* index of pair (i, j), i < j, in row-major upper-triangle order */
static int64_t pair_index(int64_t n_dev, int64_t i, int64_t j)
{
    return i * n_dev - i * (i + 1) / 2 + (j - i - 1);
}

typedef struct {
    double hx, hy, g2half;
} geom_t;

static double pair_lin(const geom_t *g, const sums_t *a, const sums_t *b)
{
    double dx = 0.5 * g->hx * ((double)a->su / (double)a->n - (double)b->su / (double)b->n);
    double dy = 0.5 * g->hy * ((double)a->sv / (double)a->n - (double)b->sv / (double)b->n);
    return sqrt(dx * dx + dy * dy);
}

static double pair_quad(const geom_t *g, const sums_t *a, const sums_t *b)
{
    double mxx = 0.25 * g->hx * g->hx * ((double)a->suu / (double)a->n - (double)b->suu / (double)b->n);
    double mxy = 0.25 * g->hx * g->hy * ((double)a->suv / (double)a->n - (double)b->suv / (double)b->n);
    double myy = 0.25 * g->hy * g->hy * ((double)a->svv / (double)a->n - (double)b->svv / (double)b->n);
    return g->g2half * sqrt(mxx * mxx + 2.0 * mxy * mxy + myy * myy);
}

int64_t plain_anneal(int64_t rows, int64_t cols, double hx, double hy, int64_t n_dev,
                     int64_t *dev, int64_t n_moves, uint64_t seed, double lin_cap,
                     double lam, double t0, double t_end, double g2half, double *out)
{
    out[0] = out[1] = out[2] = out[3] = 0.0;
    if (rows < 1 || cols < 1 || n_dev < 2 || n_moves < 0 || !(t_end > 0.0)) return -1;
    const int64_t n_slots = rows * cols;
    for (int64_t i = 0; i < n_slots; i++)
        if (dev[i] < 0 || dev[i] >= n_dev) return -1;

    const int64_t n_pairs = n_dev * (n_dev - 1) / 2;
    sums_t *sums = calloc((size_t)n_dev, sizeof *sums);
    double *lin = malloc((size_t)n_pairs * sizeof *lin);
    double *quad = malloc((size_t)n_pairs * sizeof *quad);
    int64_t *tp = malloc((size_t)(2 * n_dev) * sizeof *tp); /* touched pair */
    int64_t *tx = malloc((size_t)(2 * n_dev) * sizeof *tx); /* its moved device */
    int64_t *tk = malloc((size_t)(2 * n_dev) * sizeof *tk); /* its other device */
    double *old_lin = malloc((size_t)(2 * n_dev) * sizeof *old_lin);
    double *old_quad = malloc((size_t)(2 * n_dev) * sizeof *old_quad);
    int64_t *best = malloc((size_t)n_slots * sizeof *best);
    int64_t *su = malloc((size_t)n_slots * sizeof *su);
    int64_t *sv = malloc((size_t)n_slots * sizeof *sv);
    int64_t rc = 0;
    if (!sums || !lin || !quad || !tp || !tx || !tk || !old_lin || !old_quad || !best || !su || !sv) {
        rc = -3;
        goto done;
    }

    const geom_t g = {hx, hy, g2half};
    for (int64_t r = 0; r < rows; r++)
        for (int64_t c = 0; c < cols; c++) {
            int64_t i = r * cols + c;
            su[i] = 2 * c - (cols - 1);
            sv[i] = 2 * r - (rows - 1);
            sums_add(&sums[dev[i]], su[i], sv[i], 1);
        }
    for (int64_t d = 0; d < n_dev; d++)
        if (sums[d].n == 0) { rc = -1; goto done; }

    /* all pair terms of the start state */
    double max_lin = 0.0;
    for (int64_t a = 0; a < n_dev; a++)
        for (int64_t b = a + 1; b < n_dev; b++) {
            int64_t p = pair_index(n_dev, a, b);
            lin[p] = pair_lin(&g, &sums[a], &sums[b]);
            quad[p] = pair_quad(&g, &sums[a], &sums[b]);
            if (lin[p] > max_lin) max_lin = lin[p];
        }
    if (max_lin > lin_cap) { rc = -2; goto done; }

    double cur_max = 0.0, cur_sum = 0.0;
    for (int64_t p = 0; p < n_pairs; p++) {
        if (quad[p] > cur_max) cur_max = quad[p];
        cur_sum += quad[p];
    }
    double cur_e = cur_max + lam * cur_sum / (double)n_pairs;
    double best_max = cur_max, best_e = cur_e;
    memcpy(best, dev, (size_t)n_slots * sizeof *best);

    rng_t rng;
    rng_seed(&rng, seed);
    const double log_step = n_moves > 1 ? log(t_end) / (double)(n_moves - 1) : 0.0;
    int auto_t0 = !(t0 > 0.0);
    int n_pos = 0;
    double pos_sum = 0.0;
    int64_t tried = 0, accepted = 0;

    double t_start = now_seconds();
    for (int64_t it = 0; it < n_moves; it++) {
        int64_t i, j;
        do {
            i = rng_below(&rng, n_slots);
            j = rng_below(&rng, n_slots);
        } while (dev[i] == dev[j]);
        tried++;
        const int64_t a = dev[i], b = dev[j];

        /* swap: a's unit moves from i to j, b's unit moves from j to i */
        sums_add(&sums[a], su[i], sv[i], -1);
        sums_add(&sums[a], su[j], sv[j], 1);
        sums_add(&sums[b], su[j], sv[j], -1);
        sums_add(&sums[b], su[i], sv[i], 1);

        /* the pairs touching a or b (the pair (a, b) once): save, then recompute
           lin first and reject early if the cap breaks */
        int64_t nt = 0;
        for (int64_t k = 0; k < n_dev; k++) {
            if (k != a) {
                tp[nt] = a < k ? pair_index(n_dev, a, k) : pair_index(n_dev, k, a);
                tx[nt] = a;
                tk[nt++] = k;
            }
            if (k != b && k != a) {
                tp[nt] = b < k ? pair_index(n_dev, b, k) : pair_index(n_dev, k, b);
                tx[nt] = b;
                tk[nt++] = k;
            }
        }
        for (int64_t q = 0; q < nt; q++) {
            old_lin[q] = lin[tp[q]];
            old_quad[q] = quad[tp[q]];
        }
        int broken = 0;
        for (int64_t q = 0; q < nt; q++) {
            lin[tp[q]] = pair_lin(&g, &sums[tx[q]], &sums[tk[q]]);
            if (lin[tp[q]] > lin_cap) {
                broken = 1;
                break;
            }
        }

        int accept = 0;
        double new_max = 0.0, new_e = 0.0;
        if (!broken) {
            for (int64_t q = 0; q < nt; q++)
                quad[tp[q]] = pair_quad(&g, &sums[tx[q]], &sums[tk[q]]);
            double s = 0.0;
            for (int64_t p = 0; p < n_pairs; p++) {
                if (quad[p] > new_max) new_max = quad[p];
                s += quad[p];
            }
            new_e = new_max + lam * s / (double)n_pairs;
            double de = new_e - cur_e;
            if (de <= 0.0) {
                accept = 1;
            } else {
                double temp;
                if (auto_t0) {
                    if (n_pos < 16) {
                        pos_sum += de;
                        n_pos++;
                    }
                    if (n_pos >= 16) {
                        t0 = pos_sum / 16.0;
                        auto_t0 = 0;
                        temp = t0 * exp(log_step * (double)it);
                    } else {
                        temp = fabs(cur_e);
                    }
                } else {
                    temp = t0 * exp(log_step * (double)it);
                }
                accept = temp > 0.0 && rng_unit(&rng) < exp(-de / temp);
            }
        }

        if (accept) {
            dev[i] = b;
            dev[j] = a;
            accepted++;
            cur_max = new_max;
            cur_e = new_e;
            if (cur_max < best_max || (cur_max == best_max && cur_e < best_e)) {
                best_max = cur_max;
                best_e = cur_e;
                memcpy(best, dev, (size_t)n_slots * sizeof *best);
            }
        } else {
            sums_add(&sums[a], su[j], sv[j], -1);
            sums_add(&sums[a], su[i], sv[i], 1);
            sums_add(&sums[b], su[i], sv[i], -1);
            sums_add(&sums[b], su[j], sv[j], 1);
            for (int64_t q = 0; q < nt; q++) {
                lin[tp[q]] = old_lin[q];
                quad[tp[q]] = old_quad[q];
            }
        }
    }
    double seconds = now_seconds() - t_start;

    memcpy(dev, best, (size_t)n_slots * sizeof *best);
    out[0] = best_max;
    out[1] = (double)tried;
    out[2] = (double)accepted;
    out[3] = seconds;

done:
    free(sums);
    free(lin);
    free(quad);
    free(tp);
    free(tx);
    free(tk);
    free(old_lin);
    free(old_quad);
    free(best);
    free(su);
    free(sv);
    return rc;
}
