/* Matrix products of few rows without packing the weights; see
 * small_gemm.h for why.
 *
 * C = A B (the backward pass; B a weight matrix, k x n): the output goes in
 * panels of PANEL columns; within a panel the rows go in register blocks
 * of at most MAX_R, and each block sweeps the panel's weights from the
 * first to the last row of B with its sums (up to 12 vectors of four
 * doubles) in registers. The weights come from memory once per call, and
 * from cache for the next block of rows.
 *
 * C = A B^T (the forward pass; B stored output by input, n x k): each entry
 * is the dot product of a row of A and a row of B. From 4 rows on, A is
 * copied transposed (k x rows, a few KB; never the weights) and each block
 * of J weight rows is swept once against all rows of A, the vectors
 * running down the rows of A (up to 32 rows per sweep): every weight is
 * read once per call. Below 4 rows that would leave vector lanes empty,
 * so the dot products run along k in vector lanes added up at the end.
 *
 * The kernels use GCC's generic vector type (four doubles, vector_size)
 * rather than leaving the blocking to the auto-vectoriser: written as
 * plain loops, the same blocks were vectorised in some places and not in
 * others (GCC 12 kept one row of a block in scalar stack slots in some
 * inlined copies, 2-8 times slower, depending on the code around it). The
 * avx2 clones run each vector in one instruction, the default ones in two
 * SSE2 instructions, the same operations in the same order: the same bits.
 * Block functions take their shape as constants (always inlined into a
 * dispatch), so that the sums stay in registers. C11 mode fuses no
 * multiply-add. */
#include "potential/small_gemm.h"

#include <stddef.h>
#include <string.h>

#define MAX_R 6    /* rows per register block of C = A B */
#define PANEL 32   /* columns per panel of C = A B (8 vectors) */
#define KC 128     /* entries of the sum per transposed copy of A */
#define NT_ROWS 32 /* rows of A per sweep of the transposed form (8 vectors) */
#define MAX_RB 8   /* rows of the largest register block */
#define MAX_V 8    /* vectors of the widest register block */

#define INLINE static inline __attribute__((always_inline))

typedef double vd __attribute__((vector_size(32))); /* four doubles */

/* Unaligned load and store of a vector (macros: a function taking or
 * returning one would change ABI between the clones, and GCC warns). */
#define VLOAD(v, p) memcpy(&(v), (p), sizeof(vd))
#define VSTORE(p, v) memcpy((p), &(v), sizeof(vd))

/* One register block: T (R x 4V, ldt) = A (R x k, lda) B (k x 4V, ldb),
 * plus the old T when add; R <= MAX_RB, V <= MAX_V. Each entry is summed
 * over k in order from its start value (0, or T when add). */
INLINE void block(const int R, const int V, int k, const double *A, size_t lda, const double *B,
                  size_t ldb, int add, double *T, size_t ldt)
{
    vd acc[MAX_RB][MAX_V];
#pragma GCC unroll 8
    for (int r = 0; r < R; r++)
#pragma GCC unroll 8
        for (int v = 0; v < V; v++)
            if (add)
                VLOAD(acc[r][v], T + (size_t)r * ldt + 4 * v);
            else
                acc[r][v] = (vd){0, 0, 0, 0};
    for (int p = 0; p < k; p++) {
        const double *b = B + (size_t)p * ldb;
        vd bv[MAX_V];
#pragma GCC unroll 8
        for (int v = 0; v < V; v++)
            VLOAD(bv[v], b + 4 * v);
#pragma GCC unroll 8
        for (int r = 0; r < R; r++) {
            double x = A[(size_t)r * lda + p];
#pragma GCC unroll 8
            for (int v = 0; v < V; v++)
                acc[r][v] += x * bv[v];
        }
    }
#pragma GCC unroll 8
    for (int r = 0; r < R; r++)
#pragma GCC unroll 8
        for (int v = 0; v < V; v++)
            VSTORE(T + (size_t)r * ldt + 4 * v, acc[r][v]);
}

/* The same for one column (the last n mod 4 columns of C = A B). */
INLINE void block1(const int R, int k, const double *A, size_t lda, const double *B, size_t ldb,
                   int add, double *T, size_t ldt)
{
    double acc[MAX_R];
#pragma GCC unroll 8
    for (int r = 0; r < R; r++)
        acc[r] = add ? T[(size_t)r * ldt] : 0;
    for (int p = 0; p < k; p++) {
        double b = B[(size_t)p * ldb];
#pragma GCC unroll 8
        for (int r = 0; r < R; r++)
            acc[r] += A[(size_t)r * lda + p] * b;
    }
#pragma GCC unroll 8
    for (int r = 0; r < R; r++)
        T[(size_t)r * ldt] = acc[r];
}

