/* Persistence of the sublevel filtration of a 2D image or 3D volume whose pixels (voxels) are
 * the top-dimensional cells of a cubical complex; see workers/core/cubical.py for the
 * convention and the sources of the methods. Plain CPython C API, no numpy headers.
 *
 * Layout. Voxels live in a padded grid: one layer of pad cells around the array (in 2D only
 * around the two real axes), so that every neighbour lookup is a constant stride and needs no
 * bounds check. node[P].level is the position of voxel P in the stable sort of the values
 * (by value, then flat index); pad cells hold SENTINEL. order[r] is the voxel at level r and
 * sval[r] its value. node[P].parent is the union-find link of P, kept beside its level
 * because the two are read together: the random accesses in level order, not arithmetic,
 * bound the running time.
 *
 * Union-find links the younger root under the elder (the elder rule itself), so a root is
 * the first voxel of its component and its level is the component's birth; with path
 * halving. Linking by birth instead of rank or size needs neither a birth nor a rank field:
 * less memory, and fewer reads at random places.
 *
 * Total order of cells (3D H1 only). A cell's value is the minimum over the voxels containing
 * it; its "creator" is the containing voxel of lowest level. Cells are ordered by (creator
 * level, dimension, offset code of the cell relative to its creator's centre). This refines
 * the filtration (sorted by value) and puts faces before cofaces: a face lies in every voxel
 * its coface lies in, so its creator level is lower or equal, and the dimension breaks ties.
 * Inside one dimension the key  level * 27 + code  is a bijection onto cells, so keys are
 * all the reduction stores.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define SENTINEL INT32_MAX
#define NCODES 27

/* ------------------------------------------------------------------ growable arrays */

typedef struct {
    double *data;
    size_t len; /* doubles */
    size_t cap;
} Pairs;

/* Make room for `need` elements of `size` bytes in a growing buffer (doubling from `first`). */
static int reserve(void **data, size_t *cap, size_t need, size_t size, size_t first)
{
    if (need <= *cap) return 0;
    size_t grown = *cap ? *cap : first;
    while (grown < need) grown *= 2;
    void *moved = realloc(*data, grown * size);
    if (!moved) return -1;
    *data = moved;
    *cap = grown;
    return 0;
}

static int pairs_push(Pairs *p, double birth, double death)
{
    if (reserve((void **)&p->data, &p->cap, p->len + 2, sizeof(double), 1024)) return -1;
    p->data[p->len++] = birth;
    p->data[p->len++] = death;
    return 0;
}

typedef struct {
    int64_t *data;
    size_t len;
    size_t cap;
} Vec;

static int vec_push(Vec *v, int64_t x)
{
    if (reserve((void **)&v->data, &v->cap, v->len + 1, sizeof(int64_t), 256)) return -1;
    v->data[v->len++] = x;
    return 0;
}

/* ------------------------------------------------------------------ the grid */

typedef struct {
    int32_t level;  /* position in the sort; SENTINEL for pad cells */
    int32_t parent; /* union-find */
} Node;

typedef struct {
    int ndim;
    int64_t n[3];   /* extents; a 2D image is 1 x n1 x n2 */
    int64_t S[3];   /* strides of the padded grid */
    int64_t npad;   /* cells of the padded grid */
    int64_t nvox;   /* real voxels */
    int64_t nfin;   /* voxels with a finite value: levels 0 .. nfin-1 */
    Node *node;     /* npad + 1: the last one is the outside of the array */
    int32_t *order; /* nvox */
    double *sval;   /* nvox */
} Grid;

/* Order-preserving map of doubles onto unsigned integers (-0.0 counts as +0.0). */
static inline uint64_t sort_key(double v)
{
    uint64_t u;
    if (v == 0.0) v = 0.0;
    memcpy(&u, &v, sizeof u);
    return (u >> 63) ? ~u : (u | 0x8000000000000000ULL);
}

static inline double key_value(uint64_t k)
{
    uint64_t u = (k >> 63) ? (k & 0x7FFFFFFFFFFFFFFFULL) : ~k;
    double v;
    memcpy(&v, &u, sizeof v);
    return v;
}

#define RADIX_BITS 11
#define RADIX_SIZE (1 << RADIX_BITS)
#define RADIX_PASSES 6 /* 6 x 11 bits >= 64 */

