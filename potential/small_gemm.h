/* Module-internal: matrix products for matrices of few rows, as the
 * networks see them on one molecule (a handful of atoms per element).
 *
 * OpenBLAS copies ("packs") both operands into blocked buffers on every
 * call. For a chunk of a few rows, packing the weight matrix costs about as
 * much as the product itself (a perf profile of nd_potential_compute on a
 * 50-atom molecule: 25% of the time in the two copy routines, 52% in the
 * multiply). These kernels read the weights where they are, once per call
 * from memory, keeping the sums of a block of rows and columns in
 * registers. network.c uses them for chunks of at most
 * ND_SMALL_GEMM_MAX_ROWS rows and OpenBLAS for taller ones; the choice
 * depends on the row count only, so results do not depend on the thread
 * count.
 *
 * Matrices are row-major with leading dimensions (doubles between rows);
 * alpha is 1, beta is 0 or 1 (add). Sums run in a fixed order that depends
 * only on the shapes: the same inputs give the same bits. */
#ifndef ND_SMALL_GEMM_H
#define ND_SMALL_GEMM_H

/* Row counts up to which network.c uses these kernels instead of OpenBLAS.
 * Measured (AMD EPYC, 1 thread, OpenBLAS 0.3.21) on the layer shapes of the
 * default model with 4 members, time of the four products of a forward
 * and backward pass relative to OpenBLAS, the weights warm in cache:
 *   rows   1-3  4-6   8    12   16   20   22   24   28   32   48   64   96
 *   ratio 0.32 0.45 0.73 0.65 0.89 0.77 0.71 0.97 1.03 0.98 1.03 1.02 1.10
 * and on whole calls (nd_potential_compute, energy and gradient, bundled
 * model) of a 66-atom molecule with 30 carbons and 28 hydrogens, these
 * kernels against OpenBLAS for those two elements: 0.90 of the time for
 * the mean of 4 members, 1.00 for one member. */
#define ND_SMALL_GEMM_MAX_ROWS 32

/* C (m x n) = A (m x k) B^T, plus the old C when add: B is n x k (a weight
 * matrix stored output by input, applied to the rows of A). */
void nd_small_gemm_nt(int m, int n, int k, const double *A, int lda, const double *B, int ldb,
                      int add, double *C, int ldc);

/* C (m x n) = A (m x k) B, plus the old C when add: B is k x n. */
void nd_small_gemm_nn(int m, int n, int k, const double *A, int lda, const double *B, int ldb,
                      int add, double *C, int ldc);

#endif