/* C = A B for R rows and w columns (a panel): blocks of V vectors (8 for
 * one row, 4 for two, 2 for more: 6 to 12 sums, enough in flight to hide
 * the latency of an addition), then single vectors, then single columns. */
INLINE void nn_panel(const int R, int w, int k, const double *A, size_t lda, const double *B,
                     size_t ldb, int add, double *C, size_t ldc)
{
    const int V = R == 1 ? 8 : R == 2 ? 4 : 2;
    int c = 0;
    for (; c + 4 * V <= w; c += 4 * V)
        block(R, V, k, A, lda, B + c, ldb, add, C + c, ldc);
    for (; c + 4 <= w; c += 4)
        block(R, 1, k, A, lda, B + c, ldb, add, C + c, ldc);
    for (; c < w; c++)
        block1(R, k, A, lda, B + c, ldb, add, C + c, ldc);
}

__attribute__((target_clones("avx2", "default"))) static void
gemm_nn(int m, int n, int k, const double *A, size_t lda, const double *B, size_t ldb, int add,
        double *C, size_t ldc)
{
    for (int c0 = 0; c0 < n; c0 += PANEL) {
        int w = n - c0 < PANEL ? n - c0 : PANEL;
        for (int r0 = 0; r0 < m; r0 += MAX_R) {
            const double *Ar = A + (size_t)r0 * lda, *Bp = B + c0;
            double *Cr = C + (size_t)r0 * ldc + c0;
            switch (m - r0 < MAX_R ? m - r0 : MAX_R) {
            case 1: nn_panel(1, w, k, Ar, lda, Bp, ldb, add, Cr, ldc); break;
            case 2: nn_panel(2, w, k, Ar, lda, Bp, ldb, add, Cr, ldc); break;
            case 3: nn_panel(3, w, k, Ar, lda, Bp, ldb, add, Cr, ldc); break;
            case 4: nn_panel(4, w, k, Ar, lda, Bp, ldb, add, Cr, ldc); break;
            case 5: nn_panel(5, w, k, Ar, lda, Bp, ldb, add, Cr, ldc); break;
            default: nn_panel(6, w, k, Ar, lda, Bp, ldb, add, Cr, ldc); break;
            }
        }
    }
}

void nd_small_gemm_nn(int m, int n, int k, const double *A, int lda, const double *B, int ldb,
                      int add, double *C, int ldc)
{
    gemm_nn(m, n, k, A, (size_t)lda, B, (size_t)ldb, add, C, (size_t)ldc);
}

/* T (J x 4V, ld 4V) = B_J (J x kc, ldb) AT (kc x 4V): J weight rows against
 * V vectors of rows of A, in register blocks of at most 3 vectors (at most
 * 12 sums for J = 4), written out per V so that every block has constant
 * sizes. */
INLINE void nt_rows(const int J, const int V, int kc, const double *Bj, size_t ldb,
                    const double *AT, double *T)
{
    const size_t w = 4 * (size_t)V;
    if (V <= 3) {
        block(J, V, kc, Bj, ldb, AT, w, 0, T, w);
    } else if (V == 4) {
        block(J, 2, kc, Bj, ldb, AT, w, 0, T, w);
        block(J, 2, kc, Bj, ldb, AT + 8, w, 0, T + 8, w);
    } else if (V <= 6) {
        block(J, 3, kc, Bj, ldb, AT, w, 0, T, w);
        block(J, V - 3, kc, Bj, ldb, AT + 12, w, 0, T + 12, w);
    } else {
        block(J, 3, kc, Bj, ldb, AT, w, 0, T, w);
        block(J, 3, kc, Bj, ldb, AT + 12, w, 0, T + 12, w);
        block(J, V - 6, kc, Bj, ldb, AT + 24, w, 0, T + 24, w);
    }
}

/* C = A B^T for 4 .. NT_ROWS rows, V = ceil(m / 4) vectors of rows (a
 * constant): for each stretch of KC entries of the sum, A's stretch is
 * copied transposed into AT (kc x 4V, the rows beyond m zero); then each
 * block of J weight rows gives T = B_J AT, added into C. */
INLINE void nt_tall(const int V, int m, int n, int k, const double *A, size_t lda,
                    const double *B, size_t ldb, int add, double *C, size_t ldc)
{
    const int w = 4 * V, J = V == 1 ? 8 : 4;
    _Alignas(32) double AT[KC * NT_ROWS];
    double T[MAX_RB * NT_ROWS];
    for (int p0 = 0; p0 < k; p0 += KC) {
        int kc = k - p0 < KC ? k - p0 : KC;
        for (int p = 0; p < kc; p++) {
            double *at = AT + (size_t)p * w;
            for (int r = 0; r < m; r++)
                at[r] = A[(size_t)r * lda + p0 + p];
            for (int r = m; r < w; r++)
                at[r] = 0;
        }
        int keep = add || p0 > 0;
        for (int j0 = 0; j0 < n;) {
            const double *Bj = B + (size_t)j0 * ldb + p0;
            int nj = n - j0 >= J ? J : 1;
            if (nj == J)
                nt_rows(J, V, kc, Bj, ldb, AT, T);
            else
                nt_rows(1, V, kc, Bj, ldb, AT, T);
            for (int r = 0; r < m; r++) {
                double *c = C + (size_t)r * ldc + j0;
                for (int j = 0; j < nj; j++)
                    c[j] = (keep ? c[j] : 0) + T[(size_t)j * w + r];
            }
            j0 += nj;
        }
    }
}