/* Stable LSD radix sort of the values: fills order, sval, level and nfin. */
static int grid_sort(Grid *g, const double *values)
{
    int64_t N = g->nvox;
    uint64_t *k0 = malloc((size_t)N * sizeof(uint64_t));
    uint64_t *k1 = malloc((size_t)N * sizeof(uint64_t));
    int32_t *i0 = malloc((size_t)N * sizeof(int32_t));
    int32_t *i1 = malloc((size_t)N * sizeof(int32_t));
    size_t(*hist)[RADIX_SIZE] = calloc(RADIX_PASSES, sizeof *hist);
    if (!k0 || !k1 || !i0 || !i1 || !hist) {
        free(k0); free(k1); free(i0); free(i1); free(hist);
        return -1;
    }
    int64_t t = 0;
    for (int64_t i = 0; i < g->n[0]; i++) {
        for (int64_t j = 0; j < g->n[1]; j++) {
            int64_t base = (g->ndim == 3 ? (i + 1) * g->S[0] : 0) + (j + 1) * g->S[1] + 1;
            for (int64_t k = 0; k < g->n[2]; k++, t++) {
                uint64_t key = sort_key(values[t]);
                k0[t] = key;
                i0[t] = (int32_t)(base + k);
                for (int d = 0; d < RADIX_PASSES; d++)
                    hist[d][(key >> (RADIX_BITS * d)) & (RADIX_SIZE - 1)]++;
            }
        }
    }
    for (int d = 0; d < RADIX_PASSES; d++) {
        size_t *h = hist[d];
        int trivial = 0;
        for (int b = 0; b < RADIX_SIZE; b++) {
            if (h[b] == (size_t)N) { trivial = 1; break; }
        }
        if (trivial) continue; /* every key has the same digit */
        size_t sum = 0;
        for (int b = 0; b < RADIX_SIZE; b++) {
            size_t c = h[b];
            h[b] = sum;
            sum += c;
        }
        int shift = RADIX_BITS * d;
        for (int64_t s = 0; s < N; s++) {
            size_t dst = h[(k0[s] >> shift) & (RADIX_SIZE - 1)]++;
            k1[dst] = k0[s];
            i1[dst] = i0[s];
        }
        uint64_t *kt = k0; k0 = k1; k1 = kt;
        int32_t *it = i0; i0 = i1; i1 = it;
    }
    free(k1);
    free(i1);
    free(hist);
    double *sval = (double *)k0;
    int64_t nfin = 0;
    for (int64_t r = 0; r < N; r++) {
        sval[r] = key_value(k0[r]);
        if (sval[r] < INFINITY) nfin = r + 1;
    }
    g->sval = sval;
    g->order = i0;
    g->nfin = nfin;
    g->node = malloc((size_t)(g->npad + 1) * sizeof(Node));
    if (!g->node) return -1;
    for (int64_t P = 0; P <= g->npad; P++) {
        g->node[P].level = SENTINEL;
        g->node[P].parent = (int32_t)P;
    }
    for (int64_t r = 0; r < N; r++) g->node[g->order[r]].level = (int32_t)r;
    return 0;
}

/* ------------------------------------------------------------------ union-find */

static inline int32_t uf_find(Node *a, int32_t x)
{
    while (a[x].parent != x) {
        int32_t up = a[a[x].parent].parent; /* path halving */
        a[x].parent = up;
        x = up;
    }
    return x;
}

/* Offsets (in the padded grid) of the corner neighbours (8 / 26) or face neighbours (4 / 6)
 * of a voxel. */
static int neighbours(const Grid *g, int faces_only, int64_t *out)
{
    int count = 0;
    int lo0 = g->ndim == 3 ? -1 : 0, hi0 = g->ndim == 3 ? 1 : 0;
    for (int a = lo0; a <= hi0; a++)
        for (int b = -1; b <= 1; b++)
            for (int c = -1; c <= 1; c++) {
                int nonzero = (a != 0) + (b != 0) + (c != 0);
                if (nonzero == 0 || (faces_only && nonzero != 1)) continue;
                out[count++] = a * g->S[0] + b * g->S[1] + c;
            }
    return count;
}

