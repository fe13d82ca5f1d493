/*
 * Reference C implementation of the project's SSE loop algorithm, used only as a speed yardstick for the
 * numba engine (benchmarks/c_compare.py).  C99 plus __builtin_prefetch (gcc, clang), no dependencies:
 *
 *     cc -O3 -march=native -o sse_ref sse_ref.c -lm
 *     ./sse_ref L beta J Q warmup_steps measured_steps seed [variants [rounds [estimators]]]
 *
 * variants: comma-separated loop-update variants K[:E[:W[:I]]] (sse_loops.h): K = 1 one loop at a time
 * (loops_single), K >= 2 K interleaved tracers (loops_interleaved) that walk up to E steps alone while
 * within W KiB of the scan, with at most I fragment ids (0: no cap but the room in links; a small cap
 * exercises the single-tracer finish); K = 0 (the default) chooses by size: one tracer while the links array is at
 * most AUTO_BYTES, else AUTO_TRACERS:AUTO_EAGER:AUTO_WINDOW_KIB (measured with benchmarks/c_compare.py
 * --scaling).  All variants give the same Markov chain bit for bit, so one chain can take turns: each of
 * `rounds` rounds (default 1) runs measured_steps steps with every variant; the timings of each variant
 * are those of its fastest round.
 * estimators: `plain` (the default) or `improved`, the two measurement modes of the engine ([sampling]
 * estimators; `qmc run` uses `improved` by default), see "Per measured step" below.
 * Compile with -DSSE_CHECK to verify after every sweep that the world lines close (periodic in imaginary
 * time) and that every operator acts on antiparallel bonds, i.e. that every loop was flipped as a whole,
 * and (improved mode) that the loop estimators' Q2 = sum_l n_l^2 returns to its slice-0 value.
 *
 * Model (periodic L x L square lattice, L even >= 4), written as H = E_const - sum_t C_t prod_a P_{i_a j_a}
 * with P_ij = 1/4 - S_i.S_j:
 *   - J > 0: one k = 1 term per nearest-neighbour bond (2N of them), C_t = J; E_const = J/4 * 2N;
 *   - Q > 0: one k = 2 term per 2x2 plaquette and orientation (the two parallel bonds), C_t = Q (2N terms).
 * The J-Q2 energy per site is therefore J/2 - <n>/(beta N).
 *
 * Algorithm (the same as qmc/engine): fixed-length operator string of M slots sampling
 *     W = beta^n (M - n)! / M!  prod_p C_{t_p} / 2^{k_{t_p}};
 * one Monte Carlo step = one diagonal sweep + one full loop decomposition.
 *   - The diagonal sweep is fused: per slot it applies the loop flips of the previous step (vflip, one
 *     byte per bond vertex, cleared as it is read), measures the propagated state (operators per group, staggered magnetisation
 *     after every operator, winding), does the diagonal update (insert with probability
 *     min(1, beta W_tot / (M - n)) if all bonds of the chosen term are antiparallel, the term chosen
 *     uniformly within its kind and the kind by weight; remove a fully diagonal operator with probability
 *     min(1, (M - n + 1) / (beta W_tot))) and appends the operator's bond vertices to the linked vertex
 *     list.  Vertices are numbered compactly: a k-bond operator is k four-leg bond vertices.
 *     Leg 4v + l: l = 0 site i below, 1 site j below, 2 site i above, 3 site j above.
 *     Everything the sweep needs about a term is one 32-byte row of the term table (bond count, group,
 *     bond directions, sites).
 *   - The loop update (sse_loops.h) builds every deterministic singlet-projector loop (enter at leg l,
 *     leave at l ^ 1), each leg visited once, flips each loop with probability 1/2 and flips free sites
 *     with probability 1/2.  It leaves every loop's label b (its number in construction order) in the
 *     marks, as the engine's does; with interleaved tracers only in improved mode (see the differences).
 *   - Per measured step it also does the numba engine's measurements (qmc/engine/steps.py): n and the
 *     operators per group, winding numbers, the columnar dimer order parameter and its 64 x 64
 *     histogram, and for the staggered moments M_s^2, M_s^4, the staggered susceptibility, the uniform
 *     magnetisation M_z^2 and S(Q + dq):
 *       plain     the sweep's time averages and the slice-0 sums (S(Q + dq) from cos/sin tables);
 *       improved  the loop estimators of the same five (loop_estimators below, the same work as
 *                 qmc/engine/loop_estimators.py: a pass over the sites at slice 0, a pass over the bond
 *                 vertices in string order, preceded for multi-bond strings by a pass marking where the
 *                 operators end), instead.
 *     The Markov chain is the same in both modes (the estimators draw no random number).
 *
 * Random numbers: xoshiro256** (Blackman and Vigna), doubles = top 53 bits * 2^-53; seeded by splitmix64.
 *
 * Differences from the numba engine (deliberate; each makes the C side cheaper, not dearer): the term is
 * chosen by kind (J or Q, by weight) and then uniformly within the kind (one uniform number, no table;
 * the engine's draw by group, qmc/engine/term_draw.py, does the same with up to four group edges read
 * from small arrays); k <= 2 is a compile-time bound and the term-table row width a constant (8 int32);
 * winding numbers are integer sums of two directions; seeding uses splitmix64 rather than numpy's
 * SeedSequence.  Loop flips are kept as the engine keeps them (one byte per bond vertex, toggled by the
 * loops, applied and cleared by the next sweep).  Cutoff: starts at
 * 1.2 beta W_tot + 16 and, during warm-up, grows to n + n/3 + 16 whenever fewer than n/3 slots are empty
 * (M about 4n/3; the engine uses the same rule).
 * In plain mode the interleaved tracers leave flip-only marks (the engine's always carry the loop
 * labels; the labelled passes after the tracing cost the C program 4-5% more loop time on the 32x32
 * canonical cases, measured).  The loop estimators' cos/sin sums come from a table without the
 * staggered sign (the engine multiplies its staggered tables by the sign again), and the bond count of
 * each term from a byte table (the engine reads it from its term table).
 * Output: one JSON object: the estimates (per site, S^z units, as the engine's bins: m_stag2_time_avg,
 * m_stag4, chi_stag, chi_uniform, s_q_next, each with an error bar from 20 bins) and the CPU time
 * (CLOCK_PROCESS_CPUTIME_ID) of the measured steps only: sweep, loop update and the per-step
 * measurements (loop estimators included), as the engine's step time includes them.
 */
