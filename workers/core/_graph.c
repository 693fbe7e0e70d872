/* Persistence of the sublevel filtration of a graph (a 1-dimensional simplicial complex:
 * node v enters at values[v], edge (u, v) at max(values[u], values[v])); see
 * workers/core/graph_persistence.py for the convention and the sources of the method. Plain
 * CPython C API, no numpy headers.
 *
 * Layout. Nodes are renamed by their position ("rank") in the stable sort of the values that
 * the caller passes (order[r] is the node of rank r), so that sval[r], the sorted values, is
 * read in order and the elder of two components is simply the root of lower rank: the
 * union-find needs no birth or size field. The edges are bucketed (a counting sort, stable)
 * by the rank of their later endpoint into CSR arrays: start[r] .. start[r + 1] holds the
 * ranks of the earlier endpoints of the edges that enter with node r. Ranks in increasing
 * order then visit the edges in an order that refines the filtration (by value, ties by the
 * rank of the later endpoint, then by input position), which is all the elder rule needs:
 * the diagram does not depend on how ties are broken. Edges whose later endpoint is at +inf
 * never enter and are not stored.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* status codes of compute(); each becomes one Python exception */
#define OK 0
#define NO_MEMORY -1
#define BAD_ORDER -2
#define BAD_INDEX -3

typedef struct {
    double *data;
    size_t len; /* doubles */
} Pairs;

static inline void push(Pairs *p, double birth, double death)
{
    p->data[p->len++] = birth;
    p->data[p->len++] = death;
}

/* Root of rank x, with path halving. */
static inline int32_t find(int32_t *parent, int32_t x)
{
    while (parent[x] != x) {
        int32_t up = parent[parent[x]];
        parent[x] = up;
        x = up;
    }
    return x;
}

typedef struct {
    int64_t n, m;          /* nodes, edges */
    int64_t nfin;          /* nodes with a finite value: ranks 0 .. nfin-1 */
    const double *values;  /* n */
    const int64_t *order;  /* n: node of rank r */
    const int64_t *edges;  /* 2m: endpoints of edge e at 2e, 2e+1 */
    int32_t *rank;         /* n */
    double *sval;          /* nfin: value of rank r */
    int64_t *start;        /* nfin + 1: CSR offsets by the rank of the later endpoint */
    int32_t *earlier;      /* stored edges: rank of the earlier endpoint */
    int32_t *parent;       /* nfin: union-find over ranks */
} Graph;

/* Ranks from `order` (checked to be a permutation that sorts the values) and nfin. */
static int rank_nodes(Graph *g)
{
    g->rank = malloc((size_t)(g->n ? g->n : 1) * sizeof(int32_t));
    g->sval = malloc((size_t)(g->n ? g->n : 1) * sizeof(double));
    if (!g->rank || !g->sval) return NO_MEMORY;
    memset(g->rank, 0xFF, (size_t)g->n * sizeof(int32_t)); /* -1: no rank yet */
    double previous = -INFINITY;
    g->nfin = 0;
    for (int64_t r = 0; r < g->n; r++) {
        int64_t v = g->order[r];
        if (v < 0 || v >= g->n || g->rank[v] >= 0) return BAD_ORDER;
        double x = g->values[v];
        if (!(x > -INFINITY) || x < previous) return BAD_ORDER; /* NaN, -inf, unsorted */
        previous = x;
        g->rank[v] = (int32_t)r;
        g->sval[r] = x;
        if (x < INFINITY) g->nfin = r + 1;
    }
    return OK;
}

/* Counting sort of the edges by the rank of their later endpoint (two passes). */
static int bucket_edges(Graph *g)
{
    int64_t nfin = g->nfin;
    g->start = calloc((size_t)nfin + 1, sizeof(int64_t));
    if (!g->start) return NO_MEMORY;
    int64_t *count = g->start + 1; /* count[r]: edges of rank r, shifted for the prefix sum */
    for (int64_t e = 0; e < g->m; e++) {
        int64_t u = g->edges[2 * e], v = g->edges[2 * e + 1];
        if (u < 0 || u >= g->n || v < 0 || v >= g->n) return BAD_INDEX;
        int32_t ru = g->rank[u], rv = g->rank[v];
        int32_t late = ru > rv ? ru : rv;
        if (late < nfin) count[late]++;
    }
    for (int64_t r = 0; r < nfin; r++) count[r] += g->start[r]; /* now start[r + 1] */
    int64_t stored = g->start[nfin];
    g->earlier = malloc((size_t)(stored ? stored : 1) * sizeof(int32_t));
    if (!g->earlier) return NO_MEMORY;
    /* fill through a copy of the offsets, so start[] stays the bucket starts */
    int64_t *next = malloc((size_t)(nfin ? nfin : 1) * sizeof(int64_t));
    if (!next) return NO_MEMORY;
    memcpy(next, g->start, (size_t)nfin * sizeof(int64_t));
    for (int64_t e = 0; e < g->m; e++) {
        int32_t ru = g->rank[g->edges[2 * e]], rv = g->rank[g->edges[2 * e + 1]];
        int32_t late = ru > rv ? ru : rv, early = ru > rv ? rv : ru;
        if (late < nfin) g->earlier[next[late]++] = early;
    }
    free(next);
    return OK;
}