/* H0: union-find over voxels in increasing order, corner adjacency, elder rule. */
static int h0_voxels(Grid *g, Pairs *out)
{
    int64_t off[26];
    int count = neighbours(g, 0, off);
    Node *node = g->node;
    for (int64_t r = 0; r < g->nfin; r++) {
        int32_t P = g->order[r];
        int32_t root = P; /* P is its own root until it joins an older component */
        for (int k = 0; k < count; k++) {
            int32_t Q = (int32_t)(P + off[k]);
            if (node[Q].level >= r) continue; /* not in yet (pads hold SENTINEL) */
            int32_t other = uf_find(node, Q);
            if (other == root) continue;
            int32_t young = node[other].level > node[root].level ? other : root;
            int32_t old = young == other ? root : other;
            double born = g->sval[node[young].level], died = g->sval[r];
            if (died > born && pairs_push(out, born, died)) return -1;
            node[young].parent = old;
            root = old;
        }
    }
    for (int64_t P = 0; P < g->npad; P++) {
        int32_t l = node[P].level;
        if (l < g->nfin && node[P].parent == P && pairs_push(out, g->sval[l], INFINITY))
            return -1;
    }
    return 0;
}

/* H_{d-1} by Alexander duality: union-find over voxels in decreasing order with face
 * adjacency plus one outside node (older than everything) that every pad cell stands for. */
static int h_top(Grid *g, Pairs *out)
{
    int64_t off[6];
    int count = neighbours(g, 1, off);
    int32_t outside = (int32_t)g->npad; /* level SENTINEL: the eldest, always a root */
    Node *node = g->node;
    for (int64_t P = 0; P <= g->npad; P++) node[P].parent = (int32_t)P;
    for (int64_t r = g->nvox - 1; r >= 0; r--) {
        int32_t P = g->order[r];
        int32_t root = P;
        double born = g->sval[r];
        for (int k = 0; k < count; k++) {
            int32_t Q = (int32_t)(P + off[k]);
            int32_t lq = node[Q].level;
            int32_t other;
            if (lq == SENTINEL) other = outside;
            else if (lq > r) other = uf_find(node, Q);
            else continue;
            if (other == root) continue;
            /* the component whose maximum is lower (later in this order) is the younger */
            int32_t young = node[other].level < node[root].level ? other : root;
            int32_t old = young == other ? root : other;
            double died = g->sval[node[young].level];
            if (born < INFINITY && died > born && pairs_push(out, born, died)) return -1;
            node[young].parent = old;
            root = old;
        }
    }
    return 0;
}

/* ------------------------------------------------------------------ 3D cell tables */

/* Offset code of a cell relative to a voxel centre, each component in {-1, 0, 1} (half
 * voxel steps): code = (d0 + 1) * 9 + (d1 + 1) * 3 + (d2 + 1); 13 is the voxel itself. */
static inline int code_of(int d0, int d1, int d2) { return (d0 + 1) * 9 + (d1 + 1) * 3 + d2 + 1; }
static inline int code_d(int code, int axis)
{
    return axis == 0 ? code / 9 - 1 : axis == 1 ? (code / 3) % 3 - 1 : code % 3 - 1;
}

typedef struct {
    int64_t S[3];
    int64_t nbr[NCODES];         /* offset of the neighbour voxel in direction `code` */
    uint32_t contain[NCODES];    /* neighbour codes (bits) that also contain the cell `code` */
    int nv, ne;
    int vcode[8];                /* vertex slots, ascending code */
    int64_t vid[8];              /* vertex id (padded index of the voxel it is the top corner of) */
    int ecode[12];               /* edge slots, ascending code */
    int64_t eend[12][2];         /* vertex ids of the two ends */
    int etau[12];                /* code of the first coface of the edge inside its creator */
    uint32_t ehigher[12];        /* slots of the other edges of that coface with a larger code */
    int slot_of[NCODES];         /* edge code -> slot, -1 otherwise */
    uint32_t sq_edges[NCODES];   /* square code -> its edge slots (bits) */
} Tables;