#define _DEFAULT_SOURCE
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <time.h>

#define KMAX 2
#define TTW 8 /* int32 per term-table row: meta, then (i, j) per bond */
#define HIST_BINS 64
#define HIST_RANGE 0.25
#define TWO_PI 6.283185307179586476925286766559
#define AUTO_TRACERS 32
#define AUTO_BYTES (1L << 20)
#define AUTO_EAGER 32
#define AUTO_WINDOW_KIB 256

/* ------------------------------------------------------------------------------------------ RNG */
static inline uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }

static inline double next_double(uint64_t *s)
{
    const uint64_t result = rotl(s[1] * 5, 7) * 9;
    const uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return (double)(result >> 11) * 0x1.0p-53;
}

static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}

#include "sse_loops.h"

/* ------------------------------------------------------------------------------------------ state */
typedef struct {
    int L, N, T, nJ, nQ;
    double beta, J, Q, beta_wtot, wJ_tot, inv_wJ, inv_wQ;
    /* model */
    int8_t *phase;          /* [N] staggered sign */
    int32_t *tt;            /* [T * TTW] term rows: k | group << 2 | dir_a << (3 + a), then i_a, j_a */
    int8_t *kbonds;         /* [T] k of each term (the loop estimators' end-of-operator pass) */
    double *cos_tab, *sin_tab; /* [2 * N] phase_i cos/sin(2 pi r_a / L) */
    int32_t *vbs_bonds;     /* [2N * 2] */
    int8_t *vbs_dir, *vbs_phase;
    double *est_tab;        /* [4 * N] cos, sin(2 pi x / L), cos, sin(2 pi y / L) of site i at 4 i (no phase) */
    /* configuration and work arrays */
    int M;                  /* cutoff */
    int n;                  /* operators in the string */
    int vcap;               /* bond vertices the work arrays hold */
    int tracers;            /* loop update: 1 single tracer, K >= 2 interleaved */
    int eager;              /* pairs a fresh tracer walks alone before it is interleaved */
    int window;             /* ... as long as it stays within this many legs of the scan (0: no limit) */
    int8_t *spins;          /* [N] +-1 */
    int32_t *ops;           /* [M] -1 or (t << 3) | offmask */
    uint8_t *vflip;         /* [vcap] pending loop flips per bond vertex */
    int32_t *links;         /* [4 * vcap] */
    int32_t *first, *last;  /* [N] */
    long fragments;         /* fragment ids used by the interleaved loop update, summed over steps */
    int max_ids;            /* cap on fragment ids per step (0: what the tail of links holds) */
    int64_t hist[HIST_BINS * HIST_BINS];
    /* loop estimators (improved mode only) */
    int improved;           /* 1: labelled loops and the loop estimators instead of the plain ones */
    int64_t *tally;         /* [2 * 2 vcap] site count and length of loop b at 2 b, 2 b + 1; zero between calls */
    uint8_t *ends;          /* [vcap + 1] end-of-operator marks of the estimator pass; zero between calls */
    double *sums;           /* [5 * N] per slice-0 loop: w_l, then Re, Im of F_l along x and y */
    uint64_t rng[4];
} sse_t;

typedef struct {
    int n_old, ms_end;
    int64_t group[2];
    double sum_ms, sum_ms2, sum_ms4;
    int wind[2];
} sweep_out_t;

/* Zeroed memory; blocks of 4 MiB and more are marked for transparent huge pages, as numpy does for its
 * arrays (fewer TLB misses when the loop update jumps around a large vertex list). */
static void *xcalloc(size_t n, size_t size)
{
    void *p = calloc(n ? n : 1, size);
    if (!p) {
        fprintf(stderr, "out of memory\n");
        exit(2);
    }
#ifdef MADV_HUGEPAGE
    const size_t bytes = n * size;
    if (bytes >= ((size_t)4 << 20)) {
        const uintptr_t a = ((uintptr_t)p + 4095) & ~(uintptr_t)4095;
        madvise((void *)a, (bytes - (a - (uintptr_t)p)) & ~(size_t)4095, MADV_HUGEPAGE);
    }
#endif
    return p;
}

static void add_term(sse_t *s, int t, int k, int group, const int *sites, const int *dirs)
{
    int32_t *row = s->tt + (size_t)t * TTW;
    row[0] = k | group << 2;
    for (int a = 0; a < k; a++) {
        row[0] |= dirs[a] << (3 + a);
        row[1 + 2 * a] = sites[2 * a];
        row[2 + 2 * a] = sites[2 * a + 1];
    }
}

/* Work arrays for a cutoff of M slots (at most KMAX * M bond vertices); pending flips are kept. */
static void alloc_work(sse_t *s, int M)
{
    const int vcap = M * (s->nQ ? KMAX : 1);
    if (vcap <= s->vcap) return;
    uint8_t *vf = xcalloc((size_t)vcap, 1);
    if (s->vflip) memcpy(vf, s->vflip, (size_t)s->vcap);
    free(s->vflip);
    s->vflip = vf;
    free(s->links);
    s->links = xcalloc(4 * (size_t)vcap + 16 + 1024, sizeof(int32_t)); /* padding, then >= 1024 ids */
    s->vcap = vcap;
    if (s->improved) { /* at most one loop per pair of legs, 2 per vertex; called between steps: all zero */
        free(s->tally);
        free(s->ends);
        s->tally = xcalloc(4 * (size_t)vcap, sizeof(int64_t));
        s->ends = xcalloc((size_t)vcap + 1, 1);
    }
}

