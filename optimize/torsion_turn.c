/* Rigid turns about a bond; see torsion_turn.h. */
#include "optimize/torsion_turn.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Marks the atoms reached from root without crossing root-other; returns
 * their count, or -1 when other is reached (a ring) or memory runs out. */
static int reach(int n, const int *start, const int *adj, int root, int other, unsigned char *mark)
{
    int *stack = malloc(sizeof(int) * (size_t)(n > 0 ? n : 1));
    if (!stack)
        return -1;
    memset(mark, 0, (size_t)n);
    int top = 0, count = 1;
    mark[root] = 1;
    stack[top++] = root;
    while (top > 0) {
        int u = stack[--top];
        for (int p = start[u]; p < start[u + 1]; p++) {
            int v = adj[p];
            if (u == root && v == other)
                continue;
            if (v == other) {
                free(stack);
                return -1;
            }
            if (!mark[v]) {
                mark[v] = 1;
                count++;
                stack[top++] = v;
            }
        }
    }
    free(stack);
    return count;
}

int nd_torsion_side(int n, const int *start, const int *adj, int j, int k, unsigned char *moving)
{
    memset(moving, 0, (size_t)n);
    if (j < 0 || k < 0 || j >= n || k >= n || j == k)
        return 0;
    int bonded = 0;
    for (int p = start[j]; p < start[j + 1]; p++)
        bonded |= adj[p] == k;
    if (!bonded)
        return 0;
    int nk = reach(n, start, adj, k, j, moving);
    if (nk < 0) {
        memset(moving, 0, (size_t)n);
        return 0;
    }
    if (2 * nk <= n)
        return 1;
    if (reach(n, start, adj, j, k, moving) < 0) { /* only out of memory here */
        memset(moving, 0, (size_t)n);
        return 0;
    }
    return -1;
}

void nd_torsion_turn(int n, double *x, const unsigned char *moving, int j, int k, double angle)
{
    const double *o = x + 3 * (size_t)j;
    double u[3] = {x[3 * k] - o[0], x[3 * k + 1] - o[1], x[3 * k + 2] - o[2]};
    double len = sqrt(u[0] * u[0] + u[1] * u[1] + u[2] * u[2]);
    if (!(len > 0))
        return;
    for (int d = 0; d < 3; d++)
        u[d] /= len;
    double c = cos(angle), s = sin(angle), ox = o[0], oy = o[1], oz = o[2];
    for (int a = 0; a < n; a++) {
        if (!moving[a] || a == j || a == k)
            continue;
        double *p = x + 3 * (size_t)a;
        double v[3] = {p[0] - ox, p[1] - oy, p[2] - oz};
        double dot = u[0] * v[0] + u[1] * v[1] + u[2] * v[2];
        double cr[3] = {u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]};
        /* Rodrigues: v cos + (u x v) sin + u (u.v)(1 - cos) */
        p[0] = ox + v[0] * c + cr[0] * s + u[0] * dot * (1 - c);
        p[1] = oy + v[1] * c + cr[1] * s + u[1] * dot * (1 - c);
        p[2] = oz + v[2] * c + cr[2] * s + u[2] * dot * (1 - c);
    }
}