static void tables_build(const Grid *g, Tables *t)
{
    memset(t, 0, sizeof *t);
    for (int a = 0; a < 3; a++) t->S[a] = a == 2 ? 1 : g->S[a];
    for (int c = 0; c < NCODES; c++) {
        int d[3] = {code_d(c, 0), code_d(c, 1), code_d(c, 2)};
        t->nbr[c] = d[0] * t->S[0] + d[1] * t->S[1] + d[2] * t->S[2];
        t->slot_of[c] = -1;
        /* voxels containing the cell: centre + subset of its nonzero directions */
        uint32_t bits = 0;
        for (int f0 = 0; f0 <= (d[0] != 0); f0++)
            for (int f1 = 0; f1 <= (d[1] != 0); f1++)
                for (int f2 = 0; f2 <= (d[2] != 0); f2++) {
                    int s = code_of(f0 * d[0], f1 * d[1], f2 * d[2]);
                    if (s != 13) bits |= 1u << s;
                }
        t->contain[c] = bits;
    }
    for (int c = 0; c < NCODES; c++) {
        int d[3] = {code_d(c, 0), code_d(c, 1), code_d(c, 2)};
        int nonzero = (d[0] != 0) + (d[1] != 0) + (d[2] != 0);
        if (nonzero == 3) {
            int v = t->nv++;
            t->vcode[v] = c;
            t->vid[v] = (d[0] < 0 ? -t->S[0] : 0) + (d[1] < 0 ? -t->S[1] : 0) + (d[2] < 0 ? -1 : 0);
        } else if (nonzero == 2) {
            int e = t->ne++;
            t->ecode[e] = c;
            t->slot_of[c] = e;
        }
    }
    for (int e = 0; e < 12; e++) {
        int c = t->ecode[e];
        int d[3] = {code_d(c, 0), code_d(c, 1), code_d(c, 2)};
        int a = d[0] == 0 ? 0 : d[1] == 0 ? 1 : 2; /* the axis the edge runs along */
        for (int end = 0; end < 2; end++) {
            int w[3] = {d[0], d[1], d[2]};
            w[a] = end ? 1 : -1;
            t->eend[e][end] = (w[0] < 0 ? -t->S[0] : 0) + (w[1] < 0 ? -t->S[1] : 0) +
                              (w[2] < 0 ? -1 : 0);
        }
        /* cofaces inside the voxel: keep one of the two nonzero directions */
        int best = NCODES;
        for (int b = 0; b < 3; b++) {
            if (d[b] == 0) continue;
            int w[3] = {0, 0, 0};
            w[b] = d[b];
            int sq = code_of(w[0], w[1], w[2]);
            if (sq < best) best = sq;
        }
        t->etau[e] = best;
    }
    for (int c = 0; c < NCODES; c++) {
        int d[3] = {code_d(c, 0), code_d(c, 1), code_d(c, 2)};
        int nonzero = (d[0] != 0) + (d[1] != 0) + (d[2] != 0);
        if (nonzero != 1) continue;
        uint32_t bits = 0;
        for (int a = 0; a < 3; a++) {
            if (d[a] != 0) continue;
            for (int s = -1; s <= 1; s += 2) {
                int w[3] = {d[0], d[1], d[2]};
                w[a] = s;
                bits |= 1u << t->slot_of[code_of(w[0], w[1], w[2])];
            }
        }
        t->sq_edges[c] = bits;
    }
    for (int e = 0; e < 12; e++) {
        uint32_t bits = t->sq_edges[t->etau[e]] & ~(1u << e);
        uint32_t higher = 0;
        for (int f = 0; f < 12; f++)
            if ((bits >> f & 1) && t->ecode[f] > t->ecode[e]) higher |= 1u << f;
        t->ehigher[e] = higher;
    }
}

/* Per finite level r, a 32-bit word about the cells voxel order[r] creates:
 * bits 0-7 vertex slots it creates, bits 8-19 edge slots it creates, bits 20-31 edge slots
 * that still need a column in the H1 reduction (created, not in an apparent pair, and after
 * h0_edges not an H0 death edge). */
#define M_VERT(m) ((m) & 0xFFu)
#define M_EDGE(m) (((m) >> 8) & 0xFFFu)
#define M_TODO(m) (((m) >> 20) & 0xFFFu)

static uint32_t *creation_masks(const Grid *g, const Tables *t)
{
    uint32_t *mask = malloc((size_t)(g->nfin ? g->nfin : 1) * sizeof(uint32_t));
    if (!mask) return NULL;
    const Node *node = g->node;
    /* a sweep in memory order keeps the neighbour reads in cache */
    for (int64_t i = 0; i < g->n[0]; i++)
        for (int64_t j = 0; j < g->n[1]; j++) {
            int64_t base = (i + 1) * g->S[0] + (j + 1) * g->S[1] + 1;
            for (int64_t k = 0; k < g->n[2]; k++) {
                int64_t P = base + k;
                int32_t r = node[P].level;
                if (r >= g->nfin) continue;
                uint32_t earlier = 0;
                for (int c = 0; c < NCODES; c++)
                    if (node[P + t->nbr[c]].level < r) earlier |= 1u << c;
                uint32_t m = 0, edges = 0;
                for (int v = 0; v < 8; v++)
                    if (!(earlier & t->contain[t->vcode[v]])) m |= 1u << v;
                for (int e = 0; e < 12; e++)
                    if (!(earlier & t->contain[t->ecode[e]])) edges |= 1u << e;
                uint32_t todo = 0;
                for (int e = 0; e < 12; e++)
                    /* (edge, its first coface) is an apparent pair when no other edge of
                     * that coface comes later: the later ones are those this voxel creates
                     * with a larger code, the others have an earlier creator */
                    if ((edges >> e & 1) && (edges & t->ehigher[e])) todo |= 1u << e;
                mask[r] = m | edges << 8 | todo << 20;
            }
        }
    return mask;
}