static void setup(sse_t *s, int L, double beta, double J, double Q, uint64_t seed)
{
    const int N = L * L;
    s->L = L;
    s->N = N;
    s->beta = beta;
    s->J = J;
    s->Q = Q;
    s->nJ = J > 0 ? 2 * N : 0;
    s->nQ = Q > 0 ? 2 * N : 0;
    s->T = s->nJ + s->nQ;
    s->phase = xcalloc(N, 1);
    s->tt = xcalloc((size_t)s->T * TTW, sizeof(int32_t));
    s->cos_tab = xcalloc(2 * (size_t)N, sizeof(double));
    s->sin_tab = xcalloc(2 * (size_t)N, sizeof(double));
    s->vbs_bonds = xcalloc(4 * (size_t)N, sizeof(int32_t));
    s->vbs_dir = xcalloc(2 * (size_t)N, 1);
    s->vbs_phase = xcalloc(2 * (size_t)N, 1);
    s->est_tab = xcalloc(4 * (size_t)N, sizeof(double));
    s->kbonds = xcalloc(s->T, 1);
#define SITE(x, y) ((((x) + L) % L) + L * (((y) + L) % L))
    for (int y = 0; y < L; y++)
        for (int x = 0; x < L; x++) {
            const int i = SITE(x, y);
            s->phase[i] = ((x + y) & 1) ? -1 : 1;
            for (int a = 0; a < 2; a++) {
                const double arg = TWO_PI * (a == 0 ? x : y) / L;
                s->cos_tab[a * N + i] = s->phase[i] * cos(arg);
                s->sin_tab[a * N + i] = s->phase[i] * sin(arg);
                s->est_tab[4 * i + 2 * a] = cos(arg);
                s->est_tab[4 * i + 2 * a + 1] = sin(arg);
            }
            s->vbs_bonds[4 * i] = i;
            s->vbs_bonds[4 * i + 1] = SITE(x + 1, y);
            s->vbs_dir[2 * i] = 0;
            s->vbs_phase[2 * i] = (x & 1) ? -1 : 1;
            s->vbs_bonds[4 * i + 2] = i;
            s->vbs_bonds[4 * i + 3] = SITE(x, y + 1);
            s->vbs_dir[2 * i + 1] = 1;
            s->vbs_phase[2 * i + 1] = (y & 1) ? -1 : 1;
            if (s->nJ) {
                const int bx[2] = {i, SITE(x + 1, y)}, by[2] = {i, SITE(x, y + 1)};
                const int dx[1] = {0}, dy[1] = {1};
                add_term(s, 2 * i, 1, 0, bx, dx);
                add_term(s, 2 * i + 1, 1, 0, by, dy);
            }
            if (s->nQ) {
                const int px[4] = {i, SITE(x + 1, y), SITE(x, y + 1), SITE(x + 1, y + 1)};
                const int py[4] = {i, SITE(x, y + 1), SITE(x + 1, y), SITE(x + 1, y + 1)};
                const int dx[2] = {0, 0}, dy[2] = {1, 1};
                add_term(s, s->nJ + 2 * i, 2, 1, px, dx);
                add_term(s, s->nJ + 2 * i + 1, 2, 1, py, dy);
            }
        }
#undef SITE
    for (int t = 0; t < s->T; t++) s->kbonds[t] = (int8_t)(s->tt[(size_t)t * TTW] & 3);
    /* weights w_t = C_t / 2^k: kind totals and per-term inverse weights for the uniform choice */
    s->wJ_tot = s->nJ * J / 2.0;
    const double wQ_tot = s->nQ * Q / 4.0;
    s->beta_wtot = beta * (s->wJ_tot + wQ_tot);
    s->inv_wJ = J > 0 ? 2.0 / J : 0.0;
    s->inv_wQ = Q > 0 ? 4.0 / Q : 0.0;

    uint64_t sm = seed;
    for (int a = 0; a < 4; a++) s->rng[a] = splitmix64(&sm);
    s->spins = xcalloc(N, 1);
    for (int i = 0; i < N; i++) s->spins[i] = next_double(s->rng) < 0.5 ? 1 : -1;
    s->M = (int)(1.2 * s->beta_wtot) + 16;
    if (s->M < 32) s->M = 32;
    s->n = 0;
    s->ops = malloc(sizeof(int32_t) * (size_t)s->M);
    for (int p = 0; p < s->M; p++) s->ops[p] = -1;
    alloc_work(s, s->M);
    s->first = xcalloc(N, sizeof(int32_t));
    s->last = xcalloc(N, sizeof(int32_t));
    s->sums = xcalloc(5 * (size_t)N, sizeof(double));
}

/* Append empty slots at the end (warm-up only, between steps): M -> n + n/3 + 16.  Vertex numbering, and
 * hence the pending flips, does not change when empty slots are appended after the last operator. */
static void grow_cutoff(sse_t *s)
{
    const int new_m = s->n + s->n / 3 + 16;
    if (new_m <= s->M) return;
    s->ops = realloc(s->ops, sizeof(int32_t) * (size_t)new_m);
    if (!s->ops) {
        fprintf(stderr, "out of memory\n");
        exit(2);
    }
    for (int p = s->M; p < new_m; p++) s->ops[p] = -1;
    s->M = new_m;
    alloc_work(s, new_m);
}

