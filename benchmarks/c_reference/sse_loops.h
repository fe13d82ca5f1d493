/*
 * Loop update of the C reference (included by sse_ref.c): every deterministic singlet-projector loop of the
 * linked vertex list is built and flipped with probability 1/2.  Two ways to build them that give the same
 * Markov chain bit for bit:
 *
 *   loops_single       one tracer follows one loop at a time: a chain of dependent loads, one cache miss
 *                      after the other once the vertex list is larger than the caches;
 *   loops_interleaved  up to K tracers take turns, one leg pair per turn, each prefetching the group of
 *                      legs it visits next, so that up to K cache misses are in flight.
 *
 * Leg layout (see sse_ref.c): leg 4v + l of bond vertex v, l = 0/1 site i/j below, 2/3 site i/j above.
 * A loop enters a vertex at leg l and leaves at l ^ 1, so the legs come in pairs {2q, 2q + 1} (pair q:
 * q = 2v the lower pair, 2v + 1 the upper pair) and every pair lies on exactly one loop.  links[leg] is the
 * leg the world line continues to.  Both variants leave vflip[v] = 1 for every bond vertex v that an odd
 * number of flipped loops pass through (its two pairs lie on one or two loops), which the next diagonal
 * sweep applies to the operator string (and clears), and flip the spins of the sites: a site with
 * operators takes the flip of the loop through its first leg, a free site is flipped with probability
 * 1/2.  links is consumed: the even leg of every pair is overwritten by a negative mark, -1 - f (f = 1 if
 * its loop flipped) or, labelled, ~(2 b + f) with b the loop's number in the single tracer's order (the
 * order in which loops draw their flips), which the loop estimators of sse_ref.c read; loops_single
 * always labels, loops_interleaved when asked.
 *
 * Interleaved construction (no assumption on how loops run through a vertex beyond the fixed pairing, so
 * it does not rely on the lattice being bipartite):
 *   - a scan over the pairs (in increasing order) starts a tracer at the next unmarked pair q: the tracer
 *     takes the next fragment id f, marks q with -1 - f and remembers both exits of q (forward through leg
 *     2q + 1, backward through 2q);
 *   - a step looks at the pair the tracer's current leg belongs to: unmarked -> mark it with the tracer's
 *     id and move to the world-line partner of the exit leg; marked (by anyone, itself included) -> this
 *     end of the fragment is done, and the fragment and the owner of the mark lie on one loop (union-find
 *     over fragment ids, the smaller id becomes the root).  Its own mark can only be met going forward, at
 *     the start pair: then the loop is closed and wholly this fragment's;
 *   - a tracer whose forward end ran into another fragment goes backward from its start pair; when both
 *     ends are done it takes the next start from the scan;
 *   - scheduling: a freshly (re)started tracer walks on its own for up to E steps while its legs stay
 *     within `window` legs of the scan position (that stretch of the links array is streamed into the
 *     cache ahead of the scan), so that the many short loops, which stay close to where they start, cost
 *     what they cost a single tracer; a tracer that leaves the window or uses up E joins the round-robin,
 *     where each turn is one step followed by a prefetch of the next leg group.
 *   Every pair is marked exactly once (steps are sequential, whatever the schedule).  Each fragment is a
 *   stretch of consecutive pairs of one loop whose two ends both ran into marked pairs, so the boundary
 *   between any two neighbouring fragments of a loop was seen by at least one of them: the union-find
 *   classes are exactly the loops.  Afterwards one pass over the ids in increasing order (parents are
 *   smaller than children) draws one flip per root and copies it to the other ids, and one streaming pass
 *   over the vertices turns the marks of their two pairs into vflip.
 *   The ids (one int32 per fragment, about one per loop) live in the unused tail of the links array, which
 *   is sized for the longest possible string (KMAX vertices per slot), so no memory is added.  Should they
 *   run out, no new fragment is started; once the tracers are done every loop touched so far is complete,
 *   and a single tracer finishes the remaining (whole, untouched) loops from the scan position on.
 *
 * Same chain as the single tracer: the scan meets the pairs in increasing order, so the first fragment of
 * every loop starts at the loop's first pair, which is where the single tracer starts it; ids grow in
 * scan order, so roots (smallest id of each loop) come in the single tracer's loop order and draw the same
 * random numbers.  Hence K, E and the window change the speed, never the result.
 */
#ifndef SSE_LOOPS_H
#define SSE_LOOPS_H

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define MAX_TRACERS 64

/* Sites: free ones flip with probability 1/2 (drawn after the loops' flips, in site order), the others
   with the loop through their first leg; flipped(f) says whether that loop flipped. */
#define FLIP_SITES(flipped)                                                                                \
    do {                                                                                                   \
        for (int i = 0; i < n_sites; i++) {                                                                \
            const int f = first[i];                                                                        \
            if (f < 0 ? next_double(r) < 0.5 : (flipped)) spins[i] = (int8_t)-spins[i];                    \
        }                                                                                                  \
    } while (0)