/* H0 by Kruskal over the edges in the cell order, which also marks the H0 death edges (the
 * edges that H1 cohomology clears). Apparent edges close a cycle and are skipped. */
static int h0_edges(const Grid *g, const Tables *t, uint32_t *mask, Pairs *out)
{
    /* vertex V is the top corner of padded voxel V; .level is the birth of a root */
    Node *vert = malloc((size_t)g->npad * sizeof(Node));
    if (!vert) return -1;
    memset(vert, 0xFF, (size_t)g->npad * sizeof(Node)); /* parent -1: not in the complex */
    for (int64_t r = 0; r < g->nfin; r++) {
        int32_t P = g->order[r];
        uint32_t m = mask[r];
        for (int v = 0; v < 8; v++) {
            if (!(M_VERT(m) >> v & 1)) continue;
            int32_t V = (int32_t)(P + t->vid[v]);
            vert[V].parent = V;
            vert[V].level = (int32_t)r;
        }
        uint32_t todo = M_TODO(m);
        for (int e = 0; e < 12; e++) {
            if (!(todo >> e & 1)) continue;
            int32_t a = uf_find(vert, (int32_t)(P + t->eend[e][0]));
            int32_t b = uf_find(vert, (int32_t)(P + t->eend[e][1]));
            if (a == b) continue;
            todo &= ~(1u << e); /* an H0 death edge: cleared in H1 */
            int32_t young = vert[a].level > vert[b].level ? a : b;
            int32_t old = young == a ? b : a;
            double born = g->sval[vert[young].level], died = g->sval[r];
            if (died > born && pairs_push(out, born, died)) {
                free(vert);
                return -1;
            }
            vert[young].parent = old;
        }
        mask[r] = (m & 0xFFFFFu) | todo << 20;
    }
    for (int64_t V = 0; V < g->npad; V++) {
        if (vert[V].parent == V && pairs_push(out, g->sval[vert[V].level], INFINITY)) {
            free(vert);
            return -1;
        }
    }
    free(vert);
    return 0;
}

/* ------------------------------------------------------------------ H1 cohomology (3D) */

typedef struct {
    int64_t *key; /* square, -1 empty */
    int64_t *edge;
    int64_t *voff; /* offset of the reduced column in the pool; -1: the bare coboundary */
    size_t cap, len;
} Claims;

static inline size_t hash64(int64_t x)
{
    uint64_t h = (uint64_t)x * 0x9E3779B97F4A7C15ULL;
    return (size_t)(h ^ (h >> 29));
}

static int claims_grow(Claims *h)
{
    size_t cap = h->cap ? 2 * h->cap : 1024;
    int64_t *key = malloc(cap * sizeof(int64_t));
    int64_t *edge = malloc(cap * sizeof(int64_t));
    int64_t *voff = malloc(cap * sizeof(int64_t));
    if (!key || !edge || !voff) {
        free(key); free(edge); free(voff);
        return -1;
    }
    memset(key, 0xFF, cap * sizeof(int64_t));
    for (size_t i = 0; i < h->cap; i++) {
        if (h->key[i] < 0) continue;
        size_t s = hash64(h->key[i]) & (cap - 1);
        while (key[s] >= 0) s = (s + 1) & (cap - 1);
        key[s] = h->key[i];
        edge[s] = h->edge[i];
        voff[s] = h->voff[i];
    }
    free(h->key); free(h->edge); free(h->voff);
    h->key = key;
    h->edge = edge;
    h->voff = voff;
    h->cap = cap;
    return 0;
}

static inline long claims_find(const Claims *h, int64_t key)
{
    if (!h->cap) return -1;
    size_t s = hash64(key) & (h->cap - 1);
    while (h->key[s] >= 0) {
        if (h->key[s] == key) return (long)s;
        s = (s + 1) & (h->cap - 1);
    }
    return -1;
}