/* ------------------------------------------------------------------------------------------ sweep */
/* Returns the number of bond vertices of the new string. */
static int diagonal_sweep(sse_t *restrict s, sweep_out_t *restrict out)
{
    const int M = s->M, N = s->N, nJ = s->nJ, T = s->T;
    const double beta_wtot = s->beta_wtot, wJ_tot = s->wJ_tot, inv_wJ = s->inv_wJ, inv_wQ = s->inv_wQ;
    const double wtot = s->wJ_tot + (s->nQ * s->Q / 4.0);
    int32_t *restrict ops = s->ops;
    uint8_t *restrict vflip = s->vflip;
    int8_t *restrict spins = s->spins;
    int32_t *restrict links = s->links;
    int32_t *restrict first = s->first;
    int32_t *restrict last = s->last;
    const int8_t *restrict phase = s->phase;
    const int32_t *restrict tt = s->tt;
    uint64_t rng[4] = {s->rng[0], s->rng[1], s->rng[2], s->rng[3]};

    int ms = 0;
    for (int i = 0; i < N; i++) {
        first[i] = -1;
        last[i] = -1;
        ms += phase[i] * spins[i];
    }
#ifdef SSE_CHECK
    const size_t n_sites = (size_t)s->L * (size_t)s->L;
    int8_t *spins0 = malloc(n_sites);
    memcpy(spins0, spins, n_sites);
#endif
    int n_q = 0;
    int wind[2] = {0, 0};
    double sum_ms = 0.0, sum_ms2 = 0.0, sum_ms4 = 0.0;
    int n = s->n, n_old = 0, v_old = 0, v = 0;

    for (int p = 0; p < M; p++) {
        int op = ops[p];
        const int32_t *row;
        if (op >= 0) {
            row = tt + (size_t)(op >> 3) * TTW;
            const int meta = row[0], k = meta & 3;
            for (int a = 0; a < k; a++) { /* branch-free: a loop flips a vertex with probability 1/2 */
                op ^= vflip[v_old + a] << a;
                vflip[v_old + a] = 0;
            }
            v_old += k;
            n_old++;
            n_q += (meta >> 2) & 1;
#ifdef SSE_CHECK
            for (int a = 0; a < k; a++)
                if (spins[row[1 + 2 * a]] == spins[row[2 + 2 * a]]) {
                    fprintf(stderr, "SSE_CHECK: parallel bond under an operator at slot %d\n", p);
                    exit(3);
                }
#endif
            /* propagate through the off-diagonal bonds: one branch for a one-bond operator, none for a
               multi-bond one (f = 1 flips the pair), whose bond pattern the predictor cannot guess */
            if (k == 1) {
                if (op & 1) {
                    const int i = row[1], j = row[2];
                    const int si = spins[i], sj = spins[j];
                    wind[(meta >> 3) & 1] += si;
                    ms -= 2 * (phase[i] * si + phase[j] * sj);
                    spins[i] = (int8_t)-si;
                    spins[j] = (int8_t)-sj;
                }
            } else {
                for (int a = 0; a < k; a++) {
                    const int f = (op >> a) & 1, sign = 1 - 2 * f;
                    const int i = row[1 + 2 * a], j = row[2 + 2 * a];
                    const int si = spins[i], sj = spins[j];
                    wind[(meta >> (3 + a)) & 1] += f * si;
                    ms -= f * 2 * (phase[i] * si + phase[j] * sj);
                    spins[i] = (int8_t)(sign * si);
                    spins[j] = (int8_t)(sign * sj);
                }
            }
            ops[p] = op;
            const double fm = ms, fm2 = fm * fm;
            sum_ms += fm;
            sum_ms2 += fm2;
            sum_ms4 += fm2 * fm2;
            if ((op & 7) == 0) {
                if (next_double(rng) * beta_wtot < (double)(M - n + 1)) {
                    ops[p] = -1;
                    n--;
                    continue;
                }
            }
        } else {
            if (next_double(rng) * (double)(M - n) >= beta_wtot) continue;
            const double r = next_double(rng) * wtot;
            int t;
            if (r < wJ_tot) {
                t = (int)(r * inv_wJ);
                if (t >= nJ) t = nJ - 1;
            } else {
                t = nJ + (int)((r - wJ_tot) * inv_wQ);
                if (t >= T) t = T - 1;
            }
            row = tt + (size_t)t * TTW;
            const int k = row[0] & 3;
            int blocked = 0;
            for (int a = 0; a < k; a++) blocked |= spins[row[1 + 2 * a]] == spins[row[2 + 2 * a]];
            if (blocked) continue;
            ops[p] = t << 3;
            n++;
        }
        /* append the bond vertices of the operator now at slot p */
        const int k = row[0] & 3;
        for (int a = 0; a < k; a++) {
            const int i = row[1 + 2 * a], j = row[2 + 2 * a];
            const int leg = 4 * v;
            int prev = last[i];
            if (prev >= 0) {
                links[prev] = leg;
                links[leg] = prev;
            } else {
                first[i] = leg;
            }
            last[i] = leg + 2;
            prev = last[j];
            if (prev >= 0) {
                links[prev] = leg + 1;
                links[leg + 1] = prev;
            } else {
                first[j] = leg + 1;
            }
            last[j] = leg + 3;
            v++;
        }
    }
    for (int i = 0; i < N; i++) {
        const int f = first[i];
        if (f >= 0) {
            links[f] = last[i];
            links[last[i]] = f;
        }
    }
#ifdef SSE_CHECK
    if (memcmp(spins0, spins, n_sites) != 0) {
        fprintf(stderr, "SSE_CHECK: world lines do not close in imaginary time\n");
        exit(3);
    }
    free(spins0);
#endif
    memcpy(s->rng, rng, sizeof rng);
    s->n = n;
    out->n_old = n_old;
    out->ms_end = ms;
    out->group[0] = n_old - n_q;
    out->group[1] = n_q;
    out->sum_ms = sum_ms;
    out->sum_ms2 = sum_ms2;
    out->sum_ms4 = sum_ms4;
    out->wind[0] = wind[0];
    out->wind[1] = wind[1];
    return v;
}

/* ------------------------------------------------------------------------------------------ loops */
/* One loop update, the variant chosen by s->tracers (sse_loops.h). */
static int loop_update(sse_t *restrict s, int n_vertices)
{
    if (s->tracers == 1) return loops_single(s->links, s->vflip, n_vertices, s->spins, s->first, s->N, s->rng);
    return loops_interleaved(s->links, 4L * s->vcap + 16 + 1024, s->vflip, n_vertices, s->spins, s->first,
                             s->N, s->tracers, s->eager, s->window, s->max_ids, s->improved, s->rng,
                             &s->fragments);
}

/* ------------------------------------------------------------------------------------------ measurement */
enum { A_NOPS, A_NOPS2, A_MZ2, A_MS2, A_MS4, A_CHIS, A_SQN, A_DX2, A_DY2, A_D4, A_COS4, A_W2X, A_W2Y,
       A_GJ, A_GQ, A_SIZE };

/* Bond vertex v of the operator whose propagated state is p-th (p2 = 2 p): the loop below it loses its
   two sites, the loop above gains them (labels b from the marks ~(2 b + f): 2 b = ~mark & ~1).  Branch-free:
   when one loop is below and above, the changes cancel exactly (ca is read after cb's store). */