/* Single tracer.  Returns the number of loops.  The b-th loop built (b = 0, 1, ...) marks its pairs
   -1 - (2 b + f) = ~(2 b + f), f = 1 if it flipped: the labels the loop estimators read (sse_ref.c).
   Always labelled: against the plain marks -1 - f this measured no difference (32x32 canonical cases). */
static int loops_single(int32_t *restrict links, uint8_t *restrict vflip, int n_vertices,
                        int8_t *restrict spins, const int32_t *restrict first, int n_sites, uint64_t *rng)
{
    uint64_t r[4] = {rng[0], rng[1], rng[2], rng[3]};
    const int n_legs = 4 * n_vertices;
    int n_loops = 0;
    for (int l0 = 0; l0 < n_legs; l0 += 2) {
        if (links[l0] < 0) continue;
        const int f = next_double(r) < 0.5;
        const int mark = -1 - 2 * n_loops - f;
        n_loops++;
        int leg = l0;
        do {
            const int nxt = links[leg ^ 1];
            links[leg & ~1] = mark;
            vflip[leg >> 2] ^= (uint8_t)f;
            leg = nxt;
        } while (leg != l0);
    }
    FLIP_SITES((~links[f & ~1]) & 1);
    memcpy(rng, r, sizeof r);
    return n_loops;
}

/* Root of x with path halving; parents are never larger than their children. */
static inline int uf_find(int32_t *uf, int x)
{
    while (uf[x] != x) {
        uf[x] = uf[uf[x]];
        x = uf[x];
    }
    return x;
}

static inline void uf_union(int32_t *uf, int a, int b)
{
    a = uf_find(uf, a);
    b = uf_find(uf, b);
    if (a < b)
        uf[b] = a;
    else
        uf[a] = b;
}

/* Even leg of the first unmarked pair at or after even leg `scan` (n_legs if none): 8 pairs per probe,
   one branch per probe.  links[n_legs .. n_legs + 15] must be negative (padding). */
static inline int next_start(const int32_t *restrict links, int scan, int n_legs)
{
    while (scan < n_legs) {
        unsigned m = 0;
        for (int i = 0; i < 8; i++) m |= (unsigned)(links[scan + 2 * i] >= 0) << i;
        if (m) return scan + 2 * __builtin_ctz(m);
        scan += 16;
    }
    return n_legs;
}

/* Shared state of the interleaved construction.  Marks: -3 - f for fragment id f; the single tracer that
   finishes a step whose ids ran out marks -1 (kept) and -2 (flipped). */
#define ID_MARK(f) (-3 - (f))
typedef struct {
    int32_t *links, *uf;
    int cap, n_frag, scan, n_legs, E;
    int window, pf; /* walks alone stay within `window` legs of the scan; legs < pf were prefetched */
} weave_t;

typedef struct {
    int32_t cur, back, lab, fwd; /* current leg, backward exit of the start pair, mark, going forward? */
} tracer_t;

/* Serve a tracer whose current pair carries mark mk (< 0: a stop; >= 0: a fresh slot): handle stops,
   start fragments and walk alone (see the schedule above).  Returns 1 if nothing was left to start or the
   ids ran out (the slot retires), 0 when the tracer joins the round-robin. */
static inline int serve(weave_t *restrict h, tracer_t *restrict tr, int mk)
{
    int32_t *restrict links = h->links;
    int budget = h->E;
    for (;;) {
        if (mk < 0 && mk != tr->lab) {
            uf_union(h->uf, ID_MARK(tr->lab), ID_MARK(mk));
            if (tr->fwd) { /* forward end done: go backward from the start pair */
                tr->fwd = 0;
                tr->cur = tr->back;
                goto walk;
            }
        }
        if (h->n_frag == h->cap) return 1;
        h->scan = next_start(links, h->scan, h->n_legs);
        if (h->scan >= h->n_legs) return 1;
        h->uf[h->n_frag] = h->n_frag;
        tr->lab = ID_MARK(h->n_frag);
        tr->back = links[h->scan];
        tr->cur = links[h->scan + 1];
        tr->fwd = 1;
        links[h->scan] = tr->lab;
        h->n_frag++;
        h->scan += 2;
        if (h->window) {
            const int hi = h->scan + h->window < h->n_legs ? h->scan + h->window : h->n_legs;
            for (; h->pf < hi; h->pf += 16) __builtin_prefetch(&links[h->pf], 1, 2);
        }
    walk:
        for (;; budget--) {
            const int c = tr->cur;
            const int outside = h->window && (unsigned)(c - h->scan + h->window) >= 2u * (unsigned)h->window;
            if (budget == 0 || outside) {
                __builtin_prefetch(&links[c], 1, 3);
                return 0; /* on to the round-robin */
            }
            mk = links[c & ~1];
            if (mk < 0) break; /* a stop: served at the top of the outer loop */
            tr->cur = links[c ^ 1];
            links[c & ~1] = tr->lab;
        }
    }
}

