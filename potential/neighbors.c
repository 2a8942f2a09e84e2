/* Cell-list neighbour search; see neighbors.h. */
#include "potential/neighbors.h"
#include "core/numeric.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Grows *p to hold at least want elements of size sz; ND_ENOMEM on failure. */
static int grow(void **p, size_t *cap, size_t want, size_t sz)
{
    if (want <= *cap)
        return ND_OK;
    size_t nc = want + want / 2 + 16;
    void *q = realloc(*p, nc * sz);
    if (!q)
        return ND_ENOMEM;
    *p = q;
    *cap = nc;
    return ND_OK;
}

/* Per structure: dims nx, ny, nz, first cell index; then origin and cell edge. */
typedef struct {
    int nx, ny, nz, c0, reach; /* reach: cells searched each way */
    double ox, oy, oz, h;
} grid_info;

/* Counts the neighbours of atom a and writes the first cap of them
 * (all of them when the count is at most cap) to list, in cell order.
 * list holds cap + 1 ints: every tested atom is written at the next free
 * place before the test decides whether it counts, so the place after the
 * last neighbour must be a spare one, never a neighbour's. */
static int scan_atom(const nd_neighbors *nb, const grid_info *g, const double *x, int a,
                     double rc2, int *list, int cap)
{
    const double *xa = x + 3 * (size_t)a;
    int c = nb->cell_of[a] - g->c0;
    int cx = c % g->nx, cy = (c / g->nx) % g->ny, cz = c / (g->nx * g->ny);
    int cnt = 0, R = g->reach;
    if (cap < 1)
        return 0;
    for (int dz = -R; dz <= R; dz++) {
        int z = cz + dz;
        if (z < 0 || z >= g->nz)
            continue;
        for (int dy = -R; dy <= R; dy++) {
            int y = cy + dy;
            if (y < 0 || y >= g->ny)
                continue;
            /* the cells cx-R .. cx+R of this row are adjacent in cell order,
             * and so are their atoms: one run */
            int x0 = cx - R > 0 ? cx - R : 0, x1 = cx + R < g->nx - 1 ? cx + R : g->nx - 1;
            int row = g->c0 + (z * g->ny + y) * g->nx;
            int q0 = nb->cell_start[row + x0], q1 = nb->cell_start[row + x1 + 1];
            const double *xq = nb->xs + 3 * (size_t)q0;
            /* branch-free: the test fails about 3 times in 4, unpredictably */
            for (int q = q0; q < q1; q++, xq += 3) {
                double ex = xq[0] - xa[0], ey = xq[1] - xa[1], ez = xq[2] - xa[2];
                int b = nb->cell_atoms[q];
                int take = (ex * ex + ey * ey + ez * ez < rc2) & (b != a);
                list[cnt < cap ? cnt : cap] = b;
                cnt += take;
            }
        }
    }
    return cnt;
}