static inline void est_vertex(const int32_t *restrict links, int64_t *restrict tally, int v, int64_t p2,
                              int64_t *q2, double *q4)
{
    const uint32_t below = ~(uint32_t)links[4 * v] & ~1u, above = ~(uint32_t)links[4 * v + 2] & ~1u;
    const int64_t cb = tally[below];
    tally[below] = cb - 2;
    tally[below + 1] += p2;
    const int64_t ca = tally[above];
    tally[above] = ca + 2;
    tally[above + 1] -= p2;
    /* a = ca + 1, b = cb - 1: the Q2 change is 4 (a - b), the Q4 change 8 [a (a^2 + 1) - b (b^2 + 1)] */
    const int64_t a = ca + 1, b = cb - 1;
    *q2 += 4 * (a - b);
    *q4 += (double)(8 * (a * (a * a + 1) - b * (b * b + 1)));
}

/* Loop (improved) estimators of the configuration the loop update just left (labelled marks), the same
   work as qmc/engine/loop_estimators.py (whose docstring states the formulas): with x_l = phi_i S^z_i of
   loop l, E[x^2] = mu2 = 1/4, E[x^4] = mu4 = 1/16, n_l(p) loop l's sites in propagated state p,
   Q2(p) = sum_l n_l(p)^2, Q4(p) = sum_l n_l(p)^4, L_l = sum_p n_l(p):
     A_MS2 += mu2 (1/n) sum_p Q2(p),   A_MS4 += (1/n) sum_p [3 mu2^2 Q2(p)^2 + (mu4 - 3 mu2^2) Q4(p)],
     A_CHIS += beta mu2 [sum_l L_l^2 + sum_p Q2(p)] / (n (n + 1)),
     A_MZ2 += mu2 sum_l w_l^2 (w_l = sum of phi_i over l's sites at slice 0),
     A_SQN += mu2 sum_l |F_l|^2 / (2 N) (F_l = sum over l's slice-0 sites of exp(i dq_a . r_i), a = x, y);
   n = 0: the slice-0 forms with Q2 = Q4 = N.  A free site is a loop of its own with n_l = 1 (L_l = n).
   With multi-bond operators a propagated state ends only after the last vertex of an operator: a
   branch-free pass over the string marks those ends first (from a byte table of bond counts), and the
   vertex pass masks its sums with them (as the engine does).  Measured, the pass alone on 32x32,
   beta = 32 (-O3 -march=native, fastest of 10 calls per configuration, minimum of 3 chains; the engine's
   pass, benchmarks/loop_estimator_cost.py: 112 us square, 240 us J-Q2):
     square (every operator one vertex): the vertex pass alone 111 us; a walk over the string that
       branches on empty slots 266 us;
     J-Q2: end marks + masked vertex pass 214 us (bond counts read from the 32-byte term rows instead of
       the byte table: 223 us); the walk over the string, branching on empty slots and on k, 293 us; a
       compact operator -> first-vertex list with a self-cancelling dummy second vertex for k = 1 (one
       sum per operator, no masks) 230 us.  Unrolling the vertex pass or keeping Q4 and sum Q2 in
       integers: no gain beyond noise. */
/* -DSSE_COUNTING (benchmarks/instruction_counts.py) keeps the pass out of line, so that valgrind counts it
   by name; the timed build lets the compiler inline it (out of line it took about 2 us more per step) */
#ifdef SSE_COUNTING
__attribute__((noinline))
#endif
static void loop_estimators(sse_t *restrict s, int n_vertices, int n_loops, double *restrict acc)
{
    const double mu2 = 0.25, mu4 = 0.0625, cross = 3.0 * mu2 * mu2;
    const int N = s->N, n = s->n;
    const int32_t *restrict links = s->links;
    const int32_t *restrict first = s->first;
    const int8_t *restrict phase = s->phase;
    const double *restrict tab = s->est_tab;
    int64_t *restrict tally = s->tally;
    double *restrict sums = s->sums;
    /* slice 0: loops numbered 0 .. n_c - 1 in order of appearance (the number kept in the length slot
       until the lengths start), their sums w_l, F_l, and Q2, Q4 of the state at slice 0.  A site's first
       leg f is read through the even leg of its pair, where the loop update left its mark. */
    int n_c = 0, n_free = 0;
    int64_t q2 = 0;
    double q4 = 0.0;
    for (int i = 0; i < N; i++) {
        const int f = first[i];
        int64_t c;
        if (f < 0) {
            c = n_c++;
            memset(sums + 5 * c, 0, 5 * sizeof(double));
            n_free++;
            q2 += 1;
            q4 += 1.0;
        } else {
            const uint32_t b = ~(uint32_t)links[f & ~1] & ~1u;
            const int64_t cb = tally[b];
            if (cb == 0) {
                tally[b + 1] = n_c;
                memset(sums + 5 * (int64_t)n_c, 0, 5 * sizeof(double));
                n_c++;
            }
            c = tally[b + 1];
            tally[b] = cb + 1;
            q2 += 2 * cb + 1;
            q4 += (double)(4 * cb * cb * cb + 6 * cb * cb + 4 * cb + 1); /* (cb + 1)^4 - cb^4 */
        }
        double *restrict sc = sums + 5 * c;
        sc[0] += phase[i];
        sc[1] += tab[4 * i];
        sc[2] += tab[4 * i + 1];
        sc[3] += tab[4 * i + 2];
        sc[4] += tab[4 * i + 3];
    }
    double w2 = 0.0, f2 = 0.0;
    for (int c = 0; c < n_c; c++) {
        const double *sc = sums + 5 * c;
        w2 += sc[0] * sc[0];
        f2 += sc[1] * sc[1] + sc[2] * sc[2] + sc[3] * sc[3] + sc[4] * sc[4];
    }
    acc[A_MZ2] += mu2 * w2;
    acc[A_SQN] += mu2 * f2 / (2.0 * N);
    if (n == 0) {
        const double fq2 = (double)q2;
        acc[A_MS2] += mu2 * fq2;
        acc[A_MS4] += cross * fq2 * fq2 + (mu4 - cross) * q4;
        acc[A_CHIS] += s->beta * mu2 * fq2;
        return;
    }
    for (int i = 0; i < N; i++) { /* L_l = n n_l(0) - sum over its changes d at operator p of d p */
        const int f = first[i];
        if (f >= 0) {
            const uint32_t b = ~(uint32_t)links[f & ~1] & ~1u;
            tally[b + 1] = (int64_t)n * tally[b];
        }
    }
#ifdef SSE_CHECK
    const int64_t q2_start = q2;
#endif
    double sum_q2 = 0.0, sum_q2sq = 0.0, sum_q4 = 0.0;
    if (n_vertices == n) { /* every operator one bond vertex: vertex v is operator v + 1 */
        for (int v = 0; v < n_vertices; v++) {
            est_vertex(links, tally, v, 2 * (int64_t)(v + 1), &q2, &q4);
            const double fq2 = (double)q2;
            sum_q2 += fq2;
            sum_q2sq += fq2 * fq2;
            sum_q4 += q4;
        }
    } else {
        /* end-of-operator marks, one store per slot and no branch: after an operator of k bonds (0 for an
           empty slot, whose store repeats the previous one) the next vertex is v, ends[v] marks v - 1 */
        const int32_t *restrict ops = s->ops;
        const int8_t *restrict kbonds = s->kbonds;
        uint8_t *restrict ends = s->ends;
        const int M = s->M;
        int v = 0;
        for (int p = 0; p < M; p++) {
            const int op = ops[p];
            v += kbonds[(op & ~(op >> 31)) >> 3] & -(op >= 0);
            ends[v] = 1;
        }
        int64_t p2 = 2;
        for (int v = 0; v < n_vertices; v++) { /* the sums masked at the ends, not branched on */
            est_vertex(links, tally, v, p2, &q2, &q4);
            const int64_t e = ends[v + 1];
            const double fq2 = (double)(q2 & -e); /* Q2 at the end of an operator, else 0 */
            sum_q2 += fq2;
            sum_q2sq += fq2 * fq2;
            sum_q4 += (double)e * q4;
            p2 += 2 * e;
        }
        memset(ends, 0, (size_t)n_vertices + 1);
    }
#ifdef SSE_CHECK
    if (q2 != q2_start) {
        fprintf(stderr, "SSE_CHECK: loop estimators: Q2 after the last operator differs from slice 0\n");
        exit(3);
    }
#endif
    double sum_l2 = (double)n_free * (double)n * (double)n;
    for (int b = 0; b < n_loops; b++) { /* and left zero for the next call */
        const double ell = (double)tally[2 * b + 1];
        sum_l2 += ell * ell;
        tally[2 * b] = 0;
        tally[2 * b + 1] = 0;
    }
    const double fn = n;
    acc[A_MS2] += mu2 * sum_q2 / fn;
    acc[A_MS4] += (cross * sum_q2sq + (mu4 - cross) * sum_q4) / fn;
    acc[A_CHIS] += s->beta * mu2 * (sum_l2 + sum_q2) / (fn * (fn + 1.0));
}