static int claims_put(Claims *h, int64_t key, int64_t edge, int64_t voff)
{
    if (2 * (h->len + 1) > h->cap && claims_grow(h)) return -1;
    size_t s = hash64(key) & (h->cap - 1);
    while (h->key[s] >= 0) s = (s + 1) & (h->cap - 1);
    h->key[s] = key;
    h->edge[s] = edge;
    h->voff[s] = voff;
    h->len++;
    return 0;
}

/* binary min-heap of cell keys */
static int heap_push(Vec *h, int64_t x)
{
    if (vec_push(h, x)) return -1;
    int64_t *a = h->data;
    size_t i = h->len - 1;
    while (i > 0) {
        size_t p = (i - 1) / 2;
        if (a[p] <= x) break;
        a[i] = a[p];
        i = p;
    }
    a[i] = x;
    return 0;
}

static int64_t heap_pop(Vec *h)
{
    int64_t *a = h->data;
    int64_t top = a[0];
    int64_t x = a[--h->len];
    size_t n = h->len, i = 0;
    for (;;) {
        size_t c = 2 * i + 1;
        if (c >= n) break;
        if (c + 1 < n && a[c + 1] < a[c]) c++;
        if (a[c] >= x) break;
        a[i] = a[c];
        i = c;
    }
    if (n) a[i] = x;
    return top;
}

/* smallest key with odd multiplicity, removed from the heap; -1 when the column is zero */
static int64_t heap_pivot(Vec *h)
{
    while (h->len) {
        int64_t x = heap_pop(h);
        int odd = 1;
        while (h->len && h->data[0] == x) {
            heap_pop(h);
            odd ^= 1;
        }
        if (odd) return x;
    }
    return -1;
}

typedef struct {
    const Grid *g;
    const Tables *t;
    const uint32_t *mask;
    Claims claims;
    Vec pool;   /* reduced columns: count, then square keys, ascending */
    Vec heap;   /* working column */
} Cohomology;

/* Key of the cell at offset (d0, d1, d2) from voxel X (X may be a pad cell); -1 if every
 * voxel containing it is a pad cell (no such cell). */
static inline int64_t cell_key(const Cohomology *h, int64_t X, int d0, int d1, int d2)
{
    const Node *node = h->g->node;
    const int64_t *S = h->t->S;
    int32_t best = SENTINEL;
    int b0 = d0, b1 = d1, b2 = d2;
    for (int f0 = 0; f0 <= (d0 != 0); f0++)
        for (int f1 = 0; f1 <= (d1 != 0); f1++)
            for (int f2 = 0; f2 <= (d2 != 0); f2++) {
                int32_t l = node[X + f0 * d0 * S[0] + f1 * d1 * S[1] + f2 * d2].level;
                if (l < best) {
                    best = l;
                    b0 = f0 ? -d0 : d0;
                    b1 = f1 ? -d1 : d1;
                    b2 = f2 ? -d2 : d2;
                }
            }
    if (best == SENTINEL) return -1;
    return (int64_t)best * NCODES + code_of(b0, b1, b2);
}

/* Push the coboundary (the up to four squares containing it) of edge `key`. */
static int push_coboundary(Cohomology *h, int64_t key)
{
    int64_t r = key / NCODES;
    int c = (int)(key % NCODES);
    int64_t P = h->g->order[r];
    int d[3] = {code_d(c, 0), code_d(c, 1), code_d(c, 2)};
    for (int b = 0; b < 3; b++) {
        if (d[b] == 0) continue;
        /* squares keeping direction b of the edge: one inside its creator P (creator P,
         * since P comes before every voxel containing the edge), one in the voxel beyond
         * the other direction */
        int w[3] = {0, 0, 0};
        w[b] = d[b];
        if (heap_push(&h->heap, r * NCODES + code_of(w[0], w[1], w[2]))) return -1;
        int o = 3 - b - (d[0] == 0 ? 0 : d[1] == 0 ? 1 : 2); /* the other nonzero axis */
        int64_t X = P + d[o] * h->t->S[o];
        int64_t sq = cell_key(h, X, w[0], w[1], w[2]);
        if (sq >= 0 && heap_push(&h->heap, sq)) return -1;
    }
    return 0;
}

/* First coface of edge `key` in the cell order (inside its creator, see push_coboundary). */
static inline int64_t min_coface(const Cohomology *h, int64_t key)
{
    int64_t r = key / NCODES;
    return r * NCODES + h->t->etau[h->t->slot_of[key % NCODES]];
}