int nd_neighbors_build(nd_neighbors *nb, int nstruct, int n, const double *x, double rc,
                       nd_error *err)
{
    if (nstruct < 0 || n < 0 || !(rc > 0))
        return nd_fail(err, ND_EINVAL, "neighbour search: bad sizes or cutoff");
    int N = nstruct * n;
    nb->natoms = N;
    nb->maxnn = 0;
    if ((size_t)N + 1 > nb->cap_atoms) {
        size_t ca = (size_t)N + 1 + (size_t)N / 2 + 16;
        int *a1 = realloc(nb->cell_of, ca * sizeof(int));
        if (a1)
            nb->cell_of = a1;
        int *a2 = a1 ? realloc(nb->start, ca * sizeof(int)) : NULL;
        if (a2)
            nb->start = a2;
        int *a3 = a2 ? realloc(nb->cell_atoms, ca * sizeof(int)) : NULL;
        if (a3)
            nb->cell_atoms = a3;
        double *a4 = a3 ? realloc(nb->xs, 3 * ca * sizeof(double)) : NULL;
        if (!a4)
            return nd_fail(err, ND_ENOMEM, "neighbour search: out of memory");
        nb->xs = a4;
        nb->cap_atoms = ca;
    }
    size_t cg = nb->cap_structs;
    if (grow(&nb->grid, &cg, (size_t)nstruct + 1, sizeof(grid_info)))
        return nd_fail(err, ND_ENOMEM, "neighbour search: out of memory");
    nb->cap_structs = cg;
    grid_info *grids = nb->grid;

    /* grids: cell edge >= rc, total cells per structure at most about 2n + 27 */
    size_t total = 0;
    for (int s = 0; s < nstruct; s++) {
        const double *xs = x + 3 * (size_t)s * n;
        double lo[3] = {INFINITY, INFINITY, INFINITY}, hi[3] = {-INFINITY, -INFINITY, -INFINITY};
        for (int i = 0; i < n; i++)
            for (int k = 0; k < 3; k++) {
                double v = xs[3 * i + k];
                if (!isfinite(v))
                    return nd_fail(err, ND_ECOMPUTE, "atom %d: coordinate is not finite", i + 1);
                lo[k] = fmin(lo[k], v);
                hi[k] = nd_larger(hi[k], v);
            }
        grid_info *g = &grids[s];
        if (n == 0) {
            lo[0] = lo[1] = lo[2] = hi[0] = hi[1] = hi[2] = 0;
        }
        /* cells of edge rc/2 searched two each way cover a (2.5 rc)^3 box
         * instead of (3 rc)^3: 42% fewer distance tests */
        double h = 0.5 * rc;
        long limit = 2L * n + 27;
        for (;;) {
            double c[3];
            for (int k = 0; k < 3; k++)
                c[k] = floor((hi[k] - lo[k]) / h) + 1;
            if (c[0] * c[1] * c[2] <= (double)limit) {
                g->nx = (int)c[0];
                g->ny = (int)c[1];
                g->nz = (int)c[2];
                break;
            }
            h *= 1.26;
        }
        g->h = h;
        g->reach = (int)ceil(rc / h - 1e-12);
        g->ox = lo[0];
        g->oy = lo[1];
        g->oz = lo[2];
        g->c0 = (int)total;
        total += (size_t)g->nx * g->ny * g->nz;
    }
    size_t cc = nb->cap_cells;
    if (grow((void **)&nb->cell_start, &cc, total + 2, sizeof(int)))
        return nd_fail(err, ND_ENOMEM, "neighbour search: out of memory");
    nb->cap_cells = cc;
    memset(nb->cell_start, 0, (total + 2) * sizeof(int));
    for (int s = 0; s < nstruct; s++) {
        const grid_info *g = &grids[s];
        for (int i = 0; i < n; i++) {
            int a = s * n + i;
            const double *xa = x + 3 * (size_t)a;
            int cx = (int)((xa[0] - g->ox) / g->h), cy = (int)((xa[1] - g->oy) / g->h),
                cz = (int)((xa[2] - g->oz) / g->h);
            if (cx >= g->nx) cx = g->nx - 1;
            if (cy >= g->ny) cy = g->ny - 1;
            if (cz >= g->nz) cz = g->nz - 1;
            int cell = g->c0 + (cz * g->ny + cy) * g->nx + cx;
            nb->cell_of[a] = cell;
            nb->cell_start[cell + 1]++;
        }
    }
    for (size_t c = 0; c < total; c++)
        nb->cell_start[c + 1] += nb->cell_start[c];
    /* counting sort into cells, atoms ascending within a cell */
    for (int a = 0; a < N; a++)
        nb->cell_atoms[nb->cell_start[nb->cell_of[a]]++] = a;
    /* coordinates in cell order, so the distance tests read memory in order */
    for (size_t q = 0; q < (size_t)N; q++)
        memcpy(nb->xs + 3 * q, x + 3 * (size_t)nb->cell_atoms[q], 3 * sizeof(double));
    for (size_t c = total; c > 0; c--)
        nb->cell_start[c] = nb->cell_start[c - 1];
    nb->cell_start[0] = 0;

    /* One distance pass: each atom writes its sorted list into a slot of
     * fixed stride (the last call's largest count plus a margin); if any
     * overflows, the pass is repeated with the stride it needed. Then the
     * slots are packed. */
    double rc2 = rc * rc;
    int wstride;
    for (;;) {
        int stride = nb->stride > 0 ? nb->stride : 64;
        wstride = stride + 1; /* one spare place per atom, see scan_atom */
        size_t want = (size_t)N * (size_t)wstride;
        if (want > nb->cap_tmp) {
            int *t = realloc(nb->tmp, (want ? want : 1) * sizeof(int));
            if (!t)
                return nd_fail(err, ND_ENOMEM, "neighbour search: out of memory");
            nb->tmp = t;
            nb->cap_tmp = want;
        }
        int need = 0;
#pragma omp parallel for schedule(static) reduction(max : need) if (N >= 256)
        for (int a = 0; a < N; a++) {
            int c = scan_atom(nb, &grids[a / n], x, a, rc2, nb->tmp + (size_t)a * wstride, stride);
            nb->start[a + 1] = c;
            if (c > need)
                need = c;
        }
        nb->maxnn = need;
        if (need <= stride) {
            if (need + 16 < stride / 2)
                nb->stride = need + 16; /* shrink for the next call */
            break;
        }
        nb->stride = need + need / 4 + 8;
    }
    nb->start[0] = 0;
    for (int a = 0; a < N; a++)
        nb->start[a + 1] += nb->start[a];
    size_t npairs = N ? (size_t)nb->start[N] : 0;
    if (npairs > nb->cap || !nb->list) {
        size_t nc = npairs + npairs / 4 + 16;
        int *l = realloc(nb->list, nc * sizeof(int));
        if (!l)
            return nd_fail(err, ND_ENOMEM, "neighbour search: out of memory");
        nb->list = l;
        nb->cap = nc;
    }
#pragma omp parallel for schedule(static) if (N >= 256)
    for (int a = 0; a < N; a++)
        memcpy(nb->list + nb->start[a], nb->tmp + (size_t)a * wstride,
               sizeof(int) * (size_t)(nb->start[a + 1] - nb->start[a]));
    return ND_OK;
}

void nd_neighbors_free(nd_neighbors *nb)
{
    if (!nb)
        return;
    free(nb->start);
    free(nb->list);
    free(nb->cell_of);
    free(nb->cell_start);
    free(nb->cell_atoms);
    free(nb->grid);
    free(nb->tmp);
    free(nb->xs);
    memset(nb, 0, sizeof *nb);
}