/* Per measured step, the numba engine's set (qmc/engine/steps.py): plain mode the sweep's staggered
   moments and the slice-0 order parameters (uniform magnetisation, S(Q + dq)); improved mode the loop
   estimators of the same five quantities instead.  Both: n, groups, winding, dimer order and histogram. */
static void measure(sse_t *s, const sweep_out_t *o, int n_vertices, int n_loops, double *acc)
{
    const int N = s->N;
    const double n_old = o->n_old;
    acc[A_NOPS] += n_old;
    acc[A_NOPS2] += n_old * n_old;
    acc[A_GJ] += (double)o->group[0];
    acc[A_GQ] += (double)o->group[1];
    if (s->improved) {
        loop_estimators(s, n_vertices, n_loops, acc);
    } else if (o->n_old > 0) {
        const double m1 = 0.5 * o->sum_ms, m2 = 0.25 * o->sum_ms2;
        acc[A_MS2] += m2 / n_old;
        acc[A_MS4] += 0.0625 * o->sum_ms4 / n_old;
        acc[A_CHIS] += s->beta * (m1 * m1 + m2) / (n_old * (n_old + 1.0));
    } else {
        const double m = 0.5 * o->ms_end;
        acc[A_MS2] += m * m;
        acc[A_MS4] += m * m * m * m;
        acc[A_CHIS] += s->beta * m * m;
    }
    acc[A_W2X] += (double)o->wind[0] * o->wind[0];
    acc[A_W2Y] += (double)o->wind[1] * o->wind[1];
    /* equal-time estimators of the propagated state at slice 0 */
    const int8_t *spins = s->spins;
    if (!s->improved) {
        int mz = 0;
        for (int i = 0; i < N; i++) mz += spins[i];
        acc[A_MZ2] += 0.25 * mz * mz;
        double sqn = 0.0;
        for (int a = 0; a < 2; a++) {
            double re = 0.0, im = 0.0;
            for (int i = 0; i < N; i++) {
                re += spins[i] * s->cos_tab[a * N + i];
                im += spins[i] * s->sin_tab[a * N + i];
            }
            sqn += re * re + im * im;
        }
        acc[A_SQN] += 0.25 * sqn / (2.0 * N);
    }
    double dx = 0.0, dy = 0.0;
    for (int b = 0; b < 2 * N; b++) {
        const double c = s->vbs_phase[b] * spins[s->vbs_bonds[2 * b]] * spins[s->vbs_bonds[2 * b + 1]];
        if (s->vbs_dir[b] == 0)
            dx += c;
        else
            dy += c;
    }
    dx *= 0.25 / N;
    dy *= 0.25 / N;
    int ix = (int)((dx + HIST_RANGE) / (2.0 * HIST_RANGE) * HIST_BINS);
    int iy = (int)((dy + HIST_RANGE) / (2.0 * HIST_RANGE) * HIST_BINS);
    ix = ix < 0 ? 0 : (ix >= HIST_BINS ? HIST_BINS - 1 : ix);
    iy = iy < 0 ? 0 : (iy >= HIST_BINS ? HIST_BINS - 1 : iy);
    s->hist[ix * HIST_BINS + iy]++;
    const double dx2 = dx * dx, dy2 = dy * dy, d2 = dx2 + dy2;
    acc[A_DX2] += dx2;
    acc[A_DY2] += dy2;
    acc[A_D4] += d2 * d2;
    if (d2 > 0.0) acc[A_COS4] += (dx2 * dx2 - 6.0 * dx2 * dy2 + dy2 * dy2) / (d2 * d2);
}

static double cpu_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
    return ts.tv_sec + 1e-9 * ts.tv_nsec;
}

/* Loop variant K[:E[:W[:I]]]: K tracers (1 = single tracer; 0 = chosen by size), E steps alone within
   W KiB of the scan, at most I fragment ids per step (0: as many as the tail of links holds). */