/* Last face of square `key` in the cell order. */
static int64_t max_face(const Cohomology *h, int64_t key)
{
    int64_t r = key / NCODES;
    int c = (int)(key % NCODES);
    uint32_t own = M_EDGE(h->mask[r]) & h->t->sq_edges[c];
    if (own) {
        /* an edge the square's creator creates itself comes after every other one */
        int e = 31 - __builtin_clz(own);
        return r * NCODES + h->t->ecode[e];
    }
    int64_t P = h->g->order[r];
    int64_t best = -1;
    uint32_t edges = h->t->sq_edges[c];
    while (edges) {
        int e = __builtin_ctz(edges);
        edges &= edges - 1;
        int ec = h->t->ecode[e];
        int64_t k = cell_key(h, P, code_d(ec, 0), code_d(ec, 1), code_d(ec, 2));
        if (k > best) best = k;
    }
    return best;
}

/* Is square `tau` the pivot of an apparent pair (sigma*, tau) with sigma* != sigma? */
static inline int apparent_owner(const Cohomology *h, int64_t tau, int64_t sigma, int64_t *owner)
{
    int64_t s = max_face(h, tau);
    if (s == sigma || min_coface(h, s) != tau) return 0;
    *owner = s;
    return 1;
}

static int add_column(Cohomology *h, int64_t edge, int64_t voff)
{
    if (voff < 0) return push_coboundary(h, edge);
    int64_t count = h->pool.data[voff];
    for (int64_t i = 1; i <= count; i++)
        if (heap_push(&h->heap, h->pool.data[voff + i])) return -1;
    return 0;
}

/* Reduce the column of edge sigma (not apparent, not cleared). */
static int reduce_column(Cohomology *h, int64_t sigma, Pairs *out)
{
    const Grid *g = h->g;
    double born = g->sval[sigma / NCODES];
    int64_t tau = min_coface(h, sigma), owner;
    long slot;
    if (!apparent_owner(h, tau, sigma, &owner) && claims_find(&h->claims, tau) < 0)
        /* emergent pair: the bare coboundary is reduced (zero persistence: same creator) */
        return claims_put(&h->claims, tau, sigma, -1);
    h->heap.len = 0;
    if (push_coboundary(h, sigma)) return -1;
    for (;;) {
        tau = heap_pivot(&h->heap);
        /* a zero column is an essential class; a pivot at +inf leaves only cells at +inf
         * in the column, so the class dies at +inf whatever is added to it */
        if (tau < 0 || tau / NCODES >= g->nfin) return pairs_push(out, born, INFINITY);
        if (heap_push(&h->heap, tau)) return -1; /* cancelled by the column added below */
        if (apparent_owner(h, tau, sigma, &owner)) {
            if (add_column(h, owner, -1)) return -1;
        } else if ((slot = claims_find(&h->claims, tau)) >= 0) {
            if (add_column(h, h->claims.edge[slot], h->claims.voff[slot])) return -1;
        } else {
            break;
        }
    }
    /* tau is unclaimed: pair (sigma, tau); keep the reduced column for later columns */
    double died = g->sval[tau / NCODES];
    if (died > born && pairs_push(out, born, died)) return -1;
    int64_t voff = (int64_t)h->pool.len;
    if (vec_push(&h->pool, 0)) return -1;
    int64_t x;
    while ((x = heap_pivot(&h->heap)) >= 0)
        if (vec_push(&h->pool, x)) return -1;
    h->pool.data[voff] = (int64_t)h->pool.len - voff - 1;
    return claims_put(&h->claims, tau, sigma, voff);
}

static int h1_cohomology(const Grid *g, const Tables *t, const uint32_t *mask, Pairs *out)
{
    Cohomology h = {0};
    h.g = g;
    h.t = t;
    h.mask = mask;
    int status = 0;
    for (int64_t r = g->nfin - 1; r >= 0 && !status; r--) {
        uint32_t todo = M_TODO(mask[r]);
        while (todo && !status) {
            int e = 31 - __builtin_clz(todo); /* decreasing code: decreasing cell order */
            todo &= ~(1u << e);
            status = reduce_column(&h, r * NCODES + t->ecode[e], out);
        }
    }
    free(h.claims.key);
    free(h.claims.edge);
    free(h.claims.voff);
    free(h.pool.data);
    free(h.heap.data);
    return status;
}

/* ------------------------------------------------------------------ entry point */