/* One block of C = A B^T (+ C) for R <= 3 rows and J <= 8 weight rows:
 * dot products over k in four lanes (entry p in lane p mod 4, the last
 * k mod 4 entries added one by one), the lanes added up at the end. */
INLINE void dot_block(const int R, const int J, int k, const double *A, size_t lda,
                      const double *B, size_t ldb, int add, double *C, size_t ldc)
{
    vd acc[3][8];
    const int k4 = k & ~3;
#pragma GCC unroll 3
    for (int r = 0; r < R; r++)
#pragma GCC unroll 8
        for (int j = 0; j < J; j++)
            acc[r][j] = (vd){0, 0, 0, 0};
    for (int p = 0; p < k4; p += 4) {
        vd a[3];
#pragma GCC unroll 3
        for (int r = 0; r < R; r++)
            VLOAD(a[r], A + (size_t)r * lda + p);
#pragma GCC unroll 8
        for (int j = 0; j < J; j++) {
            vd b;
            VLOAD(b, B + (size_t)j * ldb + p);
#pragma GCC unroll 3
            for (int r = 0; r < R; r++)
                acc[r][j] += a[r] * b;
        }
    }
#pragma GCC unroll 3
    for (int r = 0; r < R; r++)
#pragma GCC unroll 8
        for (int j = 0; j < J; j++) {
            vd s = acc[r][j];
            double t = (s[0] + s[1]) + (s[2] + s[3]);
            for (int p = k4; p < k; p++)
                t += A[(size_t)r * lda + p] * B[(size_t)j * ldb + p];
            double *c = C + (size_t)r * ldc + j;
            *c = add ? *c + t : t;
        }
}

/* C = A B^T for R <= 3 rows: blocks of J weight rows (8 for one row, 4 for
 * two, 3 for three: 8 or 9 sums, with the rows of A and a row of B still
 * in registers), then single weight rows. */
INLINE void nt_short(const int R, int n, int k, const double *A, size_t lda, const double *B,
                     size_t ldb, int add, double *C, size_t ldc)
{
    const int J = R == 1 ? 8 : R == 2 ? 4 : 3;
    int j = 0;
    for (; j + J <= n; j += J)
        dot_block(R, J, k, A, lda, B + (size_t)j * ldb, ldb, add, C + j, ldc);
    for (; j < n; j++)
        dot_block(R, 1, k, A, lda, B + (size_t)j * ldb, ldb, add, C + j, ldc);
}

__attribute__((target_clones("avx2", "default"))) static void
gemm_nt(int m, int n, int k, const double *A, size_t lda, const double *B, size_t ldb, int add,
        double *C, size_t ldc)
{
    if (k <= 0) { /* an empty sum: the stretches below would not run */
        for (int r = 0; r < m && !add; r++)
            memset(C + (size_t)r * ldc, 0, sizeof(double) * (size_t)n);
        return;
    }
    for (; m > NT_ROWS; m -= NT_ROWS, A += NT_ROWS * lda, C += NT_ROWS * ldc)
        nt_tall(NT_ROWS / 4, NT_ROWS, n, k, A, lda, B, ldb, add, C, ldc);
    switch (m) {
    case 1: nt_short(1, n, k, A, lda, B, ldb, add, C, ldc); return;
    case 2: nt_short(2, n, k, A, lda, B, ldb, add, C, ldc); return;
    case 3: nt_short(3, n, k, A, lda, B, ldb, add, C, ldc); return;
    default: break;
    }
    switch ((m + 3) / 4) {
    case 1: nt_tall(1, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    case 2: nt_tall(2, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    case 3: nt_tall(3, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    case 4: nt_tall(4, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    case 5: nt_tall(5, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    case 6: nt_tall(6, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    case 7: nt_tall(7, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    default: nt_tall(8, m, n, k, A, lda, B, ldb, add, C, ldc); break;
    }
}

void nd_small_gemm_nt(int m, int n, int k, const double *A, int lda, const double *B, int ldb,
                      int add, double *C, int ldc)
{
    gemm_nt(m, n, k, A, (size_t)lda, B, (size_t)ldb, add, C, (size_t)ldc);
}