typedef struct {
    int tracers, eager, window_kib, max_ids, auto_choice;
    double best_step, best_sweep, best_loop, best_measure, frag_per_loop; /* fastest round */
} variant_t;

/* The variant used for a vertex list of nv vertices when none is asked for (measured with --scaling of
   benchmarks/c_compare.py): one tracer while the links array (16 bytes per vertex) fits the per-core
   cache, interleaved tracers beyond. */
static void auto_variant(int nv, variant_t *v)
{
    const int big = 16L * nv > AUTO_BYTES;
    v->tracers = big ? AUTO_TRACERS : 1;
    v->eager = big ? AUTO_EAGER : 0;
    v->window_kib = big ? AUTO_WINDOW_KIB : 0;
    v->max_ids = 0;
}

static int parse_variants(const char *text, variant_t *v, int max)
{
    static const long limit[4] = {MAX_TRACERS, 1L << 30, 1L << 20, 1L << 30};
    int n = 0;
    const char *c = text;
    while (*c && n < max) {
        long f[4] = {0, 0, 0, 0};
        for (int a = 0; a < 4; a++) {
            char *end;
            f[a] = strtol(c, &end, 10);
            if (end == c || f[a] < 0 || f[a] > limit[a]) return -1;
            c = end;
            if (*c != ':') break;
            c++;
        }
        v[n] = (variant_t){(int)f[0], (int)f[1], (int)f[2], (int)f[3], f[0] == 0, 1e300, 1e300, 1e300, 1e300, 0};
        n++;
        if (*c == ',') c++;
        else if (*c) return -1;
    }
    return *c ? -1 : n;
}

static void use_variant(sse_t *s, const variant_t *v, int nv)
{
    variant_t u = *v;
    if (v->auto_choice) auto_variant(nv, &u);
    s->tracers = u.tracers;
    s->eager = u.eager;
    s->window = u.window_kib * 256; /* legs of 4 bytes */
    s->max_ids = u.max_ids;
}

/* Mean over all steps of acc[slot] * scale (totals: the bins plus the steps after the last whole bin) and
   the standard error of the bin means (bins taken as independent). */
static void bin_stats(const double *bins, const double *tail, long n_bins, long per_bin, long total, int slot,
                      double scale, double *mean, double *err)
{
    double sum = tail[slot], bm = 0.0, var = 0.0;
    for (long b = 0; b < n_bins; b++) {
        sum += bins[b * A_SIZE + slot];
        bm += bins[b * A_SIZE + slot] / per_bin;
    }
    bm /= n_bins;
    for (long b = 0; b < n_bins; b++) {
        const double d = bins[b * A_SIZE + slot] / per_bin - bm;
        var += d * d;
    }
    *mean = scale * sum / total;
    *err = n_bins > 1 ? scale * sqrt(var / (n_bins - 1) / n_bins) : 0.0;
}