/* H0 by the elder rule and, when `with_h1`, the edges that close a cycle (H1, never die). */
static int sweep(Graph *g, int with_h1, Pairs *h0, Pairs *h1)
{
    int64_t nfin = g->nfin, stored = g->start[nfin];
    /* a finite H0 pair kills a root and an essential one keeps it: at most nfin in all */
    h0->data = malloc((size_t)(nfin ? 2 * nfin : 1) * sizeof(double));
    h1->data = malloc((size_t)(with_h1 && stored ? 2 * stored : 1) * sizeof(double));
    g->parent = malloc((size_t)(nfin ? nfin : 1) * sizeof(int32_t));
    if (!h0->data || !h1->data || !g->parent) return NO_MEMORY;
    int32_t *parent = g->parent;
    const double *sval = g->sval;
    for (int64_t r = 0; r < nfin; r++) {
        int32_t root = (int32_t)r;
        parent[r] = root; /* node r enters as a component of its own */
        double now = sval[r];
        for (int64_t k = g->start[r]; k < g->start[r + 1]; k++) {
            int32_t other = find(parent, g->earlier[k]);
            if (other == root) { /* endpoints already connected (a self-loop too) */
                if (with_h1) push(h1, now, INFINITY);
                continue;
            }
            /* the root of higher rank is the younger component: it dies here */
            int32_t young = other > root ? other : root;
            int32_t old = young == other ? root : other;
            if (now > sval[young]) push(h0, sval[young], now);
            parent[young] = old;
            root = old;
        }
    }
    for (int64_t r = 0; r < nfin; r++)
        if (parent[r] == r) push(h0, sval[r], INFINITY);
    return OK;
}

static int compute(Graph *g, int with_h1, Pairs *h0, Pairs *h1)
{
    int status = rank_nodes(g);
    if (status == OK) status = bucket_edges(g);
    if (status == OK) status = sweep(g, with_h1, h0, h1);
    return status;
}

static PyObject *diagrams(PyObject *self, PyObject *args)
{
    Py_buffer values, order, edges;
    int max_dim;
    (void)self;
    if (!PyArg_ParseTuple(args, "y*y*y*i", &values, &order, &edges, &max_dim)) return NULL;
    Graph g = {0};
    Pairs out[2] = {{0}};
    PyObject *result = NULL;
    if (max_dim < 0 || max_dim > 1) {
        PyErr_SetString(PyExc_ValueError, "max_dim must be 0 or 1");
        goto done;
    }
    if (values.len % (Py_ssize_t)sizeof(double) || edges.len % (Py_ssize_t)(2 * sizeof(int64_t))) {
        PyErr_SetString(PyExc_ValueError, "values must be float64, edges pairs of int64");
        goto done;
    }
    g.n = (int64_t)(values.len / (Py_ssize_t)sizeof(double));
    g.m = (int64_t)(edges.len / (Py_ssize_t)(2 * sizeof(int64_t)));
    if (order.len != (Py_ssize_t)(g.n * (int64_t)sizeof(int64_t))) {
        PyErr_SetString(PyExc_ValueError, "order must hold one int64 per value");
        goto done;
    }
    if (g.n >= INT32_MAX) {
        PyErr_SetString(PyExc_ValueError, "graph too large: 2**31 - 1 nodes at most");
        goto done;
    }
    g.values = values.buf;
    g.order = order.buf;
    g.edges = edges.buf;
    int status;
    Py_BEGIN_ALLOW_THREADS
    status = compute(&g, max_dim == 1, &out[0], &out[1]);
    Py_END_ALLOW_THREADS
    if (status == NO_MEMORY) {
        PyErr_NoMemory();
        goto done;
    }
    if (status == BAD_ORDER) {
        PyErr_SetString(PyExc_ValueError,
                        "order must be a permutation sorting the values (no NaN or -inf)");
        goto done;
    }
    if (status == BAD_INDEX) {
        PyErr_SetString(PyExc_ValueError, "an edge has a node index out of range");
        goto done;
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
    PyBuffer_Release(&values);
    PyBuffer_Release(&order);
    PyBuffer_Release(&edges);
    free(g.rank);
    free(g.sval);
    free(g.start);
    free(g.earlier);
    free(g.parent);
    free(out[0].data);
    free(out[1].data);
    return result;
}

static PyMethodDef methods[] = {
    {"diagrams", diagrams, METH_VARARGS,
     "diagrams(values, order, edges, max_dim) -> list of bytes\n\n"
     "values: float64 buffer, one value per node (finite or +inf); order: int64 buffer, the "
     "stable argsort of values; edges: int64 buffer of (u, v) node pairs. Returns, for "
     "dimensions 0..max_dim (at most 1), the (birth, death) pairs as packed float64, "
     "unsorted; zero-length pairs left out."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {
    PyModuleDef_HEAD_INIT, "_graph", "Persistence of filtered graphs.", -1, methods,
    NULL, NULL, NULL, NULL,
};

PyMODINIT_FUNC PyInit__graph(void) { return PyModule_Create(&module); }