/* K interleaved tracers (1 <= K <= MAX_TRACERS), E steps alone within `window` legs of the scan; links
   holds links_len int32, and at most max_ids fragment ids are used (0: as many as its tail holds).
   Returns the number of loops.  With `labelled` the even leg of every pair ends marked ~(2 b + f) as
   loops_single leaves it (b the loop's number in the single tracer's order), else -1 - f: the flag only
   chooses between two versions of the passes after the tracing (see there). */
static int loops_interleaved(int32_t *restrict links, long links_len, uint8_t *restrict vflip, int n_vertices,
                             int8_t *restrict spins, const int32_t *restrict first, int n_sites, int K, int E,
                             int window, int max_ids, int labelled, uint64_t *rng, long *fragments)
{
    const int n_legs = 4 * n_vertices;
    long cap = links_len - n_legs - 16; /* room for ids after the padding */
    if (cap > INT32_MAX / 2) cap = INT32_MAX / 2;
    if (max_ids > 0 && cap > max_ids) cap = max_ids;
    weave_t h = {links, links + n_legs + 16, (int)cap, 0, 0, n_legs, E, window, 0};
    tracer_t tr[MAX_TRACERS];
    int active = 0;
    for (int i = 0; i < 16; i++) links[n_legs + i] = -1;
    while (active < K) {
        tr[active].lab = 0;
        if (serve(&h, &tr[active], 0)) break;
        active++;
    }
    while (active > 0) {
        for (int t = 0; t < active; t++) {
            const int c = tr[t].cur;
            const int mark = links[c & ~1];
            if (mark >= 0) {
                const int nxt = links[c ^ 1];
                links[c & ~1] = tr[t].lab;
                tr[t].cur = nxt;
                __builtin_prefetch(&links[nxt], 1, 3);
                continue;
            }
            if (serve(&h, &tr[t], mark)) {
                tr[t] = tr[--active];
                t--;
            }
        }
    }

    /* one flip per loop (root), in increasing id order; children read their root's value: the flip f, or
       with `labelled` 2 b + f (b = loops so far, the single tracer's number of the loop) */
    int32_t *restrict uf = h.uf;
    uint64_t r[4] = {rng[0], rng[1], rng[2], rng[3]};
    int n_loops = 0;
    const int step = labelled ? 2 : 0;
    for (int f = 0; f < h.n_frag; f++) {
        const int p = uf[f];
        if (p == f) {
            uf[f] = step * n_loops + (next_double(r) < 0.5);
            n_loops++;
        } else {
            uf[f] = uf[p];
        }
    }
    /* If the ids ran out, every loop touched so far is complete (each fragment's ends border marked pairs)
       and the unmarked pairs left, all beyond the scan, form whole loops: one tracer finishes them in scan
       order, so they too draw their flips in the single tracer's order.  Marks: -1 - f (plain), or
       -3 - n_frag - value (labelled; below every id mark, value = 2 b + f). */
    const int finish = labelled ? -3 - h.n_frag : -1;
    for (int l0 = h.scan; l0 < n_legs; l0 += 2) {
        if (links[l0] < 0) continue;
        const int mark = finish - step * n_loops - (next_double(r) < 0.5);
        n_loops++;
        int leg = l0;
        do {
            const int nxt = links[leg ^ 1];
            links[leg & ~1] = mark;
            leg = nxt;
        } while (leg != l0);
    }
    if (!labelled) {
#define PAIR_FLIP(m) ((m) <= -3 ? uf[ID_MARK(m)] : -1 - (m))
        for (int v = 0; v < n_vertices; v++)
            vflip[v] = (uint8_t)(PAIR_FLIP(links[4 * v]) ^ PAIR_FLIP(links[4 * v + 2]));
        FLIP_SITES(PAIR_FLIP(links[f & ~1]));
#undef PAIR_FLIP
    } else {
        /* each pair's value from its mark (an id -> its loop's value; below the ids -> the value in the
           mark); the even legs end marked -1 - value, vflip[v] = flip below xor flip above */
        const int n_frag = h.n_frag;
#define PAIR_VALUE(m) (ID_MARK(m) < n_frag ? uf[ID_MARK(m)] : ID_MARK(m) - n_frag)
        for (int v = 0; v < n_vertices; v++) {
            const int va = PAIR_VALUE(links[4 * v]), vb = PAIR_VALUE(links[4 * v + 2]);
            links[4 * v] = -1 - va;
            links[4 * v + 2] = -1 - vb;
            vflip[v] = (uint8_t)((va ^ vb) & 1);
        }
#undef PAIR_VALUE
        FLIP_SITES((~links[f & ~1]) & 1);
    }
    memcpy(rng, r, sizeof r);
    *fragments += h.n_frag;
    return n_loops;
}

#endif