static int compute(Grid *g, const double *values, int max_dim, Pairs *out)
{
    if (grid_sort(g, values)) return -1;
    if (g->ndim == 3 && max_dim >= 1) {
        Tables t;
        tables_build(g, &t);
        uint32_t *mask = creation_masks(g, &t);
        if (!mask) return -1;
        int status = h0_edges(g, &t, mask, &out[0]);
        if (!status) status = h1_cohomology(g, &t, mask, &out[1]);
        free(mask);
        if (status) return -1;
    } else if (h0_voxels(g, &out[0])) {
        return -1;
    }
    if (max_dim == g->ndim - 1 && max_dim >= 1 && h_top(g, &out[max_dim])) return -1;
    return 0;
}

static PyObject *diagrams(PyObject *self, PyObject *args)
{
    Py_buffer buffer;
    PyObject *shape;
    int max_dim;
    (void)self;
    if (!PyArg_ParseTuple(args, "y*O!i", &buffer, &PyTuple_Type, &shape, &max_dim)) return NULL;
    Grid g = {0};
    Pairs out[3] = {{0}};
    PyObject *result = NULL;
    Py_ssize_t ndim = PyTuple_GET_SIZE(shape);
    int64_t n[3] = {1, 1, 1}, total = 1;
    if (ndim != 2 && ndim != 3) {
        PyErr_SetString(PyExc_ValueError, "values must be 2D or 3D");
        goto done;
    }
    for (Py_ssize_t a = 0; a < ndim; a++) {
        long long e = PyLong_AsLongLong(PyTuple_GET_ITEM(shape, a));
        if (e == -1 && PyErr_Occurred()) goto done;
        if (e < 1 || e > (1LL << 30)) {
            PyErr_SetString(PyExc_ValueError, "every axis needs 1 to 2**30 elements");
            goto done;
        }
        n[a + 3 - ndim] = e;
        total *= e;
    }
    if (max_dim < 0 || max_dim > ndim - 1) {
        PyErr_SetString(PyExc_ValueError, "max_dim must be between 0 and ndim - 1");
        goto done;
    }
    if (buffer.len != (Py_ssize_t)(total * (int64_t)sizeof(double))) {
        PyErr_SetString(PyExc_ValueError, "buffer size does not match the shape");
        goto done;
    }
    g.ndim = (int)ndim;
    for (int a = 0; a < 3; a++) g.n[a] = n[a];
    g.S[2] = 1;
    g.S[1] = n[2] + 2;
    g.S[0] = (n[1] + 2) * (n[2] + 2);
    g.npad = ndim == 3 ? (n[0] + 2) * g.S[0] : g.S[0];
    g.nvox = total;
    if (g.npad + 1 >= INT32_MAX) {
        PyErr_SetString(PyExc_ValueError, "array too large");
        goto done;
    }
    {
        const double *values = buffer.buf;
        for (int64_t i = 0; i < total; i++) {
            if (!(values[i] > -INFINITY)) {
                PyErr_SetString(PyExc_ValueError, "values must be finite or +inf");
                goto done;
            }
        }
        int status;
        Py_BEGIN_ALLOW_THREADS
        status = compute(&g, values, max_dim, out);
        Py_END_ALLOW_THREADS
        if (status) {
            PyErr_NoMemory();
            goto done;
        }
    }
    result = PyList_New(max_dim + 1);
    if (!result) goto done;
    for (int k = 0; k <= max_dim; k++) {
        PyObject *bytes = PyBytes_FromStringAndSize(
            out[k].data ? (const char *)out[k].data : "", (Py_ssize_t)(out[k].len * sizeof(double)));
        if (!bytes) {
            Py_CLEAR(result);
            goto done;
        }
        PyList_SET_ITEM(result, k, bytes);
    }
done:
    PyBuffer_Release(&buffer);
    free(g.node);
    free(g.order);
    free(g.sval);
    for (int k = 0; k < 3; k++) free(out[k].data);
    return result;
}

static PyMethodDef methods[] = {
    {"diagrams", diagrams, METH_VARARGS,
     "diagrams(values, shape, max_dim) -> list of bytes\n\n"
     "values: C-contiguous float64 buffer of the 2D or 3D array of that shape (finite or "
     "+inf). Returns, for dimensions 0..max_dim, the (birth, death) pairs as packed float64, "
     "unsorted; zero-length pairs and pairs born at +inf left out."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {
    PyModuleDef_HEAD_INIT, "_cubical", "Cubical persistence of images and volumes.", -1, methods,
    NULL, NULL, NULL, NULL,
};

PyMODINIT_FUNC PyInit__cubical(void) { return PyModule_Create(&module); }