/* ------------------------------------------------------------------------------------------ main */
int main(int argc, char **argv)
{
    if (argc < 8 || argc > 11) {
        fprintf(stderr, "usage: %s L beta J Q warmup_steps measured_steps seed [variants [rounds [estimators]]]\n"
                        "  variants: comma-separated K[:E[:W[:I]]] (K tracers, E steps alone within W KiB of\n"
                        "  the scan, at most I fragment ids; K = 0: chosen by size)\n"
                        "  estimators: plain (default) or improved (the loop estimators)\n",
                argv[0]);
        return 1;
    }
    const int L = atoi(argv[1]);
    const double beta = atof(argv[2]), J = atof(argv[3]), Q = atof(argv[4]);
    const long warmup = atol(argv[5]), steps = atol(argv[6]);
    const uint64_t seed = strtoull(argv[7], NULL, 10);
    variant_t var[16];
    const int n_var = parse_variants(argc >= 9 ? argv[8] : "0", var, 16);
    const long rounds = argc >= 10 ? atol(argv[9]) : 1;
    const char *estimators = argc >= 11 ? argv[10] : "plain";
    const int improved = strcmp(estimators, "improved") == 0;
    if (L < 4 || (L & 1) || !(beta > 0) || J < 0 || Q < 0 || !(J > 0 || Q > 0) || warmup < 0 || steps < 1
        || n_var < 1 || rounds < 1 || !(improved || strcmp(estimators, "plain") == 0)) {
        fprintf(stderr, "need even L >= 4, beta > 0, J, Q >= 0 (not both 0), warmup >= 0, steps >= 1, "
                        "up to 16 variants K[:E[:W[:I]]] with 0 <= K <= %d, rounds >= 1, "
                        "estimators plain or improved\n", MAX_TRACERS);
        return 1;
    }
    static sse_t s;
    s.improved = improved;
    setup(&s, L, beta, J, Q, seed);
    sweep_out_t o;

    for (long w = 0; w < warmup; w++) {
        const int nv = diagonal_sweep(&s, &o);
        use_variant(&s, &var[0], nv);
        loop_update(&s, nv);
        if (3 * (s.M - s.n) < s.n) grow_cutoff(&s);
    }

    /* measured steps: `rounds` rounds, each `steps` steps of every variant in turn (the same Markov chain
       whatever the variant, so the chain simply continues); per variant the fastest round counts.  Each
       step's estimators go to the row of its bin (the steps after the last whole bin to `tail`). */
    const long total = rounds * n_var * steps;
    const long n_bins = total >= 40 ? 20 : total;
    const long per_bin = total / n_bins;
    double *bins = xcalloc(n_bins * A_SIZE, sizeof(double));
    double tail[A_SIZE] = {0};
    double sum_loops = 0.0, sum_nv = 0.0, cpu = 0.0;
    long st = 0;
    for (long r = 0; r < rounds; r++)
        for (int k = 0; k < n_var; k++) {
            variant_t *v = &var[k];
            const long frag0 = s.fragments;
            double t_sweep = 0.0, t_loop = 0.0, t_measure = 0.0, loops = 0.0;
            for (long i = 0; i < steps; i++, st++) {
                double *acc = st / per_bin < n_bins ? bins + (st / per_bin) * A_SIZE : tail;
                const double a0 = cpu_seconds();
                const int nv = diagonal_sweep(&s, &o);
                use_variant(&s, v, nv);
                const double a1 = cpu_seconds();
                const int nl = loop_update(&s, nv);
                const double a2 = cpu_seconds();
                measure(&s, &o, nv, nl, acc);
                const double a3 = cpu_seconds();
                loops += nl;
                sum_nv += nv;
                t_sweep += a1 - a0;
                t_loop += a2 - a1;
                t_measure += a3 - a2;
            }
            sum_loops += loops;
            cpu += t_sweep + t_loop + t_measure;
            if (t_sweep + t_loop + t_measure < v->best_step) {
                v->best_step = t_sweep + t_loop + t_measure; /* the engine's step time includes measuring */
                v->best_sweep = t_sweep;
                v->best_loop = t_loop;
                v->best_measure = t_measure;
            }
            if (v->auto_choice) { /* report what was chosen */
                v->tracers = s.tracers;
                v->eager = s.eager;
                v->window_kib = s.window / 256;
            }
            v->frag_per_loop = s.tracers > 1 ? (s.fragments - frag0) / (loops > 1 ? loops : 1) : 1.0;
        }

    const int N = s.N;
    const double fN = N;
    static const double no_tail[A_SIZE];
    double mean, err; /* operators per step (the energy): over the whole bins only */
    bin_stats(bins, no_tail, n_bins, per_bin, n_bins * per_bin, A_NOPS, 1.0, &mean, &err);
    /* S^z units, per site as the engine's bins (qmc/chain/observables.py) */
    double ms2, ms2_err, ms4, ms4_err, chis, chis_err, chiu, chiu_err, sqn, sqn_err, mz2, mz2_err;
    bin_stats(bins, tail, n_bins, per_bin, total, A_MS2, 1.0 / (fN * fN), &ms2, &ms2_err);
    bin_stats(bins, tail, n_bins, per_bin, total, A_MS4, 1.0 / (fN * fN * fN * fN), &ms4, &ms4_err);
    bin_stats(bins, tail, n_bins, per_bin, total, A_CHIS, 1.0 / fN, &chis, &chis_err);
    bin_stats(bins, tail, n_bins, per_bin, total, A_MZ2, beta / fN, &chiu, &chiu_err);
    bin_stats(bins, tail, n_bins, per_bin, total, A_SQN, 1.0, &sqn, &sqn_err);
    bin_stats(bins, tail, n_bins, per_bin, total, A_MZ2, 1.0, &mz2, &mz2_err);
    double w2 = tail[A_W2X] + tail[A_W2Y];
    for (long b = 0; b < n_bins; b++) w2 += bins[b * A_SIZE + A_W2X] + bins[b * A_SIZE + A_W2Y];
    const double e_const = 0.25 * J * s.nJ / N;
    const double nv_mean = sum_nv / total, legs = 4.0 * nv_mean;
    /* bytes per slot of the configuration and work arrays as allocated: ops, links and vflip (room for
       KMAX vertices per slot when there are multi-bond terms; fragment ids live in its tail); not counted:
       the loop estimators' scratch (improved mode: 33 bytes per vertex of room) */
    const double bytes = 4.0 * s.M + 17.0 * s.vcap + 4.0 * (16 + 1024);
    const double per_slot = 1e9 / ((double)steps * s.M);
    printf("{\"implementation\": \"c\", \"estimators\": \"%s\", \"L\": %d, \"N\": %d, \"beta\": %.17g, "
           "\"J\": %.17g, \"Q\": %.17g, "
           "\"warmup\": %ld, \"steps\": %ld, \"rounds\": %ld, \"seed\": %llu, \"cutoff\": %d, "
           "\"final_n_ops\": %d, \"mean_n\": %.10g, \"mean_n_err\": %.6g, "
           "\"energy_per_site\": %.10g, \"energy_per_site_err\": %.6g, \"bins\": %ld, \"steps_in_bins\": %ld, "
           "\"mean_vertices\": %.8g, \"mean_loops\": %.8g, \"bytes_per_slot\": %.4g, "
           "\"m_stag2_time_avg\": %.10g, \"m_stag2_err\": %.6g, \"m_stag4\": %.10g, \"m_stag4_err\": %.6g, "
           "\"chi_stag\": %.10g, \"chi_stag_err\": %.6g, \"chi_uniform\": %.10g, \"chi_uniform_err\": %.6g, "
           "\"s_q_next\": %.10g, \"s_q_next_err\": %.6g, \"w2\": %.10g, \"mz2\": %.10g, \"mz2_err\": %.6g, "
           "\"cpu_seconds\": %.6g, \"variants\": [",
           improved ? "improved" : "plain", L, N, beta, J, Q, warmup, steps, rounds, (unsigned long long)seed,
           s.M, s.n, mean, err, e_const - mean / (beta * N), err / (beta * N), n_bins, n_bins * per_bin,
           nv_mean, sum_loops / total, bytes / s.M, ms2, ms2_err, ms4, ms4_err, chis, chis_err, chiu, chiu_err,
           sqn, sqn_err, w2 / total, mz2, mz2_err, cpu);
    for (int k = 0; k < n_var; k++) {
        const variant_t *v = &var[k];
        printf("%s{\"tracers\": %d, \"eager\": %d, \"window_kib\": %d, \"max_ids\": %d, \"auto\": %s, "
               "\"cpu_ns_per_slot_per_step\": %.6g, "
               "\"cpu_ns_per_op_per_step\": %.6g, \"cpu_ms_per_step\": %.6g, "
               "\"sweep_cpu_ns_per_slot\": %.6g, \"loop_cpu_ns_per_slot\": %.6g, \"loop_cpu_ns_per_leg\": %.6g, "
               "\"measure_cpu_us_per_step\": %.6g, \"fragments_per_loop\": %.6g}",
               k ? ", " : "", v->tracers, v->eager, v->window_kib, v->max_ids, v->auto_choice ? "true" : "false",
               v->best_step * per_slot, v->best_step * 1e9 / steps / (mean > 1 ? mean : 1),
               v->best_step * 1e3 / steps, v->best_sweep * per_slot, v->best_loop * per_slot,
               v->best_loop * 1e9 / steps / (legs > 1 ? legs : 1), v->best_measure * 1e6 / steps,
               v->frag_per_loop);
    }
    printf("]}\n");
    return 0;
}
